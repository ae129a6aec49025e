"""Load the frames the computation core reads (columns declared in fleet.frames) from the database.

Set-based: one query per table, joined in pandas, never a query per pump.
"""

import functools
from dataclasses import dataclass
from datetime import datetime

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session

from fleet.db.models import (
    FlowTestPoint,
    Installation,
    LimitDefault,
    Machine,
    MaintenanceEvent,
    Oil,
    OilSample,
    Position,
    Pump,
    Reading,
    Site,
)
from fleet.frames import EVENT_COLUMNS, FLOW_POINT_COLUMNS, PUMP_COLUMNS, READING_COLUMNS, SAMPLE_COLUMNS
from fleet.kinds import PISTON_KINDS
from fleet.limits import DEFAULT_LIMITS, VARIABLE_PISTON_TARGET
from fleet.physics.pump import theoretical_flow_lpm

LIMIT_FIELDS = ("eta_v_limit", "drain_limit_pct", "oil_temp_max_c", "oil_temp_min_c", "cleanliness_target",
                "reading_interval_days", "planning_horizon_weeks")


@dataclass
class FleetFrames:
    pumps: pd.DataFrame
    readings: pd.DataFrame
    flow_points: pd.DataFrame
    events: pd.DataFrame
    samples: pd.DataFrame


def _query(session: Session, statement, parameters: dict | None = None) -> pd.DataFrame:
    result = session.execute(statement, parameters)
    return pd.DataFrame(result.all(), columns=list(result.keys()))


def driver_rows(session: Session, statement, parameters: dict | None = None) -> tuple[list[str], list[tuple]]:
    """The column names and the driver's own rows of ``statement`` (with its bound ``parameters``), without
    SQLAlchemy's per-row Row and type processing (on SQLite a time then arrives as text)."""
    result = session.connection().execute(statement, parameters)
    try:
        return list(result.keys()), (result.cursor.fetchall() if result.cursor is not None else [])
    finally:
        result.close()


def _restrict(statement, column, pump_ids):
    return statement if pump_ids is None else statement.where(column.in_(list(pump_ids)))


def installation_history(session: Session, pump_ids=None) -> pd.DataFrame:
    """Every stay of every pump, with the machine, site and oil of the position."""
    statement = (
        select(Installation.pump_id, Installation.installed_at, Installation.removed_at,
               Installation.installed_hours, Position.name.label("position"), Machine.id.label("machine_id"),
               Machine.name.label("machine"), Site.name.label("site"), Site.id.label("site_id"),
               Oil.viscosity_40.label("nu40"), Oil.viscosity_100.label("nu100"), Oil.density_15.label("density15"))
        .join(Position, Position.id == Installation.position_id)
        .join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id)
        .outerjoin(Oil, Oil.id == Machine.oil_id)
    )
    frame = _query(session, _restrict(statement, Installation.pump_id, pump_ids))
    frame["installed_at"] = pd.to_datetime(frame["installed_at"])
    return frame.sort_values(["installed_at", "pump_id"], kind="stable").reset_index(drop=True)


def kind_limits(defaults: list[dict]) -> dict[str, dict]:
    """Each limit field's value per pump kind (name -> kind -> value): the kind's stored default where set
    (``defaults``: the limit_default rows as dicts), else the built-in one."""
    stored = {row["kind"]: row for row in defaults}
    return {name: {kind: (stored[kind][name] if kind in stored and pd.notna(stored[kind][name])
                          else getattr(limits, name)) for kind, limits in DEFAULT_LIMITS.items()}
            for name in LIMIT_FIELDS}


def lifts_target(variable: bool, kind, own_target, target) -> bool:
    """Whether a pump's cleanliness target becomes VARIABLE_PISTON_TARGET: a variable piston pump without its own
    target (``own_target`` missing), whose ``target`` is its kind's default never edited, wants the cleaner code
    (common practice, no source)."""
    default = DEFAULT_LIMITS[kind].cleanliness_target if kind in DEFAULT_LIMITS else None
    return bool(variable) and kind in PISTON_KINDS and pd.isna(own_target) and isinstance(default, str) \
        and target == default


def effective_limits(pumps: pd.DataFrame, defaults: pd.DataFrame) -> pd.DataFrame:
    """Per-pump limits: the pump's override where set, else its kind's stored default, else the built-in one."""
    columns = list(defaults.columns)  # rows as plain dicts, without to_dict's per-cell boxing
    by_field = kind_limits([dict(zip(columns, values, strict=True))
                            for values in zip(*(defaults[c].tolist() for c in columns), strict=True)])
    kinds = pumps["kind"].tolist()
    filled = {}  # the limit columns, set in one step (each set alone copies the frame's block again)
    for name in LIMIT_FIELDS:
        by_kind = by_field[name]
        override = pumps[name] if name in pumps else pd.Series(np.nan, index=pumps.index)
        given = override.notna().to_numpy()
        if given.all():  # every pump sets its own: nothing to fill (a Series.where costs as much as the rest)
            continue
        # A list lookup per pump: Series.map would build a Series of the dict first, on every call.
        of_kind = pd.Series([by_kind.get(kind, np.nan) for kind in kinds], index=pumps.index)
        if not given.any() and override.dtype == object:  # none set (one pump's row): the kind's, as where gives
            filled[name] = of_kind.astype(object)
        else:
            filled[name] = override.where(given, of_kind)
    out = pumps.assign(**filled)
    # (Plain lists: a handful of pandas steps here cost more than the rest for the one pump of a write.)
    own = pumps["cleanliness_target"].tolist() if "cleanliness_target" in pumps else [None] * len(out)
    lift = np.array([lifts_target(v, k, o, t) for v, k, o, t in zip(
        out["variable"].astype(bool).tolist(), kinds, own, out["cleanliness_target"].tolist(), strict=True)],
        dtype=bool)
    if lift.any():
        out.loc[lift, "cleanliness_target"] = VARIABLE_PISTON_TARGET
    return out


def effective_limits_of_one(row: dict, defaults: list[dict]) -> pd.DataFrame | None:
    """effective_limits(pd.DataFrame([row]), defaults) of one pump's row (its fields as Python values, a limit
    not set None), framed once: the same rules (kind_limits, lifts_target) on the row's values, the limits
    filled in object columns as effective_limits fills a column of one row. None for a row it does not cover
    (a limit given as a float NaN), which the frame path then takes."""
    values, filled = dict(row), {}
    by_field = kind_limits(defaults)
    for name in LIMIT_FIELDS:
        own = row.get(name)
        if own is None:
            filled[name] = by_field[name].get(row["kind"], np.nan)
        elif pd.isna(own):
            return None
    values.update(filled)
    if lifts_target(row["variable"], row["kind"], row.get("cleanliness_target"), values["cleanliness_target"]):
        values["cleanliness_target"] = filled["cleanliness_target"] = VARIABLE_PISTON_TARGET
    frame = pd.DataFrame({name: (np.array([value], dtype=object) if name in filled else [value])
                          for name, value in values.items()})
    if isinstance(filled.get("cleanliness_target"), str):  # numpy's object text is read as str: keep it object
        frame["cleanliness_target"] = frame["cleanliness_target"].astype(object)
    return frame


def load_pumps(session: Session, pump_ids=None, history: pd.DataFrame | None = None) -> pd.DataFrame:
    """The pumps with their place now and their effective limits; ``history`` (installation_history of the same
    pumps) when the caller has it already."""
    pumps = _query(session, _restrict(select(Pump.__table__), Pump.id, pump_ids)).rename(
        columns={"id": "pump_id", "serial": "pump", "oil_temp_max_c": "oil_temp_max_c"}
    )
    if history is None:
        history = installation_history(session, pump_ids)
    current = history[history["removed_at"].isna()].drop_duplicates("pump_id", keep="last").set_index("pump_id")
    for column in ("site", "machine", "position", "machine_id", "site_id"):
        pumps[column] = pumps["pump_id"].map(current[column]) if len(current) else None
    sites = _query(session, select(Site.id.label("site_id"), Site.tariff_per_kwh, Site.motor_efficiency,
                                   Site.currency)).set_index("site_id")
    for column in ("tariff_per_kwh", "motor_efficiency", "currency"):
        pumps[column] = pumps["site_id"].map(sites[column]) if len(sites) else None
    pumps["max_flow_lpm"] = pumps["max_flow_lpm"].where(
        pumps["max_flow_lpm"].notna(), theoretical_flow_lpm(pumps["displacement_cc"], pumps["rated_speed_rpm"])
    )
    defaults = _query(session, select(LimitDefault.__table__))
    pumps = effective_limits(pumps, defaults)
    missing = [c for c in PUMP_COLUMNS if c not in pumps]
    assert not missing, missing
    return pumps.sort_values("pump_id").reset_index(drop=True)


def load_readings(session: Session, pump_ids=None, history: pd.DataFrame | None = None) -> pd.DataFrame:
    statement = select(Reading.id.label("reading_id"), Reading.pump_id, Reading.taken_at, Reading.hours,
                       Reading.pressure_bar, Reading.speed_rpm, Reading.flow_lpm, Reading.drain_lpm,
                       Reading.temp_c, Reading.stroke)
    readings = _reading_columns(session, _restrict(statement, Reading.pump_id, pump_ids))
    if history is None:
        history = installation_history(session, pump_ids)
    readings = attach_oil(readings, history)
    return readings[list(READING_COLUMNS)].sort_values(["pump_id", "taken_at"], kind="stable").reset_index(drop=True)


_READING_FLOATS = ("hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c", "stroke")


def _reading_columns(session: Session, statement) -> pd.DataFrame:
    """The readings of ``statement`` (load_readings' columns) as a frame: ids as integers, times as datetime64,
    the rest floats (NULL -> NaN). The driver's rows become one table of objects, each column of it an array at
    once, not through pandas' inference per cell (a third of the time); the frame equals pandas' own conversion of
    the same rows (tests/test_analysis_service.py)."""
    keys, rows = driver_rows(session, statement)
    if not rows or not isinstance(rows[0][keys.index("taken_at")], str):  # no rows, or the driver's own times
        readings = pd.DataFrame.from_records(rows, columns=keys, coerce_float=True)
        readings["taken_at"] = pd.to_datetime(readings["taken_at"], format="ISO8601")
        return readings.astype({c: float for c in _READING_FLOATS})
    table = np.array(rows, dtype=object)  # rows x columns, one conversion
    del rows
    return pd.DataFrame({
        name: (np.array(table[:, j], dtype=float) if name in _READING_FLOATS
               else pd.to_datetime(table[:, j], format="ISO8601") if name == "taken_at"
               else np.array(table[:, j], dtype=np.int64))
        for j, name in enumerate(keys)}, columns=keys)


def attach_oil(readings: pd.DataFrame, history: pd.DataFrame) -> pd.DataFrame:
    """Give each reading the oil of the machine its pump sat in when it was taken.

    A reading from before the pump's first recorded installation takes that first installation's oil.
    """
    oil_columns = ["nu40", "nu100", "density15"]
    if len(readings) == 0 or len(history) == 0:
        return readings.assign(**{c: np.nan for c in oil_columns})
    left = readings.sort_values("taken_at", kind="stable")
    right = history[["pump_id", "installed_at", *oil_columns]].sort_values("installed_at", kind="stable")
    pumps = np.unique(np.r_[left["pump_id"].to_numpy(np.int64), right["pump_id"].to_numpy(np.int64)])
    if len(pumps) == 1:  # one pump (its analysis after a write, its page): a search, not a merge
        return _attach_oil_of_one(left, right, oil_columns)
    placed = pd.merge_asof(left, right, left_on="taken_at", right_on="installed_at", by="pump_id",
                           direction="backward")
    first = right.drop_duplicates("pump_id", keep="first").set_index("pump_id")
    for column in oil_columns:
        fallback = placed["pump_id"].map(first[column])
        placed[column] = placed[column].where(placed[column].notna(), fallback).astype(float)
    return placed.drop(columns=["installed_at"])


def _attach_oil_of_one(left: pd.DataFrame, right: pd.DataFrame, oil_columns: list[str]) -> pd.DataFrame:
    """attach_oil for the readings and stays of one pump, both in time order (see oil_of_one)."""
    placed = left.reset_index(drop=True)
    oil = oil_of_one(left["taken_at"].to_numpy(), right["installed_at"].to_numpy(),
                     {column: right[column].to_numpy(dtype=float) for column in oil_columns})
    return pd.concat([placed, pd.DataFrame(oil, index=placed.index)], axis=1)


def oil_of_one(taken_at: np.ndarray, installed_at: np.ndarray, oils: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The oil columns of one pump's readings (times ``taken_at``), its stays in time order (``installed_at``, at
    least one, with each oil column's values in ``oils``): each reading takes the latest stay installed at or
    before it (as merge_asof backward), else, or where that stay's oil is unknown, the first stay's."""
    at = np.searchsorted(installed_at, taken_at, side="right") - 1
    oil = {}
    for column, values in oils.items():
        found = np.where(at >= 0, values[np.maximum(at, 0)], np.nan)
        oil[column] = np.where(np.isnan(found), values[0], found)
    return oil


def load_flow_points(session: Session, pump_ids=None) -> pd.DataFrame:
    statement = (select(FlowTestPoint.reading_id, FlowTestPoint.pressure_bar, FlowTestPoint.flow_lpm)
                 .join(Reading, Reading.id == FlowTestPoint.reading_id))
    frame = _query(session, _restrict(statement, Reading.pump_id, pump_ids))
    return frame[list(FLOW_POINT_COLUMNS)]


def load_events(session: Session, pump_ids=None) -> pd.DataFrame:
    statement = select(MaintenanceEvent.pump_id, MaintenanceEvent.date, MaintenanceEvent.hours,
                       MaintenanceEvent.kind, MaintenanceEvent.cost)
    frame = _query(session, _restrict(statement, MaintenanceEvent.pump_id, pump_ids))
    frame["date"] = pd.to_datetime(frame["date"])
    frame = frame.astype({"hours": float, "cost": float})
    return frame[list(EVENT_COLUMNS)]


_SAMPLE_FLOATS = ("code_4", "code_6", "code_14", "water_ppm", "viscosity_40")
_STORED_TIME = len("2021-01-04 08:00:00.000000")  # how SQLAlchemy writes a DateTime into SQLite's text


# The lab samples' columns, of every machine or of some (built once: a write's one pump asks for its machine's).
_SAMPLES = select(OilSample.machine_id, OilSample.sampled_at, OilSample.reported_at, OilSample.code_4,
                  OilSample.code_6, OilSample.code_14, OilSample.low_count, OilSample.water_ppm,
                  OilSample.viscosity_40)
_SAMPLES_OF = _SAMPLES.where(OilSample.machine_id.in_(bindparam("machines", expanding=True)))


def load_samples(session: Session, machine_ids=None, known_by: pd.Timestamp | None = None) -> pd.DataFrame:
    """The lab samples of ``machine_ids`` (None: every machine); with ``known_by``, as samples_known_by keeps
    them at that moment (on SQLite applied to the columns before the frame is made: the same frame)."""
    statement, parameters = _SAMPLES, None
    if machine_ids is not None:
        statement, parameters = _SAMPLES_OF, {"machines": [int(m) for m in machine_ids]}
    if session.get_bind().dialect.name == "sqlite":
        keys, rows = driver_rows(session, statement, parameters)
        frame = _sample_columns(keys, rows, known_by)
        if frame is not None:
            return frame
        frame = pd.DataFrame(session.execute(statement, parameters).all(), columns=keys)
    else:
        frame = _query(session, statement, parameters)
    for column in ("sampled_at", "reported_at"):
        frame[column] = pd.to_datetime(frame[column])
    frame = frame.astype({c: float for c in _SAMPLE_FLOATS})
    frame["low_count"] = frame["low_count"].astype(bool)
    frame = frame[list(SAMPLE_COLUMNS)]
    return frame if known_by is None else samples_known_by(frame, known_by)


@functools.cache
def datetime_unit() -> np.dtype:
    """The unit pd.to_datetime gives Python datetimes in (it has changed between pandas versions; asked once)."""
    return pd.to_datetime(pd.Series([datetime(2021, 1, 4, 8)], dtype=object)).dtype


def _sample_columns(keys: list[str], rows: list[tuple], known_by: pd.Timestamp | None = None) -> pd.DataFrame | None:
    """load_samples' frame from SQLite's own rows, each column an array at once (numpy reads SQLAlchemy's stored
    time text exactly), with ``known_by`` kept as samples_known_by keeps them; None where that does not apply (no
    rows, a time column all empty, times in another form), for the pandas steps. tests/test_analysis_service.py
    compares the two."""
    if not rows:
        return None
    columns = dict(zip(keys, zip(*rows, strict=True), strict=True))
    out = {}
    for name in ("sampled_at", "reported_at"):
        values = columns[name]
        text = [v for v in values if v is not None]
        if not text or not all(isinstance(v, str) and len(v) == _STORED_TIME for v in text):
            return None
        # In the unit pd.to_datetime gives the driver-processed datetimes.
        out[name] = np.array(["NaT" if v is None else v for v in values], dtype="datetime64[us]").astype(
            datetime_unit())
    frame = {"machine_id": np.array(columns["machine_id"], dtype=np.int64), **out,
             **{c: np.array(columns[c], dtype=float) for c in _SAMPLE_FLOATS},
             "low_count": np.array(columns["low_count"], dtype=bool)}
    frame = {c: frame[c] for c in SAMPLE_COLUMNS}
    taken = None if known_by is None else _known_columns(frame, known_by)
    if taken is None:
        return pd.DataFrame(frame)
    return pd.DataFrame(taken[0], index=pd.RangeIndex(len(rows))[taken[1]])  # the rows samples_known_by keeps


def load_frames(session: Session, pump_ids=None, as_of=None) -> FleetFrames:
    """Everything the core needs about ``pump_ids`` (None: the whole fleet).

    ``as_of`` keeps only what was known at that moment (readings taken, events done, lab results reported by
    then), so an analysis can be replayed for a past week.
    """
    history = installation_history(session, pump_ids)
    pumps = load_pumps(session, pump_ids, history)
    machine_ids = None if pump_ids is None else pumps["machine_id"].dropna().astype(int).unique().tolist()
    frames = FleetFrames(
        pumps=pumps,
        readings=load_readings(session, pump_ids, history),
        flow_points=load_flow_points(session, pump_ids),
        events=load_events(session, pump_ids),
        samples=load_samples(session, machine_ids),
    )
    return frames if as_of is None else known_by(frames, pd.Timestamp(as_of))


def known_by(frames: FleetFrames, moment: pd.Timestamp) -> FleetFrames:
    readings = frames.readings[frames.readings["taken_at"] <= moment]
    return FleetFrames(
        pumps=frames.pumps,
        readings=readings,
        flow_points=frames.flow_points[frames.flow_points["reading_id"].isin(readings["reading_id"])],
        events=frames.events[frames.events["date"] <= moment],
        samples=samples_known_by(frames.samples, moment),
    )


_LAB_RESULTS = ("reported_at", "code_4", "code_6", "code_14", "water_ppm", "viscosity_40")


def samples_known_by(samples: pd.DataFrame, moment: pd.Timestamp) -> pd.DataFrame:
    """The lab samples taken by ``moment``, with the results not reported by then blanked.

    Built column by column from arrays (_known_columns): two masked .loc assignments cost more than the rest of one
    pump's load (tests/test_analysis_service.py compares this with the pandas steps it replaced)."""
    known = _known_columns({name: samples[name].to_numpy() for name in samples.columns}, moment)
    if known is None:
        return samples  # every sample taken and reported by then (the usual case for one machine's few samples)
    return pd.DataFrame(known[0], index=samples.index[known[1]], columns=samples.columns)


def _known_columns(columns: dict[str, np.ndarray], moment: pd.Timestamp) -> tuple[dict, np.ndarray] | None:
    """samples_known_by on the samples' columns (name -> array): the columns of the samples taken by ``moment``
    (fresh arrays) with the results not reported by then blanked, and the mask of the samples taken; None when
    every sample is taken and reported by then (nothing to change)."""
    sampled, reported = columns["sampled_at"], columns["reported_at"]
    moment64 = np.datetime64(pd.Timestamp(moment).to_datetime64())
    taken = sampled <= moment64
    pending = np.isnat(reported) | (reported > moment64)
    if taken.all() and not pending.any():
        return None
    pending = pending[taken]
    blank = pending.any()  # else every result in: nothing to blank
    known = {}
    for name, values in columns.items():
        values = values[taken]  # a fresh array (boolean indexing copies)
        if blank and name in _LAB_RESULTS:
            values[pending] = np.datetime64("NaT") if values.dtype.kind == "M" else np.nan
        elif blank and name == "low_count":
            values[pending] = False
        known[name] = values
    return known, taken
