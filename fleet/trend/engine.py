"""The fleet analysis: readings in, one row of figures, status and reasons per pump out.

Order of work: refer readings -> place them in service intervals -> fit wear trends of every interval at
once -> hours and dates to each limit -> oil, energy and fleet life figures -> status and service order.
"""

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from fleet.frames import READING_COLUMNS
from fleet.physics.pump import theoretical_flow_lpm
from fleet.trend.degradation import (
    QUANTITIES,
    fit_columns,
    fit_degradation,
    not_enough_reason,
    summarise_fits,
    with_member_lines,
)
from fleet.trend.energy import leakage_energy, typical_pressure_bar
from fleet.trend.grouped import group_median, group_time_max, pair_codes
from fleet.trend.intervals import assign_intervals, interval_lives
from fleet.trend.linear import t_quantile
from fleet.trend.oil_condition import OIL_COLUMNS, oil_columns
from fleet.trend.referral import refer_readings
from fleet.trend.remaining_life import (
    LIMIT_NAMES,
    dates_at_hours,
    hours_to_limits,
    interval_hours_per_day,
    limit_dates,
    limit_flows_lpm,
)
from fleet.trend.settings import AnalysisSettings
from fleet.trend.status import assess_status, days_since, horizon_remaining_hours
from fleet.trend.wear_laws import LAWS, MEMBERS
from fleet.trend.weibull import (
    expected_overhauls_per_prior,
    fit_fleet_priors,
    kind_rows,
    mean_residual_life,
    per_pump,
)


@dataclass
class FleetAnalysis:
    """results: one row per pump (index pump_id). readings: the referred per-reading frame. fits: one row per
    pump interval (framed from fit_table and laws when first read). priors: one row per pump kind. intervals:
    every service interval. totals: fleet sums."""

    results: pd.DataFrame
    readings: pd.DataFrame
    fit_figures: dict  # the fits' own figures as arrays by name (fleet.trend.degradation.fit_degradation and what
    # follows), framed only when read as such (fit_table)
    laws: dict  # each quantity's fitted wear laws (LawFits), rows as fit_table's
    priors: pd.DataFrame
    intervals: pd.DataFrame
    settings: AnalysisSettings = field(default_factory=AnalysisSettings)

    @cached_property
    def totals(self) -> dict:
        """Fleet sums of the results (pumps, by status, energy cost per year by currency, leakage kW), summed when
        first read: a write's one-pump analysis, and each part of a full one, never reads them."""
        res = self.results
        # currency is all missing, and so float, for a pump not installed at a site: group on text either way.
        currency = res["currency"].astype(object).fillna("")
        return {
            "pumps": int(len(res)),
            "by_status": {k: int(v) for k, v in res["status"].value_counts().items()},
            "energy_cost_per_year": {
                str(k): float(v) for k, v in res.groupby(currency)["energy_cost_per_year"].sum().items()
            },
            "leakage_kw": float(np.nansum(res["leakage_kw"])),
        }

    @cached_property
    def fit_table(self) -> pd.DataFrame:
        """The fits' own figures framed: one row per pump interval (no member's lines)."""
        return pd.DataFrame(self.fit_figures)

    def fit_columns(self) -> dict:
        """The columns of ``fits`` by name, in order, none of them framed (the fits' own figures as arrays, the
        members' hundreds of lines sliced from the laws when read)."""
        return fit_columns(self.fit_figures, self.laws)

    @cached_property
    def fits(self) -> pd.DataFrame:
        """One row per pump interval: the figures and every member's lines (about 1,300 columns)."""
        return with_member_lines(self.fit_table, self.laws)


def _empty_readings() -> pd.DataFrame:
    """A readings frame with no rows and the columns of the contract (fleet.frames)."""
    dtypes = {"reading_id": np.int64, "pump_id": np.int64, "taken_at": "datetime64[ns]"}
    return pd.DataFrame({c: pd.Series(dtype=dtypes.get(c, float)) for c in READING_COLUMNS})


def _floats(column: pd.Series) -> np.ndarray:
    """A column as floats, as pd.to_numeric(errors="coerce") reads it (numbers already: no parse)."""
    if column.dtype.kind in "fiu":
        return column.to_numpy(dtype=float)
    return pd.to_numeric(column, errors="coerce").to_numpy(dtype=float)


def _bools(column: pd.Series) -> np.ndarray:
    """A yes/no column as bools, a missing value as no (as astype("boolean").fillna(False).astype(bool))."""
    if column.dtype == bool:
        return column.to_numpy()
    return column.astype("boolean").fillna(False).to_numpy(dtype=bool)


def _pump_table(pumps: pd.DataFrame) -> pd.DataFrame:
    p = pumps.set_index("pump_id", drop=False)
    rated_flow = np.asarray(theoretical_flow_lpm(_floats(p["displacement_cc"]), _floats(p["rated_speed_rpm"])),
                            dtype=float).reshape(-1)
    given = _floats(p["max_flow_lpm"]) if "max_flow_lpm" in p else np.full(len(p), np.nan)
    drain_limit = np.where(_bools(p["case_drain"]), _floats(p["drain_limit_pct"]), np.nan)  # no port: no limit
    # The three columns set in one step (each set alone copies the table's block again).
    return p.assign(rated_flow_lpm=rated_flow, max_flow_lpm=np.where(np.isnan(given), rated_flow, given),
                    drain_limit_pct=drain_limit)


def _at_positions(values: np.ndarray, pos: np.ndarray) -> np.ndarray:
    """values[pos] as floats, NaN where a position is -1 (as a reindex gives a missing label)."""
    taken = values[np.maximum(pos, 0)] if len(values) else np.full(len(pos), np.nan)
    taken[pos < 0] = np.nan
    return taken


def _last_in_group(group: np.ndarray, keep: np.ndarray, n_groups: int) -> np.ndarray:
    """Per group, the position of its last row among those kept (rows already in time order); -1 if none."""
    at = np.flatnonzero(keep)
    last = np.full(n_groups, -1)
    last[group[at]] = at  # a later row overwrites an earlier one of its group
    return last


def _current_rows(pumps: pd.Index, interval: np.ndarray, fit_pumps: np.ndarray, fit_intervals: np.ndarray):
    """Each pump's row among the fits (-1: none) whose interval is its ``interval``, as a MultiIndex of the fits'
    keys would find it (get_indexer; the fits' pump intervals are unique): by the pumps' positions, no MultiIndex
    built on either side."""
    pos = pumps.get_indexer(fit_pumps)
    match = np.flatnonzero((pos >= 0) & (fit_intervals == interval[np.maximum(pos, 0)]))
    rows = np.full(len(pumps), -1, dtype=np.intp)
    rows[pos[match]] = match
    return rows


def _last_usable(referred: pd.DataFrame, pumps: pd.Index, interval: np.ndarray) -> dict:
    """Per pump (``pumps``, each in its current ``interval``): last reading of that interval (flag, a Series on
    ``pumps``), last usable eta/drain, case drain jump ratio (arrays in the pumps' order), as columns by name:
    the pump rows take them as they are, never framed on their own."""
    n = len(pumps)
    pos = pumps.get_indexer(referred["pump_id"].to_numpy())
    interval = np.asarray(interval, dtype=np.int64)
    in_current = (pos >= 0) & (referred["interval_no"].to_numpy(np.int64) == interval[np.maximum(pos, 0)])
    rows = np.flatnonzero(in_current)
    rows = rows[np.lexsort((referred["taken_at"].to_numpy()[rows], pos[rows]))]  # stable: by pump, then time
    group = pos[rows]
    flag = referred["flag"].to_numpy(object)[rows]
    good = pd.isna(flag)
    eta = referred["eta_v_ref"].to_numpy(float)[rows]
    drain_pct = referred["drain_pct_ref"].to_numpy(float)[rows]
    drain = referred["drain_ref_lpm"].to_numpy(float)[rows]

    def last_of(values: np.ndarray, keep: np.ndarray) -> np.ndarray:
        at = _last_in_group(group, keep, n)
        return np.where(at >= 0, values[np.maximum(at, 0)], np.nan) if len(values) else np.full(n, np.nan)

    last_row = _last_in_group(group, np.ones(len(rows), dtype=bool), n)
    has_row = last_row >= 0
    index = pd.Index(pumps, name="pump_id")
    last_flag = referred["flag"].iloc[rows[last_row[has_row]]].set_axis(index[has_row]).reindex(index)
    # The latest positive drain against the median of the ones before it (at least three).
    drains = good & ~np.isnan(drain) & (drain > 0)
    latest_at = _last_in_group(group, drains, n)
    earlier = drains.copy()
    earlier[latest_at[latest_at >= 0]] = False
    median_before = group_median(group[earlier], drain[earlier], n)
    median_before = np.where(np.bincount(group[earlier], minlength=n) >= 3, median_before, np.nan)
    return {
        "last_flag": last_flag,
        "last_eta_v_ref": last_of(eta, good & ~np.isnan(eta)),
        "last_drain_pct_ref": last_of(drain_pct, good & ~np.isnan(drain_pct)),
        "drain_jump_ratio": last_of(drain, drains) / median_before,
    }


def _latest_taken(referred: pd.DataFrame, pumps: pd.Index) -> pd.Series:
    """Each pump's latest reading time (NaT for none), as referred.groupby("pump_id")["taken_at"].max() gives it
    reindexed on ``pumps``: one numpy pass, not a groupby (a fixed cost that outweighs one pump's rows)."""
    taken = referred["taken_at"]
    if not (isinstance(taken.dtype, np.dtype) and taken.dtype.kind == "M"):  # times with a zone: pandas' way
        return pd.to_datetime(referred.groupby("pump_id")["taken_at"].max().reindex(pumps))
    pos = pumps.get_indexer(referred["pump_id"].to_numpy())
    known = pos >= 0
    return pd.Series(group_time_max(pos[known], taken.to_numpy()[known], len(pumps)), index=pumps)


def _past_margin(cur: dict, limits: dict[str, np.ndarray], last: dict, eta_v_limit: np.ndarray,
                 drain_limit_pct: np.ndarray):
    """How far beyond its limits a pump is, ln(value / limit) of the worst limit (fitted, else last reading)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        slip = np.log(np.asarray(cur["slip_current_lpm"], dtype=float) / limits["slip"])
        drain = np.log(np.asarray(cur["drain_current_lpm"], dtype=float) / limits["drain"])
        raw_slip = np.log((1.0 - last["last_eta_v_ref"]) / (1.0 - eta_v_limit))
        raw_drain = np.log(last["last_drain_pct_ref"] / drain_limit_pct)
    slip = np.where(cur["slip_enough_data"], slip, raw_slip)
    drain = np.where(cur["drain_enough_data"], drain, raw_drain)
    return np.fmax(slip, drain)


def _current_columns(fits: dict, rows: np.ndarray) -> dict[str, np.ndarray]:
    """Each pump's current interval's row of the fits (``rows``, -1: none) as arrays by name: taken from the
    columns by position where every pump has one (a write's pump, most fleets); else by the fits' frame's reindex,
    whose missing rows are all NaN (a flag or a count then not bool or int), as its columns are read."""
    if len(rows) and rows.min() >= 0:
        return {name: np.asarray(values)[rows] for name, values in fits.items()}
    taken = pd.DataFrame(fits).reindex(rows)
    return {name: taken[name].to_numpy() for name in taken.columns}


def _counts(values: np.ndarray) -> np.ndarray:
    """A count per pump as int64, none (NaN: no fitted interval) as 0 (Series.fillna(0).astype(np.int64))."""
    if values.dtype.kind in "iu":
        return values.astype(np.int64)
    values = np.asarray(values, dtype=float)
    return np.where(np.isnan(values), 0.0, values).astype(np.int64)


def _rows_of(values: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """values' rows at ``rows`` (one per pump), NaN where a row is -1 (no fitted interval)."""
    if len(values) == 0:  # no interval fitted at all
        return np.full((len(rows), values.shape[1]), np.nan)
    taken = values[np.maximum(rows, 0)].astype(float)
    taken[rows < 0] = np.nan
    return taken


_POWER_AT = np.array([j for j, m in enumerate(MEMBERS) if m.law == "power"], dtype=np.intp)  # power-law members
_POWERS = tuple(MEMBERS[j].power for j in _POWER_AT)


def _wear_law(cur: dict, member_weights: dict[str, np.ndarray]) -> dict[str, np.ndarray | list]:
    """wear_law (the law with the most weight), wear_law_weights ({law: weight}) and wear_power (the power law's
    exponent, averaged over its members by weight) of each pump's current interval (member_weights: per quantity,
    per pump and member of MEMBERS, LawFits.weight of that interval). Slip and case drain are
    weighed jointly, so both trends carry the same weights; the slip's are read, the drain's where only the
    drain has a trend. None (NaN) without a trend. The columns by name, on cur's rows (the pumps')."""
    slip_ok = cur["slip_enough_data"]
    drain_ok = cur["drain_enough_data"]
    source = np.where(slip_ok, "slip", "drain")
    known = slip_ok | drain_ok
    law = np.where(slip_ok, cur["slip_wear_law"], np.where(drain_ok, cur["drain_wear_law"], None))
    weights = {
        name: np.where(source == "slip", cur[f"slip_weight_{name}"], cur[f"drain_weight_{name}"]).astype(float)
        for name in LAWS
    }
    as_dicts = [
        {name: float(weights[name][i]) for name in LAWS} if known[i] and law[i] is not None else None
        for i in range(len(slip_ok))
    ]
    # The power law's exponent, weighted over its members: above 1 accelerating, below 1 slowing down. The
    # members' weights gathered in one step, then summed member by member in MEMBERS' order (the sums' rounding).
    weights_of = np.where((source == "slip")[:, None], member_weights["slip"][:, _POWER_AT],
                          member_weights["drain"][:, _POWER_AT])
    weights_of = np.nan_to_num(weights_of)
    power = np.zeros(len(slip_ok))
    total = np.zeros(len(slip_ok))
    for k, exponent in enumerate(_POWERS):
        power, total = power + weights_of[:, k] * exponent, total + weights_of[:, k]
    with np.errstate(invalid="ignore", divide="ignore"):
        wear_power = np.where(known & (total > 0), power / total, np.nan)
    return {"wear_law": law, "wear_law_weights": as_dicts, "wear_power": wear_power}


_DATING_COLUMNS = ["pump_id", "interval_no", "interval_hours", "taken_at"]  # what dates_at_hours reads


def _crossing_passed(cur: dict, pumps: pd.Index, current_iv: pd.DataFrame, cur_interval: np.ndarray,
                     referred: pd.DataFrame) -> dict[str, np.ndarray]:
    """For a pump whose trend is already past a limit: when its trend crossed it, estimated from its readings.

    crossed_limit names the limit crossed first; crossed_at_hours (hour meter) with _low/_high bounds at the
    analysis confidence, and crossed_date with crossed_date_low/_high (dates interpolated between the
    readings' hour-meter values). NaN/NaT/None for pumps not past a limit, and for an open bound. Arrays in the
    order of ``pumps`` (cur's rows), by name (the pump rows take them as they are).
    """
    names = np.array([LIMIT_NAMES[q] for q in QUANTITIES], dtype=object)
    stacked = np.column_stack(
        [np.where(cur[f"{q}_past"], np.asarray(cur[f"{q}_crossing_hours"], dtype=float), np.inf)
         for q in QUANTITIES]
    )
    past = np.isfinite(stacked).any(axis=1)
    first = np.argmin(stacked, axis=1)
    rows = np.arange(len(pumps))
    start = current_iv["start_hours"].to_numpy(float)
    per_day = np.asarray(cur["hours_per_day"], dtype=float)
    out = {"crossed_limit": np.where(past, names[first], None)}
    suffixes = ("", "_low", "_high")
    hours = []
    for suffix, field_ in zip(suffixes, ("crossing_hours", "crossing_low", "crossing_high"), strict=True):
        h = np.column_stack([np.asarray(cur[f"{q}_{field_}"], dtype=float) for q in QUANTITIES])[rows, first]
        hours.append(np.where(past, h, np.nan))
        out[f"crossed_at_hours{suffix}"] = start + hours[-1]
    if not past.any():  # nothing to date: skip the readings' search
        for suffix in suffixes:
            out[f"crossed_date{suffix}"] = np.full(len(pumps), np.datetime64("NaT"), dtype="datetime64[ns]")
        return out
    # Only past pumps' readings date a crossing, and only the columns the dating reads.
    near = referred.loc[referred["pump_id"].isin(pumps[past]).to_numpy(), _DATING_COLUMNS]
    # The three figures of every pump dated in one search.
    keys = pd.DataFrame({"pump_id": np.tile(pumps.to_numpy(), 3),
                         "interval_no": np.tile(cur_interval, 3)})
    dates = dates_at_hours(near, keys, np.concatenate(hours), np.tile(per_day, 3)).to_numpy()
    for i, suffix in enumerate(suffixes):
        out[f"crossed_date{suffix}"] = dates[i * len(pumps):(i + 1) * len(pumps)]
    return out


def place_readings(pumps: pd.DataFrame, readings: pd.DataFrame | None, events: pd.DataFrame | None,
                   flow_points: pd.DataFrame | None, settings: AnalysisSettings) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The per-reading part of the analysis, no fitting: readings referred to reference conditions and placed in
    their service intervals (referred readings, intervals). A page that lists readings needs only this."""
    readings = _empty_readings() if readings is None or len(readings) == 0 else readings
    referred = refer_readings(readings, pumps, flow_points, settings)
    return assign_intervals(referred, events)


def analyze_fleet(
    pumps: pd.DataFrame,
    readings: pd.DataFrame,
    events: pd.DataFrame | None,
    samples: pd.DataFrame | None,
    flow_points: pd.DataFrame | None = None,
    *,
    now,
    settings: AnalysisSettings | None = None,
    priors: pd.DataFrame | None = None,
    shape_priors: pd.DataFrame | None = None,
) -> FleetAnalysis:
    """Analyse every pump. `now` is the moment of the analysis (overdue readings, late lab results, horizon).

    priors, when given, is used as is (no refit of the fleet Weibull), so a single pump can be re-analysed;
    shape_priors likewise for the pooled shape prior (settings.shape_prior, fleet.trend.shape_prior).
    """
    s = settings or AnalysisSettings()
    now = pd.Timestamp(now)
    pump_tab = _pump_table(pumps)
    referred, intervals = place_readings(pumps, readings, events, flow_points, s)
    intervals = intervals[intervals["pump_id"].isin(pump_tab.index)].reset_index(drop=True)

    # Wear trends and remaining life, every pump interval at once.
    # The fits' figures as columns (a few dozen, with what is added below; framed only when read as a frame,
    # FleetAnalysis.fit_table) and the laws as arrays; the members' lines likewise (FleetAnalysis.fits).
    fits, laws = fit_degradation(referred, s, pump_tab["kind"], shape_priors)
    # The pump figures the limits read, as floats once; each fit row's pump's taken by position (NaN for a pump
    # not in the table, as a reindex on the fits' pumps gives it).
    limit_inputs = {c: pump_tab[c].to_numpy(float)
                    for c in ("eta_v_limit", "drain_limit_pct", "rated_flow_lpm", "max_flow_lpm")}
    fit_pump = {c: _at_positions(v, pump_tab.index.get_indexer(fits["pump_id"]))
                for c, v in limit_inputs.items()}
    fits = summarise_fits(fits, fit_pump["rated_flow_lpm"], fit_pump["max_flow_lpm"], s)
    limits = limit_flows_lpm(**fit_pump)
    t = t_quantile(s.confidence, fits["slip_dof"])
    with np.errstate(invalid="ignore"):
        significant = fits["slip_b"] > t * np.sqrt(fits["slip_var_b"])
    # The fits' rows are the referred readings' pump intervals in order (fit_degradation), so codes line up.
    pairs, group = pair_codes(referred["pump_id"].to_numpy(), referred["interval_no"].to_numpy())
    n_fits = len(fits["pump_id"])
    assert len(pairs) == n_fits
    taken = referred["taken_at"].to_numpy()
    per_interval = {
        "slip_b_significant": significant,
        "hours_per_day": interval_hours_per_day(group, taken, referred["hours"].to_numpy(float), n_fits, s),
        "typical_pressure_bar": typical_pressure_bar(group, taken, referred["pressure_bar"].to_numpy(float),
                                                     referred["flag"].isna().to_numpy(), n_fits,
                                                     s.typical_window_days),
    }
    fits = {**fits, **hours_to_limits(fits, laws, limits, s), **per_interval}  # framed only if read so (fit_table)

    # One row per pump: its current interval.
    # By position, as intervals[is_current].set_index("pump_id").reindex(pump_tab.index) gives it (a pump has one
    # current interval): its rows all NaN for a pump with none, its interval number then 0. (The pump_id column
    # rides along, unread.)
    iv_pos = pump_tab.index.get_indexer(intervals["pump_id"].to_numpy())
    iv_current = np.flatnonzero(intervals["is_current"].to_numpy(bool) & (iv_pos >= 0))
    iv_rows = np.full(len(pump_tab), -1, dtype=np.intp)
    iv_rows[iv_pos[iv_current]] = iv_current
    current_iv = intervals.set_axis(pd.RangeIndex(len(intervals))).reindex(iv_rows)
    current_iv.index = pump_tab.index
    cur_interval = current_iv["interval_no"].fillna(0).to_numpy().astype(np.int64)
    # Each pump's current interval's row of the fits (-1: none), and those rows (a missing one all NaN, as a
    # reindex on the keys gives it): taken by position, the fits are not indexed on their keys.
    cur_rows = _current_rows(pump_tab.index, cur_interval, fits["pump_id"], fits["interval_no"])
    cur = _current_columns(fits, cur_rows)
    cur_limits = limit_flows_lpm(**limit_inputs)
    for col in (
        "slip_enough_data",
        "drain_enough_data",
        "slip_past",
        "drain_past",
        "slip_b_significant",
        "slip_upper_open",
        "drain_upper_open",
        "upper_bound_open",
    ):
        if cur[col].dtype != bool:  # a pump without a fitted current interval: NaN rows
            cur[col] = _bools(pd.Series(cur[col]))
    last = _last_usable(referred, pump_tab.index, cur_interval)

    # The pump rows gathered as one dict of columns (in the order they are shown) and framed once: a frame
    # grown column by column pays pandas' insert for each of about a hundred columns, on every call.
    res: dict = {"pump": pump_tab["pump"], "kind": pump_tab["kind"]}
    for col in (
        "eta_v_ref",
        "eta_v_decline_per_1000h",
        "drain_pct_ref",
        "hours_to_limit",
        "hours_to_limit_low",
        "hours_to_limit_high",
        "upper_bound_open",
        "governing_limit",
        "hours_per_day",
    ):
        res[col] = cur[col]
    governing = np.array(res["governing_limit"], dtype=object)  # a copy: text, a missing one as None
    governing[pd.isna(governing)] = None
    res["governing_limit"] = pd.Series(governing, index=pump_tab.index, dtype=object)
    res["confidence"] = np.where(np.isfinite(res["hours_to_limit_low"]), s.confidence, np.nan)
    res["n_points"] = _counts(cur["slip_n_points"])
    res["n_drain_points"] = _counts(cur["drain_n_points"])
    res["slip_enough_data"] = cur["slip_enough_data"]
    res["drain_enough_data"] = cur["drain_enough_data"]
    res["slip_b_significant"] = cur["slip_b_significant"]
    res["slip_past"], res["drain_past"] = cur["slip_past"], cur["drain_past"]
    for q, name in (("slip", "eta_v"), ("drain", "case_drain")):
        res[f"{name}_hours_to_limit"] = cur[f"{q}_hours_to_limit"]
        res[f"{name}_hours_low"] = cur[f"{q}_hours_low"]
        res[f"{name}_hours_high"] = cur[f"{q}_hours_high"]
        res[f"{name}_note"] = cur[f"{q}_note"]
    res["interval_no"] = cur_interval
    res["interval_start"] = pd.to_datetime(current_iv["start_at"])
    res["interval_start_kind"] = current_iv["start_kind"]
    res["interval_hours"] = cur["current_hours"]
    res["last_reading_at"] = _latest_taken(referred, pump_tab.index)
    res["days_since_reading"] = days_since(res["last_reading_at"].to_numpy(), now)
    res["installed"] = pump_tab["machine_id"].notna() if "machine_id" in pump_tab else True
    res.update(last.items())
    # With too little for a trend, the current value is the last usable reading's; *_source says which.
    for col, last_col in (("eta_v_ref", "last_eta_v_ref"), ("drain_pct_ref", "last_drain_pct_ref")):
        trend_value, last_value = np.asarray(res[col]), np.asarray(res[last_col])  # both in the pumps' order
        from_trend = ~pd.isna(trend_value)
        res[f"{col}_source"] = np.where(from_trend, "trend", np.where(~pd.isna(last_value), "last_reading", None))
        res[col] = np.where(from_trend, trend_value, last_value)
    for col in (
        "eta_v_limit",
        "drain_limit_pct",
        "oil_temp_max_c",
        "oil_temp_min_c",
        "reading_interval_days",
        "planning_horizon_weeks",
        "rated_flow_lpm",
        "max_flow_lpm",
        "currency",
    ):
        res[col] = pump_tab[col] if col in pump_tab else np.nan

    # Calendar dates, from the last reading at the pump's own hours per day.
    for src, dst in (
        ("hours_to_limit", "limit_date"),
        ("hours_to_limit_low", "limit_date_low"),
        ("hours_to_limit_high", "limit_date_high"),
    ):
        res[dst] = limit_dates(res["last_reading_at"], res[src], res["hours_per_day"]).to_numpy()

    res.update(_wear_law(cur, {q: _rows_of(laws[q].weight, cur_rows) for q in QUANTITIES}))
    res.update(_crossing_passed(cur, pump_tab.index, current_iv, cur_interval, referred))
    res["past_margin"] = _past_margin(cur, cur_limits, last, limit_inputs["eta_v_limit"],
                                    limit_inputs["drain_limit_pct"])
    res["data_note"] = _data_note(res, current_iv, cur, s)

    # Oil condition and the cost of leakage.
    # (As columns, in the pumps' order: framed once with the pump rows, not on their own.)
    oil = oil_columns(pump_tab, referred, samples, now, s)
    res.update((c, oil[c]) for c in OIL_COLUMNS if c != "cleanliness_target")
    res["cleanliness_target"] = pump_tab["cleanliness_target"]
    slip_start = np.asarray(cur["slip_start_lpm"], dtype=float)
    slip_now = np.where(cur["slip_enough_data"], cur["slip_current_lpm"], np.nan)
    energy = leakage_energy(
        slip_now,
        np.where(cur["slip_enough_data"], slip_start, np.nan),
        pump_tab["rated_pressure_bar"],
        cur["typical_pressure_bar"],
        cur["hours_per_day"],
        pump_tab["motor_efficiency"],
        pump_tab["tariff_per_kwh"],
        pump_tab["overhaul_cost"] if "overhaul_cost" in pump_tab else np.nan,
    )
    res.update(energy)

    # Fleet life figures: the separate, labelled prior.
    kind_of = pump_tab["kind"]
    fleet_priors = fit_priors(intervals, kind_of, s) if priors is None else priors.copy()
    last_hours = current_iv["last_hours"].to_numpy()
    res["age_hours"] = np.where(cur_interval == 0, last_hours, last_hours - current_iv["start_hours"].to_numpy())
    # The priors and the status read the columns as the frame will hold them, and the pump rows are framed once,
    # in the order shown: a frame read column by column and grown by the priors' and the status' columns pays
    # pandas' lookup and insert for each, on every call.
    res = {k: _as_column(v, pump_tab.index) for k, v in res.items()}
    fleet_priors = apply_priors(res, fleet_priors, now)
    status = assess_status(res, now, s)
    res.update((k, v.array if v.dtype != object else v.to_numpy()) for k, v in status.items())
    first_cols = ["rank", "pump", "kind", "status", "reasons"]
    order = first_cols + [c for c in res if c not in first_cols]
    res = pd.DataFrame({k: res[k] for k in order}, index=pump_tab.index.rename("pump_id"))
    return FleetAnalysis(res, referred, fits, laws, fleet_priors, intervals, s)


def _as_column(value, index: pd.Index):
    """One of the pump rows' columns as the frame on ``index`` will hold it, read the same before it is framed: a
    Series of numbers, flags or times as its array (on the pumps' index already: no alignment), text or other
    objects as pandas infers their dtype (an object array of text is read as strings; missing then NaN, not
    None), a single value repeated on every row."""
    if isinstance(value, pd.Series):
        if not value.index.equals(index):
            value = value.reindex(index)  # aligned, as the frame would
        if value.dtype == object:
            return value  # object columns keep their dtype
        return value.to_numpy() if isinstance(value.dtype, np.dtype) else value.array
    if isinstance(value, np.ndarray) and value.dtype != object:
        return value
    if isinstance(value, bool | float):
        return np.full(len(index), value)
    inferred = pd.Series(value, index=index)
    return inferred if inferred.dtype == object else inferred.array


def fit_priors(intervals: pd.DataFrame, kind_of_pump: pd.Series, settings: AnalysisSettings) -> pd.DataFrame:
    """The fleet Weibull of each pump kind from every service interval (FleetAnalysis.intervals)."""
    return fit_fleet_priors(interval_lives(intervals), kind_of_pump, settings.min_weibull_failures)


def apply_priors(res: pd.DataFrame | dict, priors: pd.DataFrame, now) -> pd.DataFrame:
    """Set each pump's prior figures (in place) from its kind's fleet Weibull, and its planning horizon in running
    hours; return the priors with the expected overhauls of ``res``'s pumps in their planning horizon.

    res (a frame, or a dict of column names to Series or arrays) needs kind, age_hours and what
    horizon_remaining_hours reads. Nothing else of a pump's analysis depends on the priors, so a fleet analysed in
    parts can be given the whole fleet's priors afterwards.
    """
    _, horizon_h = horizon_remaining_hours(res, pd.Timestamp(now))
    res["planning_horizon_hours"] = horizon_h
    hours, b10, fleet_priors = prior_figures(np.asarray(res["kind"], dtype=object),
                                             np.asarray(res["age_hours"], dtype=float), horizon_h, priors)
    res["prior_hours_to_overhaul"], res["prior_b10_hours"] = hours, b10
    return fleet_priors


def prior_figures(kinds, age_hours, horizon_hours, priors: pd.DataFrame):
    """What each pump's kind's fleet Weibull says of it: (mean residual life at its age, the kind's B10), and the
    priors with the expected overhauls of these pumps within their planning horizons (``horizon_hours``).

    A full analysis (apply_priors) and a refit of stored kinds (fleet.services.analysis.store.refit_kinds) both
    call it. A page reads the per-pump part (the mean residual life at the pump's stored age, the kind's B10) by
    fleet.services.analysis.read_figures.prior_values on the stored fit's numbers; tests/test_write_invariant.py
    holds the two equal.
    """
    fleet_priors = priors.copy()
    kinds = np.asarray(kinds, dtype=object)
    age = np.asarray(age_hours, dtype=float)
    rows = kind_rows(fleet_priors, kinds)  # each pump's kind among the priors (-1: none, NaN figures)
    hours = mean_residual_life(age, per_pump(fleet_priors, "beta", rows), per_pump(fleet_priors, "alpha", rows))
    fleet_priors["expected_overhauls_in_horizon"] = expected_overhauls_per_prior(
        age, np.asarray(horizon_hours, dtype=float), kinds, fleet_priors, rows)
    return hours, per_pump(fleet_priors, "b10_hours", rows), fleet_priors


def _data_note(res: Mapping, current_iv: pd.DataFrame, cur: pd.DataFrame, s: AnalysisSettings) -> np.ndarray:
    """The 'not enough data' sentence of each pump that has too little for its own trend, else None."""
    note = not_enough_reason(cur["slip_n_points"], cur["slip_span_hours"], s, "volumetric efficiency")
    no_readings = res["last_reading_at"].isna().to_numpy()
    empty_interval = (current_iv["n_readings"].fillna(0).to_numpy() == 0) & ~no_readings
    since = [
        f"Not enough data: no readings since the {k} on {pd.Timestamp(d):%Y-%m-%d}." if e else None
        for e, k, d in zip(empty_interval, current_iv["start_kind"], current_iv["start_at"], strict=True)
    ]
    note = np.where(empty_interval, np.array(since, dtype=object), note)
    return np.where(no_readings, "Not enough data: no readings yet.", note)


def _plain(value):
    """One value as JSON-ready Python: NaN/NaT/inf -> None, dates -> 'YYYY-MM-DD', numpy -> python."""
    if isinstance(value, list | tuple | np.ndarray):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if value is None or value is pd.NaT:
        return None
    if isinstance(value, pd.Timestamp | np.datetime64):
        ts = pd.Timestamp(value)
        return None if pd.isna(ts) else ts.strftime("%Y-%m-%d")
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if isinstance(value, str | bool | int | float):
        return value
    return None if pd.isna(value) else str(value)


# From this many rows a column of numbers, flags or times is made plain as a whole (_plain_column); fewer (the
# one pump of a write) go value by value, which costs less than the column's numpy steps.
_WHOLE_COLUMNS = 32


def _plain_column(values: pd.Series) -> list:
    """[_plain(v) for v in values.tolist()], a column at once where its dtype says what every cell is: numbers
    (non-finite -> None), whole numbers and flags as they are, text (missing -> None), times from 1970 to 9999 as
    'YYYY-MM-DD' by numpy (the text strftime gives for them; NaT -> None); any other column value by value."""
    dtype = values.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "iub":
        return values.to_numpy().tolist()
    if isinstance(dtype, np.dtype) and dtype.kind == "f":
        array = values.to_numpy()
        plain = array.tolist()
        for at in np.flatnonzero(~np.isfinite(array)).tolist():
            plain[at] = None
        return plain
    if isinstance(dtype, pd.StringDtype):
        plain = values.tolist()  # str, or the dtype's missing value
        for at in np.flatnonzero(values.isna().to_numpy()).tolist():
            plain[at] = None
        return plain
    if isinstance(dtype, np.dtype) and dtype.kind == "M":
        array = values.to_numpy()
        missing = np.isnat(array)
        days = array.astype("datetime64[D]")
        known = days[~missing].view(np.int64)
        # 1970-01-01 .. 9999-12-31: whole days from 1970 (no rounding of times before it), four-digit years
        if not known.size or (known.min() >= 0 and known.max() <= 2932896):
            plain = np.datetime_as_string(days, unit="D").tolist()
            for at in np.flatnonzero(missing).tolist():
                plain[at] = None
            return plain
    return [_plain(v) for v in values.tolist()]


def results_to_records(results: pd.DataFrame) -> list[dict]:
    """Results rows as JSON-ready dicts (pump_id included)."""
    index = results.index
    if len(results) < _WHOLE_COLUMNS and index.nlevels == 1 and index.name is not None \
            and index.name not in results.columns:
        # A write's few pumps: every cell as a Python object in one step (the values Series.tolist gives: floats,
        # ints, Timestamps, text or its missing value), then value by value; a column at a time would pay pandas'
        # Series per column, about a hundred of them, for a row or two.
        names = [str(index.name), *(str(k) for k in results.columns)]
        cells = results.to_numpy(dtype=object).tolist()
        return [dict(zip(names, [_plain(pump), *(_plain(v) for v in row)], strict=True))
                for pump, row in zip(index.tolist(), cells, strict=True)]
    frame = results.reset_index()
    # Column by column as Python values (what to_dict gives, without its lookup per cell), then row by row.
    names = [str(k) for k in frame.columns]
    if len(frame) >= _WHOLE_COLUMNS:
        columns = [_plain_column(values) for _, values in frame.items()]
    else:
        columns = [[_plain(v) for v in values.tolist()] for _, values in frame.items()]
    return [dict(zip(names, row, strict=True)) for row in zip(*columns, strict=True)]
