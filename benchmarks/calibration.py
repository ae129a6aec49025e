"""Calibration of the wear forecasts: do the hours to limit come out right, and do the 90 % bands hold?

Many invented fleets (all data invented) wear by known laws: exponential, linear, accelerating (a power of
the hours above 1) and run-in (a fast early rise that settles into steady wear). On top come flow-meter noise
that differs by pump, gross outliers, variable pumps read at part stroke, speed swings, gaps in the rounds and
readings that begin hours after the interval's start (an overhaul at some meter value, or a pump first read
long after it was new). Each fleet goes through fleet.trend.engine.analyze_fleet, the entry `fleet analyze`
uses, with frames shaped as fleet.frames says.

Reported per law and overall, for the pumps not yet at their limit that have a trend: the median relative
error of the hours to limit (intervals with at least 8 readings) and the share of pumps whose true remaining
hours lie inside the band (an open upper bound holds everything above its lower bound).

With --known-law every pump is also analysed with its true law alone (the accelerating law is the power law,
its exponent still free): the best that fitting reaches on the same readings, the floor under the averaged
forecast's error, reported beside it.

    python3 -m benchmarks.calibration [--size small|full] [--seed N] [--known-law] [--out figures.json]
"""

import argparse
import json
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd

from benchmarks.wear_fleets import (
    DRAIN_SHARE,
    START,
    Disturbances,
    make_pumps,
    no_events,
    wear_readings,
)
from fleet.trend.engine import analyze_fleet
from fleet.trend.settings import AnalysisSettings
from fleet.trend.shape_prior import ALL_KINDS
from fleet.trend.wear_laws import MEMBERS

LAWS = ("exponential", "linear", "accelerating", "run_in")
ENGINE_LAW = {"exponential": "exponential", "linear": "linear", "accelerating": "power", "run_in": "run_in"}
MAX_READINGS = 60
MIN_READINGS_FOR_ERROR = 8
TARGET_COVERAGE = (0.85, 0.95)
TARGET_MEDIAN_ERROR = 0.10
DISTURB = Disturbances(outlier_share=0.03, part_stroke_share=0.3, unrecorded_stroke_share=0.03, speed_swing=0.06)


@dataclass(frozen=True)
class Size:
    fleets: int
    pumps_per_fleet: int


SIZES = {"small": Size(fleets=2, pumps_per_fleet=60), "full": Size(fleets=24, pumps_per_fleet=250)}


def _shape(law: np.ndarray, ratio, crossing, power, share, tau):
    """Slip coefficient multiplier of each pump as a function of interval hours: 1 at 0, `ratio` at `crossing`."""

    def wear(pump_idx, h):
        lw, r, t = law[pump_idx], ratio[pump_idx], crossing[pump_idx]
        u = np.maximum(h, 0.0) / t
        run_in_curve = share[pump_idx] * (1 - np.exp(-u / tau[pump_idx])) + (1 - share[pump_idx]) * u
        run_in_end = share[pump_idx] * (1 - np.exp(-1 / tau[pump_idx])) + (1 - share[pump_idx])
        return np.select(
            [lw == "exponential", lw == "linear", lw == "accelerating"],
            [r**u, 1 + (r - 1) * u, 1 + (r - 1) * u ** power[pump_idx]],
            1 + (r - 1) * run_in_curve / run_in_end,
        )

    return wear


def invented_fleet(seed: int, n: int):
    """One invented fleet: pumps, readings, events, and the truth per pump (crossing in interval hours, law)."""
    rng = np.random.default_rng(seed)
    pumps = make_pumps(n, rng)
    gear = rng.random(n) < 0.4  # gear pumps: no case drain, their own limit
    pumps["kind"] = np.where(gear, "external_gear", "axial_piston")
    pumps["case_drain"] = ~gear
    pumps["variable"] = ~gear & (rng.random(n) < 0.5)
    pumps["eta_v_limit"] = np.where(gear, 0.80, 0.85)
    eta_new = rng.uniform(0.93, 0.96, n)
    ratio = (1 - pumps["eta_v_limit"].to_numpy()) / (1 - eta_new)
    # The drain limit sits above the drain the slip limit brings, so the eta_v limit is the true governing one.
    pumps["drain_limit_pct"] = np.where(gear, np.nan, 100 * DRAIN_SHARE * (1 - 0.85) * rng.uniform(1.15, 1.6, n))
    law = rng.choice(np.array(LAWS), n)
    crossing = rng.uniform(6000.0, 16000.0, n)
    power = rng.uniform(1.6, 3.0, n)
    share = rng.uniform(0.3, 0.6, n)
    tau = rng.uniform(0.05, 0.2, n)
    # Readings from some way into the interval to some way short of the limit (a tenth of pumps beyond it).
    first = np.where(rng.random(n) < 0.5, 0.0, rng.uniform(0.0, 0.25, n)) * crossing
    beyond = rng.random(n) < 0.1
    last = np.where(beyond, rng.uniform(1.03, 1.25, n), rng.uniform(0.45, 0.95, n)) * crossing
    count = rng.integers(5, MAX_READINGS + 1, n)
    per_day = rng.uniform(6.0, 22.0, n)
    every = (last - first) / per_day / (count - 1)
    # After an overhaul at some meter value, or (no event) a pump first read some hours after it was new.
    overhauled = rng.random(n) < 0.5
    meter_at_start = np.where(overhauled, rng.uniform(5000.0, 40000.0, n), 0.0)
    readings = wear_readings(
        pumps, rng, n_readings=MAX_READINGS, every_days=every, eta_new=eta_new, hours_per_day=per_day,
        start_hours=meter_at_start, first_interval_hours=first, noise=rng.uniform(0.003, 0.008, n),
        wear=_shape(law, ratio, crossing, power, share, tau), disturb=DISTURB,
    )
    index = readings.groupby("pump_id").cumcount().to_numpy()
    keep = index < count[readings["pump_id"].to_numpy() - 1]
    # Gaps: a third of the pumps miss a run of rounds in mid-interval.
    gap = rng.random(n) < 0.33
    gap_start = rng.uniform(0.2, 0.6, n) * count
    gap_len = rng.uniform(0.1, 0.3, n) * count
    p = readings["pump_id"].to_numpy() - 1
    in_gap = gap[p] & (index >= gap_start[p]) & (index < gap_start[p] + gap_len[p]) & (index > 0)
    readings = readings[keep & ~in_gap].reset_index(drop=True)
    start_at = START + pd.Timedelta(hours=9) - pd.to_timedelta(first / per_day, unit="D")
    o = np.flatnonzero(overhauled)
    events = pd.concat([no_events(), pd.DataFrame({
        "pump_id": pumps["pump_id"].to_numpy()[o], "date": start_at[o].normalize(), "hours": meter_at_start[o],
        "kind": "overhaul", "cost": 4000.0,
    })], ignore_index=True)
    # Without an event the engine counts interval hours from the first reading, and the meter from new.
    counted_from = np.where(overhauled, 0.0, first)
    # The shape in the engine's terms (hours as a share of the latest reading's, H): the power law's exponent is
    # the same; the run-in's time constant and share are rescaled from the life to the limit to H.
    reach = last / crossing
    run_in_part = share * -np.expm1(-reach / tau)
    truth = pd.DataFrame({"law": law, "crossing": crossing - counted_from, "beyond": beyond, "power": power,
                          "run_in_tau": tau / reach, "run_in_share": run_in_part / (run_in_part + (1 - share) * reach)},
                         index=pumps["pump_id"].to_numpy())
    return pumps, readings, events, truth


def own_shape_priors(truth: pd.DataFrame) -> pd.DataFrame:
    """Shape priors (rows as fleet.trend.shape_prior.fit_shape_priors) that put every pump's whole prior on the
    grid member nearest its own true shape, one row per pump (its kind its pump_id): what knowing each pump's
    shape would give, which no fleet can fit (a diagnostic of the limit of pooling, --shape-known)."""
    names = [m.name for m in MEMBERS]
    power = np.array([m.power if m.law == "power" else np.nan for m in MEMBERS])
    tau = np.array([m.tau if m.law == "run_in" else np.nan for m in MEMBERS])
    share = np.array([m.share if m.law == "run_in" else np.nan for m in MEMBERS])
    rows = np.zeros((len(truth), len(MEMBERS)))
    families = {law: np.array([m.law == law for m in MEMBERS]) for law in ("power", "run_in")}
    for i, (law, p, t, s) in enumerate(truth[["law", "power", "run_in_tau", "run_in_share"]].itertuples(False)):
        rows[i, :2] = 1.0
        for of_family in families.values():
            rows[i, of_family] = 1.0 / of_family.sum()  # flat where the pump does not wear by that family
        if law == "accelerating":
            distance = np.abs(np.log(power / p))
        elif law == "run_in":  # grid steps: a sixth of a decade in tau, 0.1 in the share
            distance = (np.log(tau / t) / (np.log(10.0) / 6.0)) ** 2 + ((share - s) / 0.1) ** 2
        else:
            continue
        of_family = families[ENGINE_LAW[law]]
        rows[i, of_family] = 1e-12
        rows[i, np.nanargmin(np.where(of_family, distance, np.nan))] = 1.0
    own = pd.DataFrame(rows, index=truth.index.astype(object), columns=names)
    flat = pd.DataFrame([own.iloc[0] * 0 + 1.0], index=[ALL_KINDS], columns=names)
    for of_family in families.values():
        flat.loc[ALL_KINDS, of_family] = 1.0 / of_family.sum()
    return pd.concat([own, flat])


def run_fleet(seed: int, n: int, weighting: str = "aicc", known_law: bool = False, shape_prior: str = "flat",
              shape_known: bool = False) -> pd.DataFrame:
    """The engine's results beside the truth for one invented fleet; known_law: each pump fitted with its true
    law alone (the fleet analysed in one part per law); shape_known: each pump's shape prior on its own true
    shape (own_shape_priors)."""
    pumps, readings, events, truth = invented_fleet(seed, n)
    now = readings["taken_at"].max() + pd.Timedelta(days=1)
    shape_priors = None
    if shape_known:
        pumps["kind"] = pumps["pump_id"].astype(object)
        shape_prior, shape_priors = "pooled", own_shape_priors(truth)
    parts = [(AnalysisSettings(law_weighting=weighting, shape_prior=shape_prior), pumps["pump_id"].to_numpy())]
    if known_law:
        parts = [(AnalysisSettings(law_weighting=weighting, shape_prior=shape_prior, wear_laws=(ENGINE_LAW[law],)),
                  truth.index[truth["law"] == law].to_numpy()) for law in LAWS]
    results = []
    for settings, ids in parts:
        analysis = analyze_fleet(pumps[pumps["pump_id"].isin(ids)].reset_index(drop=True),
                                 readings[readings["pump_id"].isin(ids)].reset_index(drop=True),
                                 events[events["pump_id"].isin(ids)].reset_index(drop=True), None, now=now,
                                 settings=settings, shape_priors=shape_priors)
        results.append(analysis.results)
    res = pd.concat(results)
    out = truth.join(res.reindex(columns=["n_points", "interval_hours", "hours_to_limit", "hours_to_limit_low",
                                          "hours_to_limit_high", "governing_limit", "wear_law", "slip_past"]))
    out["true_remaining"] = out["crossing"] - out["interval_hours"]
    out["seed"] = seed
    return out


def figures(rows: pd.DataFrame) -> dict:
    """Per law and overall: pumps, median relative error (>= 8 readings) and band coverage."""
    ahead = rows[~rows["beyond"] & (rows["true_remaining"] > 0) & rows["hours_to_limit"].notna()]
    low = ahead["hours_to_limit_low"].fillna(np.inf)  # no lower bound: the limit may never be reached
    high = ahead["hours_to_limit_high"].fillna(np.inf)  # open upper bound holds everything above low
    inside = (low <= ahead["true_remaining"]) & (ahead["true_remaining"] <= high)
    rel = (ahead["hours_to_limit"] - ahead["true_remaining"]).abs() / ahead["true_remaining"]
    enough = ahead["n_points"] >= MIN_READINGS_FOR_ERROR
    out = {}
    for name, mask in [*((law, ahead["law"] == law) for law in LAWS), ("overall", ahead["law"].notna())]:
        out[name] = {
            "pumps": int(mask.sum()),
            "median_rel_error": float(rel[mask & enough].median()),
            "coverage": float(inside[mask].mean()),
            "open_upper_share": float(ahead.loc[mask, "hours_to_limit_high"].isna().mean()),
        }
    no_forecast = rows[~rows["beyond"] & rows["hours_to_limit"].isna()]
    out["pumps_without_forecast"] = int(len(no_forecast))
    beyond = rows[rows["beyond"]]
    out["past_limit_pumps"] = int(len(beyond))
    out["past_limit_detected"] = float(beyond["slip_past"].astype(bool).mean()) if len(beyond) else float("nan")
    return out


def table(fig: dict, floor: dict | None = None) -> str:
    """The README's table; with `floor` (the known-law figures) two more columns beside the averaged ones."""
    head = ["| wear law | pumps | median error of hours to limit (>= 8 readings) | inside 90 % band "
            "| open upper bound |", "| --- | ---: | ---: | ---: | ---: |"]
    if floor:
        head = [head[0] + " true law alone: median error | true law alone: inside band |", head[1] + " ---: | ---: |"]
    lines = head
    for name in (*LAWS, "overall"):
        f = fig[name]
        line = (f"| {name.replace('_', '-')} | {f['pumps']} | {100 * f['median_rel_error']:.1f} % | "
                f"{100 * f['coverage']:.1f} % | {100 * f['open_upper_share']:.1f} % |")
        if floor:
            line += f" {100 * floor[name]['median_rel_error']:.1f} % | {100 * floor[name]['coverage']:.1f} % |"
        lines.append(line)
    return "\n".join(lines)


def met(fig: dict) -> dict:
    lo, hi = TARGET_COVERAGE
    return {name: {"coverage": bool(lo <= fig[name]["coverage"] <= hi),
                   "median_rel_error": bool(fig[name]["median_rel_error"] <= TARGET_MEDIAN_ERROR)}
            for name in (*LAWS, "overall")}


def _run(seeds, n, weighting, known_law, workers, shape_prior, shape_known) -> pd.DataFrame:
    count = len(seeds)
    with ProcessPoolExecutor(max_workers=workers) as pool:
        return pd.concat(list(pool.map(run_fleet, seeds, [n] * count, [weighting] * count, [known_law] * count,
                                       [shape_prior] * count, [shape_known] * count)))


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", choices=sorted(SIZES), default="full")
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--weighting", choices=("aicc", "held_back"), default="aicc",
                        help="how the engine weighs the wear laws (AnalysisSettings.law_weighting)")
    parser.add_argument("--shape-prior", choices=("flat", "pooled"), default="flat",
                        help="the prior over the power and run-in laws' shapes (AnalysisSettings.shape_prior)")
    parser.add_argument("--shape-known", action="store_true",
                        help="a diagnostic: each pump's shape prior on its own true exponent or run-in shape (the "
                             "nearest grid member), what no pooling can reach")
    parser.add_argument("--known-law", action="store_true",
                        help="also fit every pump with its true law alone, the floor the averaged forecast is "
                             "measured against")
    parser.add_argument("--out", help="write the figures as JSON here")
    args = parser.parse_args(argv)
    size = SIZES[args.size]
    started = time.perf_counter()
    seeds = [args.seed + k for k in range(size.fleets)]
    rows = _run(seeds, size.pumps_per_fleet, args.weighting, False, args.workers, args.shape_prior, args.shape_known)
    fig = figures(rows)
    fig["met"] = met(fig)
    floor = None
    if args.known_law:
        floor = figures(_run(seeds, size.pumps_per_fleet, args.weighting, True, args.workers, args.shape_prior,
                             args.shape_known))
        floor["met"] = met(floor)
        fig["known_law"] = floor
    fig["size"] = args.size
    fig["seed"] = args.seed
    fig["weighting"] = args.weighting
    fig["shape_prior"] = "own true shape" if args.shape_known else args.shape_prior
    fig["fleets"] = size.fleets
    fig["pumps"] = int(len(rows))
    fig["seconds"] = round(time.perf_counter() - started, 1)
    print(f"{fig['pumps']} invented pumps in {size.fleets} fleets from seed {args.seed}, laws weighed by "
          f"{args.weighting}, shape prior {fig['shape_prior']}, {fig['seconds']} s\n")
    print(table(fig, floor))
    print(f"\npumps before their limit without a forecast (no trend or flat): {fig['pumps_without_forecast']}; "
          f"past their limit: {fig['past_limit_pumps']}, of which found past: {100 * fig['past_limit_detected']:.0f} %")
    if args.out:
        with open(args.out, "w") as fh:
            json.dump(fig, fh, indent=2)
    return fig


if __name__ == "__main__":
    main(sys.argv[1:])
