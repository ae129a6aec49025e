"""Wear trends: growth of the referred leakage with running hours, per pump interval, under several wear laws.

Wear opens the clearances and laminar leakage grows with the cube of the gap, so the referred slip (and the
referred case drain) often grows exponentially; abrasive wear grows it about linearly, a damaged part faster
and faster, run-in fast at first and then steadily. Each law is fitted and weighed (fleet.trend.wear_laws); the
figures people read come from the heaviest law and the laws the readings cannot rule out
(fleet.trend.model_average). All pump intervals are fitted at once (grouped sums, a few reweighting passes),
never one solver call per pump.
"""

from collections.abc import Mapping
from functools import lru_cache
from itertools import groupby

import numpy as np
import pandas as pd

from fleet.trend.grouped import group_first, group_max, group_min, pair_codes
from fleet.trend.model_average import averaged_slope, heaviest_law_median
from fleet.trend.settings import AnalysisSettings
from fleet.trend.shape_prior import pool_shapes
from fleet.trend.wear_laws import LAWS, LawFits, fit_wear_laws, joint_score, member_columns

QUANTITIES = ("slip", "drain")


def _span(group: np.ndarray, hours: np.ndarray, n_groups: int) -> np.ndarray:
    return group_max(group, hours, n_groups) - group_min(group, hours, n_groups)


# Each quantity's figures in fit_degradation's table (q_<name>), in order.
_FIGURES = ("n_points", "span_hours", "a", "b", "var_a", "var_b", "cov_ab", "scale", "dof", "current_lpm", "start_lpm",
            "slope_lpm_per_h", "wear_law", *(f"weight_{law}" for law in LAWS))


def _figures(laws: LawFits, span: np.ndarray, current_hours: np.ndarray, prefix: str, settings) -> dict:
    """The exponential member's line under the historical names (q_a, q_b, ...), the averaged figures, the laws'
    weights: the columns q_<name> of _FIGURES."""
    exp = 0  # MEMBERS[0] is the exponential law
    weights = laws.centred().law_weights()  # the weights the forecast follows (LawFits.centre_weight)
    stacked = np.column_stack([weights[law] for law in LAWS])
    fitted = laws.weight.sum(axis=1) > 0
    wear_law = np.where(fitted, np.array(LAWS, dtype=object)[np.argmax(stacked, axis=1)], None)
    # The heaviest law's median now and at the interval's start: the centre of the band a chart draws, which
    # reaches a limit at the forecast (fleet.trend.model_average.crossing_band).
    current, start = heaviest_law_median(
        laws, np.column_stack([current_hours, np.zeros_like(current_hours)]), settings.confidence).T
    cols = {
        "n_points": laws.n_points.astype(np.int64),
        "span_hours": span,
        "a": laws.a[:, exp],
        "b": laws.b[:, exp],
        "var_a": laws.var_a[:, exp],
        "var_b": laws.var_b[:, exp],
        "cov_ab": laws.cov_ab[:, exp],
        "scale": laws.scale[:, exp],
        "dof": laws.dof[:, exp],
        "current_lpm": current,
        "start_lpm": start,
        "slope_lpm_per_h": averaged_slope(laws, current_hours),
        "wear_law": wear_law,
        **{f"weight_{law}": np.where(fitted, weights[law], np.nan) for law in LAWS},
    }
    return {f"{prefix}_{k}": v for k, v in cols.items()}


_FLOAT = np.dtype(float)


class FitColumns(Mapping):
    """The columns of FleetAnalysis.fits by name, in its order, none of them made until read: the table's own by
    name from the table (a frame's as Series, a mapping's as it holds them: FleetAnalysis.fit_figures' arrays),
    each member's line as a column of its quantity's LawFits arrays. Reading a few dozen of some 1,300 columns (as
    the kept interval trends do) costs those few, not a Series or a slice of every column."""

    def __init__(self, table: pd.DataFrame | Mapping, laws: dict):
        self._table, self._laws = table, laws
        self._rows = len(table["pump_id"])
        self._own = {}
        own = list(table.keys())
        names = ["pump_id", "interval_no", "current_hours"]
        self._member = {}  # member column name -> (quantity, field, member index)
        for q in QUANTITIES:
            names += [f"{q}_{name}" for name in _FIGURES]
            lines = member_columns(q, laws[q].line_fields())
            self._member.update(lines)
            names += list(lines)
        seen = set(names)
        names += [name for name in own if name not in seen]
        self._names = names

    def __getitem__(self, name):
        where = self._member.get(name)
        if where is None:
            if name not in self._own:
                if name not in self._table:
                    raise KeyError(name)
                self._own[name] = self._table[name]  # each of the table's columns taken once
            return self._own[name]
        q, field, j = where[:3]
        values = getattr(self._laws[q], field)
        return values if j is None else values[:, j]

    def column_dtype(self, name) -> np.dtype:
        """The dtype of a column, without making it (a member's line is float)."""
        return _FLOAT if name in self._member else self[name].dtype

    def floats(self, names) -> np.ndarray:
        """The columns ``names`` as one float block (rows x names), the members' lines taken per quantity by one
        pick from its fields side by side, not a column at a time."""
        out = np.empty((self._rows, len(names)))
        fields = tuple((q, self._laws[q].line_fields()) for q in QUANTITIES)
        own, picks = _float_plan(tuple(names), fields)
        for i, name in own:
            out[:, i] = np.asarray(self[name], dtype=float)
        for q, at, columns in picks:
            laws = self._laws[q]
            side_by_side = np.concatenate([np.asarray(getattr(laws, f), dtype=float) for f in laws.line_fields()],
                                          axis=1)
            out[:, at] = side_by_side[:, columns]
        return out

    def __iter__(self):
        return iter(self._names)

    def __len__(self) -> int:
        return len(self._names)

    def __contains__(self, name) -> bool:
        return name in self._member or name in self._table


@lru_cache(maxsize=16)
def _float_plan(names: tuple, fields: tuple) -> tuple:
    """Where FitColumns.floats takes each of ``names`` from (the quantities' line fields as ``fields``): the table's
    own (position, name) and per quantity the positions and columns among its fields side by side."""
    member = {}
    for q, its_fields in fields:
        member.update(member_columns(q, its_fields))
    own, picks = [], {}
    for i, name in enumerate(names):
        where = member.get(name)
        if where is None or where[2] is None:
            own.append((i, name))
        else:
            at, columns = picks.setdefault(where[0], ([], []))
            at.append(i)
            columns.append(where[3])
    return tuple(own), tuple((q, np.array(at), np.array(columns)) for q, (at, columns) in picks.items())


def fit_columns(table: pd.DataFrame | Mapping, laws: dict[str, LawFits]) -> Mapping:
    """The columns of FleetAnalysis.fits in their order, without framing them (FitColumns): ``table``'s
    (fit_degradation's, with whatever columns were added after them; a frame's as Series, a mapping's arrays as
    they are), and after each quantity's figures its members' lines (wear_laws.member_columns: hundreds of float
    arrays per quantity)."""
    return FitColumns(table, laws)


def with_member_lines(table: pd.DataFrame, laws: dict[str, LawFits]) -> pd.DataFrame:
    """The fits as one wide frame (FleetAnalysis.fits), columns as fit_columns: each run of the table's own columns
    taken together, each quantity's members as one block (a frame of one array, not one Series each)."""
    parts = []
    for own, run in groupby(fit_columns(table, laws).items(), key=lambda item: isinstance(item[1], pd.Series)):
        run = dict(run)
        parts.append(table[list(run)] if own else pd.DataFrame(np.column_stack(list(run.values())), columns=list(run),
                                                                index=table.index))
    return pd.concat(parts, axis=1)


def _numbers(column: pd.Series) -> np.ndarray:
    """A column as floats, what is not a number NaN (pd.to_numeric's coercion, skipped for a column of floats)."""
    if isinstance(column.dtype, np.dtype) and column.dtype.kind == "f":  # numpy floats (not pandas' nullable ones)
        return column.to_numpy(dtype=float)
    return pd.to_numeric(column, errors="coerce").to_numpy(dtype=float)


def fit_degradation(referred: pd.DataFrame, settings: AnalysisSettings | None = None,
                    kind_of_pump: pd.Series | None = None, shape_priors: pd.DataFrame | None = None,
                    ) -> tuple[dict[str, np.ndarray], dict[str, LawFits]]:
    """Fit ln(slip_ref) and ln(drain_ref) against interval hours for every pump interval.

    referred: refer_readings output with intervals assigned (pump_id, interval_no, interval_hours).
    kind_of_pump (pump_id -> kind) is read only for the pooled shape prior (settings.shape_prior), fitted from
    these intervals unless shape_priors gives it.

    Only unflagged readings feed the fits. Error model of the slip: flow-meter noise sigma_Q = noise
    fraction x reading, so var(ln slip_ref) ~ (sigma_Q / slip_raw)^2 with slip_raw the raw (unreferred)
    slip: a reading with a small raw slip (low pressure, cold oil) says little about the clearances. The
    raw slip is floored at a small positive value so noise pushing flow above theoretical does not break
    the log. The case drain is measured directly, with a constant relative noise.

    Returns the columns of a table (arrays by name, framed by the engine once with the figures that follow)
    with one row per pump interval: pump_id, interval_no, current_hours (latest hours in the interval),
    and per quantity q in (slip, drain):
    - q_n_points, q_span_hours: the readings fitted;
    - q_a, q_b, q_var_a, q_var_b, q_cov_ab, q_scale, q_dof: the exponential law's line ln q = a + b h;
    - q_current_lpm, q_start_lpm: the trend (median of the heaviest law) at current_hours and at 0;
    - q_slope_lpm_per_h: the model-weighted growth rate at current_hours;
    - q_wear_law (the law with the most weight, None if unfitted) and q_weight_<law> for each of LAWS;
    and the fitted laws of each quantity ({"slip": LawFits, "drain": LawFits}, rows as the table's). The engine
    works on this narrow table and the laws; `with_member_lines` adds q_hours_scale, q_hours_offset and
    q_<member>_<a|b|var_a|var_b|cov_ab|dof|weight> for every member of the model set (LawFits.from_columns(fits, q)
    rebuilds them, e.g. for a chart's band) to the fits it hands out.
    Derived eta_v_ref figures are added by `summarise_fits`.
    """
    s = settings or AnalysisSettings()
    unique, group_all = pair_codes(referred["pump_id"].to_numpy(), referred["interval_no"].to_numpy())
    n_groups = len(unique)

    hours = _numbers(referred["interval_hours"])
    valid_hours = np.isfinite(hours) & (hours >= 0)
    current_hours = group_max(group_all, np.where(valid_hours, hours, np.nan), n_groups)
    good = referred["flag"].isna().to_numpy() & valid_hours

    columns = {"pump_id": unique[:, 0], "interval_no": unique[:, 1], "current_hours": current_hours}
    # Hours run before the interval's hours count: the first interval's hour meter counts from new.
    start_meter = _numbers(referred["interval_start_hours"])
    first_interval = referred["interval_no"].to_numpy() == 0
    offset = group_first(group_all, np.where(first_interval, start_meter, 0.0), n_groups)
    offset = np.maximum(np.where(np.isnan(offset), 0.0, offset), 0.0)

    # Slip: error model from the flow meter.
    rated = referred["rated_flow_lpm"].to_numpy(dtype=float)
    floor = s.slip_floor_fraction * rated
    slip_raw = referred["slip_lpm"].to_numpy(dtype=float)
    factor = referred["referral_factor"].to_numpy(dtype=float)
    flow = referred["flow_lpm"].to_numpy(dtype=float)
    use = good & np.isfinite(slip_raw) & np.isfinite(factor) & (factor > 0) & np.isfinite(flow) & (floor > 0)
    g, h = group_all[use], hours[use]
    floor_u, factor_u = floor[use], factor[use]
    sigma_q = s.flow_noise_fraction * np.abs(flow[use])
    sigma_q = np.maximum(sigma_q, 1e-6 * rated[use])  # a zero flow reading still has meter noise
    q_slip = np.maximum(slip_raw[use], floor_u) * factor_u

    def slip_sigma(_fitted):
        return sigma_q * factor_u  # the flow meter's noise, referred like the slip

    slip_laws = fit_wear_laws(g, h, q_slip, slip_sigma, floor_u * factor_u, n_groups, s, offset)

    # Case drain: measured directly, constant relative noise.
    drain_ref = referred["drain_ref_lpm"].to_numpy(dtype=float)
    use_d = good & np.isfinite(drain_ref) & (floor > 0)
    gd, hd = group_all[use_d], hours[use_d]
    drain_floor = floor[use_d] * factor[use_d]
    q_drain = np.maximum(drain_ref[use_d], drain_floor)

    def drain_sigma(fitted):
        return s.drain_noise_fraction * (q_drain if fitted is None else fitted)

    drain_laws = fit_wear_laws(gd, hd, q_drain, drain_sigma, drain_floor, n_groups, s, offset)

    # One law of wear for both trends of an interval (they leak through the same clearances).
    joint = joint_score(slip_laws.law_score, drain_laws.law_score)
    joint_members = joint_score(slip_laws.member_score, drain_laws.member_score)
    slip_laws.weigh(joint, joint_members)
    drain_laws.weigh(joint, joint_members)
    if s.shape_prior == "pooled" and kind_of_pump is not None:  # the forecast on the kind's pooled shapes
        pool_shapes((slip_laws, drain_laws), joint, joint_members, kind_of_pump.reindex(unique[:, 0]), s,
                    shape_priors)
    # The slip's forecast follows the case drain's sharper shape (LawFits.centred_on); its band stays its own.
    slip_laws.centred_on(drain_laws, g, h, q_slip, slip_sigma(None), s)
    columns.update(_figures(slip_laws, _span(g, h, n_groups), current_hours, "slip", s))
    columns.update(_figures(drain_laws, _span(gd, hd, n_groups), current_hours, "drain", s))
    return columns, {"slip": slip_laws, "drain": drain_laws}


def enough_data(n_points: np.ndarray, span_hours: np.ndarray, settings: AnalysisSettings) -> np.ndarray:
    """The minimum data for a pump's own trend: enough usable readings over enough running hours."""
    n = np.asarray(n_points, dtype=float)
    span = np.asarray(span_hours, dtype=float)
    # a missing count or span is none (np.nan_to_num's 0, without its checks: an infinite one compares alike)
    return (np.where(np.isnan(n), 0.0, n) >= settings.min_points) & (
        np.where(np.isnan(span), 0.0, span) >= settings.min_span_hours)


def not_enough_reason(n_points: np.ndarray, span_hours: np.ndarray, settings: AnalysisSettings, what: str):
    """A sentence saying why a trend was not fitted, or None where it was."""
    n = np.nan_to_num(np.asarray(n_points, dtype=float)).astype(int)
    span = np.nan_to_num(np.asarray(span_hours, dtype=float))
    ok = enough_data(n, span, settings)
    text = [
        None
        if fine
        else f"Not enough data for the {what} trend: {k} usable reading{'s' if k != 1 else ''} spanning "
        f"{sp:.0f} h (needs {settings.min_points} over {settings.min_span_hours:.0f} h)."
        for fine, k, sp in zip(ok, n, span, strict=True)
    ]
    return np.array(text, dtype=object)


def summarise_fits(fits: dict, rated_flow_lpm: np.ndarray, max_flow_lpm: np.ndarray, settings) -> dict:
    """Add the figures people read: eta_v,ref now, its decline per 1000 h, drain % now, data sufficiency.

    eta_v,ref = 1 - slip_ref / rated flow, so d(eta)/dh = -d(slip_ref)/dh / rated flow, the growth rate being
    the model-weighted one; the decline is reported positive when the pump is losing efficiency (fraction per
    1000 h). ``fits``: fit_degradation's columns; returns them with these added (arrays by name).
    """
    rated = np.asarray(rated_flow_lpm, dtype=float)
    max_flow = np.asarray(max_flow_lpm, dtype=float)
    ok = {q: enough_data(fits[f"{q}_n_points"], fits[f"{q}_span_hours"], settings) for q in QUANTITIES}
    with np.errstate(invalid="ignore", divide="ignore"):
        added = {
            "eta_v_ref": np.where(ok["slip"], 1.0 - fits["slip_current_lpm"] / rated, np.nan),
            "eta_v_decline_per_1000h": np.where(ok["slip"], 1000.0 * fits["slip_slope_lpm_per_h"] / rated, np.nan),
            "drain_pct_ref": np.where(ok["drain"], 100.0 * fits["drain_current_lpm"] / max_flow, np.nan),
            **{f"{q}_enough_data": ok[q] for q in QUANTITIES},
        }
    out = {**fits, **added}
    for q in QUANTITIES:  # a law is named only where there is a trend (as Series.where(ok, None), on the array)
        name = f"{q}_wear_law"
        out[name] = np.where(ok[q], np.asarray(fits[name], dtype=object), None)
    return out
