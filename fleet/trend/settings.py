"""Tunable settings of the trend engine, with where each default comes from."""

from dataclasses import dataclass


@dataclass(frozen=True)
class AnalysisSettings:
    """Knobs of one fleet analysis. Defaults are our own choices unless a comment names a source."""

    # Two-sided confidence level of the remaining-life bounds and chart bands.
    confidence: float = 0.90
    # Minimum data for a pump's own trend: usable readings and the running hours they span.
    min_points: int = 4
    min_span_hours: float = 300.0
    # Flow-meter noise, one standard deviation as a fraction of the reading (a typical turbine or gear meter).
    flow_noise_fraction: float = 0.005
    # Case drain meter noise as a fraction of the reading (small-flow meters and timed buckets are cruder).
    drain_noise_fraction: float = 0.02
    # Robust fit: Huber tuning constant (95 % efficiency under normal errors, Huber 1964) and IRLS passes.
    huber_k: float = 1.345
    irls_iterations: int = 8
    # ... stopping early once no fitted value moves by more than this (relative) between passes.
    irls_tolerance: float = 1e-4
    # How the wear laws are weighed: "aicc" (small-sample AIC on all readings) or "held_back" (how well each
    # law, fitted to the earlier readings, forecasts the last `law_held_back` share of the hours spanned).
    # AICc is the default: on the invented fleets of benchmarks/calibration.py it gave the smaller errors and
    # the better-holding bands for every law but one (python3 -m benchmarks.calibration --weighting held_back).
    law_weighting: str = "aicc"
    law_held_back: float = 0.3
    # The wear laws compared (fleet.trend.wear_laws.LAWS); fewer for a known law, as the calibration benchmark's
    # --known-law does to find the best any fit of that law reaches on the same readings.
    wear_laws: tuple[str, ...] = ("exponential", "linear", "power", "run_in")
    # The prior over the shapes within the power and run-in laws (fleet.trend.shape_prior): "flat" (every
    # exponent and run-in shape alike), or "pooled": fitted from the intervals analysed together, per pump kind
    # (a kind with under `shape_prior_min_intervals` intervals' worth of a family's weight takes every kind's),
    # the forecast following it and the band not. Flat is the default: on the invented fleets of
    # benchmarks/calibration.py (--shape-prior pooled) pooling cut accelerating and run-in wear's errors by 1 to 2
    # points, no target newly met (README, calibration), and a pooled prior makes one pump's figures depend on
    # the pumps analysed with it (a part of the fleet, a posted reading's refresh) until priors are stored.
    shape_prior: str = "flat"
    shape_prior_min_intervals: float = 20.0
    # Slip below this fraction of theoretical flow is floored before the log (noise can push flow above theory).
    slip_floor_fraction: float = 0.001

    # Plausibility of a reading (outside: flagged, kept, not fitted).
    max_flow_over_theoretical: float = 1.05
    speed_ratio_range: tuple[float, float] = (0.3, 1.3)
    max_pressure_ratio: float = 1.5
    temp_range_c: tuple[float, float] = (-30.0, 130.0)

    # Calendar: hours per day from the hour meter over this many recent days (else the whole interval).
    hours_per_day_window_days: float = 120.0
    # Typical working pressure and oil temperature: median over this many recent days of the interval.
    typical_window_days: float = 90.0

    # Watch rules.
    fast_decline_per_1000h: float = 0.02  # eta_v,ref fraction lost per 1000 h; our choice (2 points)
    drain_jump_ratio: float = 2.0  # a doubling of case drain means act now (common practice, no source)
    water_limit_ppm: float = 500.0  # mineral oil, common practice, no source
    lab_late_days: float = 14.0  # sampled this long ago and still not reported

    # Fleet prior (Weibull of hours between overhauls).
    min_weibull_failures: int = 3
