"""Refer every reading to its pump's reference conditions (rated pressure, reference oil temperature).

Leakage is laminar: it grows with pressure and falls with viscosity. A hot afternoon or a low working
pressure would otherwise look like wear or like recovery. Readings that cannot be referred keep their row
with a plain-words `flag` and stay out of the fits.
"""

import numpy as np
import pandas as pd

from fleet.physics.leakage import leakage_power_kw, referral_factor
from fleet.physics.oil import dynamic_viscosity_pas, kinematic_viscosity_cst, viscosity_window_flag
from fleet.physics.pump import theoretical_flow_lpm
from fleet.trend.settings import AnalysisSettings

DEFAULT_REFERENCE_TEMP_C = 50.0

# A routine reading (pressure, temperature, hours) without a flow or drain measurement: kept, not trended,
# and no cause for concern on its own.
NO_LEAKAGE_MEASURED = "no outlet flow or case drain measured"
FLOW_TEST_COLUMNS = ["flow_test_points", "leak_lpm_per_bar", "leak_lpm_per_bar_ref"]  # flow_test_leakage's


def _num(frame: pd.DataFrame, column: str) -> np.ndarray:
    if column not in frame:
        return np.full(len(frame), np.nan)
    values = frame[column]
    if values.dtype.kind in "fiu":  # numbers already (the usual case): no parse, the values as floats
        return values.to_numpy(dtype=float)
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)


def _flags(frame: pd.DataFrame, column: str) -> np.ndarray:
    """A yes/no column as bools, a missing value as no (as fillna(False).astype(bool))."""
    if column not in frame:
        return np.zeros(len(frame), dtype=bool)
    values = frame[column]
    if values.dtype == bool:
        return values.to_numpy()
    return values.fillna(False).astype(bool).to_numpy()


def _pump_fields(pumps: pd.DataFrame) -> dict[str, np.ndarray]:
    """The pump fields the referral reads, as plain arrays (one per pump, in the pumps' order)."""
    rated_theoretical = np.asarray(theoretical_flow_lpm(_num(pumps, "displacement_cc"),
                                                        _num(pumps, "rated_speed_rpm")), dtype=float)
    given = _num(pumps, "max_flow_lpm")
    ref = _num(pumps, "reference_temp_c")
    return {
        "pump_id": pumps["pump_id"].to_numpy() if "pump_id" in pumps else np.full(len(pumps), np.nan),
        "variable": _flags(pumps, "variable"),
        "displacement_cc": _num(pumps, "displacement_cc"),
        "rated_speed_rpm": _num(pumps, "rated_speed_rpm"),
        "rated_pressure_bar": _num(pumps, "rated_pressure_bar"),
        "max_flow_lpm": np.where(np.isfinite(given), given, rated_theoretical),
        "case_drain": _flags(pumps, "case_drain"),
        "reference_temp_c": np.where(np.isfinite(ref), ref, DEFAULT_REFERENCE_TEMP_C),
    }


def _add_flag(flag: np.ndarray, mask: np.ndarray, text: str) -> np.ndarray:
    """Append `text` to the reason of every masked reading ("; " between several)."""
    idx = np.flatnonzero(mask)
    if len(idx):
        current = flag[idx]
        flag[idx] = np.where(pd.isna(current), text, current.astype(str) + "; " + text)
    return flag


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    ok = np.isfinite(den) & (den > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, num / np.where(ok, den, 1.0), np.nan)


def refer_readings(
    readings: pd.DataFrame,
    pumps: pd.DataFrame,
    flow_points: pd.DataFrame | None = None,
    settings: AnalysisSettings | None = None,
) -> pd.DataFrame:
    """One row per reading (same order, never dropped) with the referred quantities added.

    Added columns: q_th_lpm, eta_v, slip_lpm, nu_cst, viscosity_window, mu_pas, mu_ref_pas,
    referral_factor, slip_ref_lpm, eta_v_ref, drain_ref_lpm, drain_pct_ref, leakage_kw, flag, the pump's
    rated_flow_lpm (V_g n_r / 1000, the base of eta_v,ref) and max_flow_lpm (the base of drain %), and, from
    multi-point flow tests, flow_test_points, leak_lpm_per_bar and leak_lpm_per_bar_ref.
    """
    s = settings or AnalysisSettings()
    r = readings.reset_index(drop=True)
    # Each reading's pump fields by position (a lookup, not a merge of the frames).
    fields = _pump_fields(pumps)
    pump_index = pd.Index(fields["pump_id"])
    if not pump_index.is_unique:
        raise ValueError("pumps: more than one row for a pump_id")
    at = pump_index.get_indexer(r["pump_id"])

    def pump_value(column: str, missing=np.nan) -> np.ndarray:
        values = fields[column]
        if len(values) == 0:
            return np.full(len(at), missing)
        return np.where(at >= 0, values[np.maximum(at, 0)], missing)

    vg = pump_value("displacement_cc")
    known_pump = ~np.isnan(vg)
    variable = pump_value("variable", False)
    has_drain_port = pump_value("case_drain", False)

    n = _num(r, "speed_rpm")
    n_rated = pump_value("rated_speed_rpm")
    p = _num(r, "pressure_bar")
    p_rated = pump_value("rated_pressure_bar")
    flow = _num(r, "flow_lpm")
    drain = np.where(has_drain_port, _num(r, "drain_lpm"), np.nan)
    temp = _num(r, "temp_c")
    hours = _num(r, "hours")
    stroke_given = _num(r, "stroke")
    # A fixed pump always runs at full stroke; a variable pump's flow means nothing without its setting.
    stroke = np.where(variable, stroke_given, np.where(np.isfinite(stroke_given), stroke_given, 1.0))
    nu40, nu100, rho15 = _num(r, "nu40"), _num(r, "nu100"), _num(r, "density15")
    t_ref = pump_value("reference_temp_c")

    q_th = np.asarray(theoretical_flow_lpm(vg, n, stroke), dtype=float)
    rated_flow = np.asarray(theoretical_flow_lpm(vg, n_rated), dtype=float)
    max_flow = pump_value("max_flow_lpm")
    nu = np.asarray(kinematic_viscosity_cst(temp, nu40, nu100), dtype=float)
    mu = np.asarray(dynamic_viscosity_pas(temp, nu40, nu100, rho15), dtype=float)
    mu_ref = np.asarray(dynamic_viscosity_pas(t_ref, nu40, nu100, rho15), dtype=float)
    factor = np.asarray(referral_factor(p, p_rated, mu, mu_ref), dtype=float)

    slip = q_th - flow
    slip_ref = slip * factor
    drain_ref = drain * factor

    flag = np.full(len(r), None, dtype=object)
    rules = [
        (~(p > 0), "no working pressure recorded"),
        (variable & ~np.isfinite(stroke_given), "variable pump without its displacement setting"),
        (np.isfinite(stroke) & ~((stroke > 0) & (stroke <= 1)), "displacement setting outside 0-100 %"),
        (~np.isfinite(temp), "no oil temperature recorded"),
        (~(np.isfinite(nu40) & np.isfinite(nu100) & np.isfinite(rho15)), "no oil data for the machine"),
        (np.isfinite(temp) & np.isfinite(nu40) & ~(np.isfinite(mu) & np.isfinite(mu_ref)), "oil data unusable"),
        (~np.isfinite(n), "no shaft speed recorded"),
        (
            np.isfinite(n) & ~((n >= s.speed_ratio_range[0] * n_rated) & (n <= s.speed_ratio_range[1] * n_rated)),
            f"shaft speed outside {s.speed_ratio_range[0]:.0%}-{s.speed_ratio_range[1]:.0%} of rated",
        ),
        (p > s.max_pressure_ratio * p_rated, f"pressure above {s.max_pressure_ratio:.0%} of rated"),
        (
            np.isfinite(temp) & ~((temp >= s.temp_range_c[0]) & (temp <= s.temp_range_c[1])),
            f"oil temperature outside {s.temp_range_c[0]:g}..{s.temp_range_c[1]:g} degC",
        ),
        (flow > s.max_flow_over_theoretical * q_th, f"flow above {s.max_flow_over_theoretical:.0%} of theoretical"),
        (~np.isfinite(hours), "no running hours recorded"),
        (hours < 0, "negative running hours"),
        (~np.isfinite(flow) & ~np.isfinite(drain), NO_LEAKAGE_MEASURED),
    ]
    flag = _add_flag(flag, ~known_pump, "pump not on record")
    for mask, text in rules:  # the other rules compare with the pump's ratings, so only for known pumps
        flag = _add_flag(flag, np.asarray(mask, dtype=bool) & known_pump, text)
    good = pd.isna(flag)

    added = {
        "q_th_lpm": q_th,
        "rated_flow_lpm": rated_flow,
        "max_flow_lpm": max_flow,
        "eta_v": _ratio(flow, q_th),
        "slip_lpm": slip,
        "nu_cst": nu,
        "viscosity_window": np.asarray(viscosity_window_flag(nu), dtype=object),
        "mu_pas": mu,
        "mu_ref_pas": mu_ref,
        "referral_factor": np.where(good, factor, np.nan),
        "slip_ref_lpm": np.where(good, slip_ref, np.nan),
        "eta_v_ref": np.where(good, 1.0 - _ratio(slip_ref, rated_flow), np.nan),
        "drain_ref_lpm": np.where(good, drain_ref, np.nan),
        "drain_pct_ref": np.where(good, 100.0 * _ratio(drain_ref, max_flow), np.nan),
        "leakage_kw": np.asarray(leakage_power_kw(p, slip), dtype=float),
        "flag": flag,
    }
    no_tests = flow_points is None or len(flow_points) == 0 or "reading_id" not in r
    if no_tests:  # no flow tests: NaN columns, framed with the rest (an assign after would copy the frame again)
        added.update({name: np.full(len(r), np.nan) for name in FLOW_TEST_COLUMNS})
    # The added columns framed once beside the readings (not inserted one by one, a copy each time).
    out = pd.concat([r, pd.DataFrame(added, index=r.index)], axis=1)
    if no_tests:
        return out
    tests = flow_test_leakage(out, flow_points)
    return out.join(tests, on="reading_id")


def flow_test_leakage(referred: pd.DataFrame, flow_points: pd.DataFrame | None) -> pd.DataFrame:
    """Leakage per bar from multi-point flow tests, indexed by reading_id.

    The slope of outlet flow against pressure over a reading's extra points plus its own point is the
    leakage per bar (L/min/bar, reported positive); multiplied by mu(T)/mu(T_ref) it is referred to the
    reference viscosity (pressure needs no referral: the slope is already per bar). Least squares slope
    from grouped sums; NaN with fewer than two distinct pressures.
    """
    if flow_points is None or len(flow_points) == 0 or "reading_id" not in referred:
        return pd.DataFrame(columns=FLOW_TEST_COLUMNS, index=pd.Index([], name="reading_id"), dtype=float)
    own = referred.loc[
        referred["reading_id"].isin(flow_points["reading_id"]), ["reading_id", "pressure_bar", "flow_lpm"]
    ]
    pts = pd.concat([flow_points[["reading_id", "pressure_bar", "flow_lpm"]], own], ignore_index=True)
    pts = pts[np.isfinite(_num(pts, "pressure_bar")) & np.isfinite(_num(pts, "flow_lpm"))]
    x, y = _num(pts, "pressure_bar"), _num(pts, "flow_lpm")
    sums = pd.DataFrame({"id": pts["reading_id"].to_numpy(), "n": 1.0, "x": x, "y": y, "xx": x * x, "xy": x * y})
    g = sums.groupby("id").sum()
    sxx = g["xx"] - g["x"] ** 2 / g["n"]
    sxy = g["xy"] - g["x"] * g["y"] / g["n"]
    # Relative tolerance: pressures that differ by rounding only give no slope.
    spread_ok = (sxx > 1e-9 * g["xx"]) & (g["n"] >= 2)
    slope = np.where(spread_ok, _ratio(sxy.to_numpy(), np.where(spread_ok, sxx.to_numpy(), np.nan)), np.nan)
    mu_ratio = referred.set_index("reading_id").reindex(g.index)
    viscosity_ratio = _ratio(mu_ratio["mu_pas"].to_numpy(dtype=float), mu_ratio["mu_ref_pas"].to_numpy(dtype=float))
    leak = -slope
    return pd.DataFrame(
        {
            "flow_test_points": g["n"].to_numpy(),
            "leak_lpm_per_bar": leak,
            "leak_lpm_per_bar_ref": leak * viscosity_ratio,
        },
        index=pd.Index(g.index, name="reading_id"),
    )
