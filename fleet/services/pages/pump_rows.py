"""One pump's rows, as the pump page needs them: a few plain queries of this pump's columns.

The frames handed to the core are those ``fleet.services.analysis.frames.load_frames`` gives for this pump (its
effective limits and the oil of each reading by the same functions: effective_limits, attach_oil's search
frames.oil_of_one; tests/test_pump_page_rows.py compares them), without the whole-fleet loader's joins and maps.
The rows the page shows beside them (who took a reading, the stays with their names, every maintenance record)
come from the same queries, so nothing is read twice.
Nothing is kept between requests: a write shows on the next page.
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
    Position,
    Pump,
    Reading,
    Site,
)
from fleet.frames import EVENT_COLUMNS, FLOW_POINT_COLUMNS, PUMP_COLUMNS, READING_COLUMNS
from fleet.physics.pump import theoretical_flow_lpm
from fleet.services.analysis.frames import (
    datetime_unit,
    driver_rows,
    effective_limits,
    effective_limits_of_one,
    oil_of_one,
)

# The columns of the readings the page shows besides the core's.
READING_EXTRAS = ("source", "taken_by")
EVENT_EXTRAS = ("event_id", "downtime_h", "failure_mode", "note")
_NUMBERS = ("hours", "pressure_bar", "speed_rpm", "flow_lpm", "drain_lpm", "temp_c", "stroke")


@dataclass(frozen=True)
class Stay:
    """One installation of the pump, with the names of where it sat and the oil of that machine."""

    installed_at: datetime
    removed_at: datetime | None
    installed_hours: float | None
    removed_hours: float | None
    position: str
    machine_id: int
    machine: str
    site_id: int
    site: str
    oil: dict | None  # name, iso_vg, viscosity_40, viscosity_100, density_15


@dataclass
class PumpRows:
    """The core's frames of one pump as known at a moment (``pumps``, ``readings``, ``events``, ``flow_points``),
    and what the page shows beside them: every reading's source and author (``reading_extras``, by reading id),
    every maintenance record (``all_events``, in date order), every flow-test point (``all_flow_points``) and
    the pump's stays in time order."""

    pumps: pd.DataFrame
    readings: pd.DataFrame
    events: pd.DataFrame
    flow_points: pd.DataFrame
    reading_extras: pd.DataFrame
    all_readings: pd.DataFrame
    all_events: pd.DataFrame
    all_flow_points: pd.DataFrame
    stays: list[Stay]

    @property
    def here(self) -> Stay | None:
        """Where the pump sits now: its latest stay not ended."""
        return _here(self.stays)

    @property
    def last_site_id(self) -> int | None:
        """The site of the pump's latest installation (ended or not), whose conventions its pages follow."""
        return max(self.stays, key=lambda stay: stay.installed_at).site_id if self.stays else None


# The pump's installations with their places and oils, built once (building it costs more than running it).
_STAYS = (select(Installation.installed_at, Installation.removed_at, Installation.installed_hours,
                 Installation.removed_hours, Position.name, Machine.id, Machine.name, Site.id, Site.name,
                 Oil.id, Oil.name, Oil.iso_vg, Oil.viscosity_40, Oil.viscosity_100, Oil.density_15)
          .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
          .join(Site, Site.id == Machine.site_id).outerjoin(Oil, Oil.id == Machine.oil_id)
          .where(Installation.pump_id == bindparam("pump_id")).order_by(Installation.installed_at))


def _stays(session: Session, pump_id: int) -> list[Stay]:
    rows = session.execute(_STAYS, {"pump_id": pump_id})
    return [Stay(*row[:9], oil=None if row[9] is None else dict(
        zip(("name", "iso_vg", "viscosity_40", "viscosity_100", "density_15"), row[10:], strict=True)))
        for row in rows]


def _oil(taken_at: np.ndarray, stays: list[Stay]) -> dict[str, np.ndarray]:
    """attach_oil's oil columns for this pump's readings (in time order), from its stays, without a frame of
    either: the stays in installation order as attach_oil sorts them, and the same search (frames.oil_of_one)."""
    keys = (("nu40", "viscosity_40"), ("nu100", "viscosity_100"), ("density15", "density_15"))
    if len(taken_at) == 0 or not stays:
        return {column: np.full(len(taken_at), np.nan) for column, _ in keys}
    installed = pd.to_datetime([stay.installed_at for stay in stays]).to_numpy()
    by_time = np.argsort(installed, kind="stable")
    oils = {column: np.array([np.nan if stay.oil is None or stay.oil[key] is None else stay.oil[key]
                              for stay in stays], dtype=float)[by_time] for column, key in keys}
    return oil_of_one(taken_at, installed[by_time], oils)


_LIMIT_DEFAULTS = select(LimitDefault.__table__)


def _pump_frame(session: Session, pump: Pump, here: Stay | None) -> pd.DataFrame:
    """load_pumps' row for this pump: its columns, where it sits now, its site's energy figures, its limits."""
    row = {column.key: getattr(pump, column.key) for column in Pump.__table__.columns}
    row["pump_id"], row["pump"] = row.pop("id"), row.pop("serial")
    if here is None:  # in the store: no place, and so no site's tariff (as load_pumps leaves them)
        row.update(dict.fromkeys(("site", "machine", "position", "machine_id", "site_id")),
                   **dict.fromkeys(("tariff_per_kwh", "motor_efficiency", "currency"), np.nan))
    else:
        site = session.get(Site, here.site_id)
        row.update(site=here.site, machine=here.machine, position=here.position, machine_id=here.machine_id,
                   site_id=here.site_id, tariff_per_kwh=site.tariff_per_kwh, motor_efficiency=site.motor_efficiency,
                   currency=site.currency)
    if row["max_flow_lpm"] is None:
        row["max_flow_lpm"] = theoretical_flow_lpm(pump.displacement_cc, pump.rated_speed_rpm)
    keys, rows = driver_rows(session, _LIMIT_DEFAULTS)
    defaults = [dict(zip(keys, values, strict=True)) for values in rows]
    frame = effective_limits_of_one(row, defaults)
    if frame is None:  # a row the one-row path does not cover: the frame path
        frame = effective_limits(pd.DataFrame([row]), pd.DataFrame(defaults, columns=keys))
    missing = [c for c in PUMP_COLUMNS if c not in frame]
    assert not missing, missing
    return frame


def _driver_columns(session: Session, statement, parameters: dict | None = None) -> dict[str, tuple]:
    """The driver's rows of ``statement`` as columns (name -> values), without SQLAlchemy's per-row Row and type
    processing or a frame built row by row: for one pump's few hundred rows the frame's own machinery costs more
    than the query."""
    keys, rows = driver_rows(session, statement, parameters)
    return dict(zip(keys, zip(*rows, strict=True) if rows else [()] * len(keys), strict=True))


_STORED_TIME = len("2021-01-04 08:00:00.000000")  # how SQLAlchemy writes a DateTime into SQLite's text


def _times(values: tuple) -> np.ndarray:
    """Times from the driver as pd.to_datetime(format="ISO8601") reads them. SQLite gives SQLAlchemy's text, all
    of one fixed form, which numpy parses exactly and many times faster; anything else goes to pandas."""
    if values and all(isinstance(v, str) and len(v) == _STORED_TIME for v in values):
        return np.array(values, dtype="datetime64[us]").astype(_text_unit())
    return pd.to_datetime(pd.Series(values, dtype=object), format="ISO8601").to_numpy()


@functools.cache
def _text_unit() -> np.dtype:
    """The unit pandas reads SQLAlchemy's time text in (it has changed between versions; asked once)."""
    return pd.to_datetime(pd.Series(["2021-01-04 08:00:00.000000"], dtype=object), format="ISO8601").dtype


def _numbers(values: tuple) -> np.ndarray:
    """A column of numbers (None -> NaN) as floats, as a frame's astype(float) gives them."""
    return np.array(values, dtype=float)


@dataclass
class CoreRows:
    """The core's frames of one pump as known at a moment (what its analysis reads), with the rows the page
    makes its own from."""

    pumps: pd.DataFrame
    readings: pd.DataFrame
    events: pd.DataFrame
    flow_points: pd.DataFrame
    all_readings: pd.DataFrame
    all_flow_points: pd.DataFrame
    stays: list[Stay]
    reading_id: np.ndarray  # the readings' ids in the stored order (that of ``got``)
    got: dict[str, tuple]  # the readings' columns as the driver gave them
    got_events: dict[str, tuple]  # the maintenance records' columns (with the page's fields) as the driver gave them


# One pump's readings, flow test points and maintenance records, each statement built once.
_READINGS = select(
    Reading.id.label("reading_id"), Reading.pump_id, Reading.taken_at, Reading.hours, Reading.pressure_bar,
    Reading.speed_rpm, Reading.flow_lpm, Reading.drain_lpm, Reading.temp_c, Reading.stroke, Reading.source,
    Reading.taken_by).where(Reading.pump_id == bindparam("pump_id"))
_FLOW_POINTS = (select(FlowTestPoint.reading_id, FlowTestPoint.pressure_bar, FlowTestPoint.flow_lpm)
                .join(Reading, Reading.id == FlowTestPoint.reading_id).where(Reading.pump_id == bindparam("pump_id")))
_EVENTS = select(
    MaintenanceEvent.pump_id, MaintenanceEvent.date, MaintenanceEvent.hours, MaintenanceEvent.kind,
    MaintenanceEvent.cost, MaintenanceEvent.id.label("event_id"), MaintenanceEvent.downtime_h,
    MaintenanceEvent.failure_mode, MaintenanceEvent.note).where(MaintenanceEvent.pump_id == bindparam("pump_id"))


def core_rows(session: Session, pump: Pump, as_of: datetime) -> CoreRows:
    """The frames of ``pump`` the core reads, as known at ``as_of`` (load_frames' for this pump), from the few
    queries the page reads too; each frame made once from its columns."""
    stays = _stays(session, pump.id)
    got = _driver_columns(session, _READINGS, {"pump_id": pump.id})
    taken = _times(got["taken_at"])
    order = np.argsort(taken, kind="stable")  # the readings in time order, as the loader sorts them
    columns = {"reading_id": np.array(got["reading_id"], dtype=np.int64),
               "pump_id": np.array(got["pump_id"], dtype=np.int64), "taken_at": taken,
               **{c: _numbers(got[c]) for c in _NUMBERS}}
    reading_id = columns["reading_id"]
    columns = {c: v[order] for c, v in columns.items()}
    columns.update(_oil(columns["taken_at"], stays))
    all_readings = pd.DataFrame({c: columns[c] for c in READING_COLUMNS})
    points = _driver_columns(session, _FLOW_POINTS, {"pump_id": pump.id})
    points = pd.DataFrame({"reading_id": np.array(points["reading_id"], dtype=np.int64),
                           "pressure_bar": _numbers(points["pressure_bar"]), "flow_lpm": _numbers(points["flow_lpm"])},
                          columns=list(FLOW_POINT_COLUMNS))
    got_events = _driver_columns(session, _EVENTS, {"pump_id": pump.id})
    events = _events(got_events, list(EVENT_COLUMNS))

    moment = np.datetime64(pd.Timestamp(as_of).to_datetime64())  # what was known by then, as frames.known_by keeps
    known = columns["taken_at"] <= moment
    readings = all_readings if known.all() else all_readings[known]
    done = events["date"].to_numpy() <= moment
    return CoreRows(
        pumps=_pump_frame(session, pump, _here(stays)),
        readings=readings,
        # A frame kept whole is the frame itself: a mask of all true would copy it (frames.known_by's rows).
        events=events if done.all() else events.loc[done],
        flow_points=points if known.all() else points.loc[points["reading_id"].isin(readings["reading_id"])],
        all_readings=all_readings, all_flow_points=points, stays=stays, reading_id=reading_id, got=got,
        got_events=got_events)


def _events(got: dict[str, tuple], names: list[str]) -> pd.DataFrame:
    """The maintenance records' columns ``names`` from the driver's (``got``), in the stored order: times as
    load_events reads them (_times, in the unit pandas gives the datetimes load_events reads, whatever form the
    driver's times came in), hours and cost floats, the other columns as a frame infers them from the rows."""
    if not got["pump_id"]:  # none: the empty frame's object columns, as load_events makes them
        events = pd.DataFrame([], columns=names)
        events["date"] = pd.to_datetime(events["date"])
        return events.astype({"hours": float, "cost": float})
    return pd.DataFrame({name: (_times(got[name]).astype(datetime_unit()) if name == "date" else _numbers(got[name])
                                if name in ("hours", "cost") else list(got[name])) for name in names}, columns=names)


def pump_rows(session: Session, pump: Pump, as_of: datetime) -> PumpRows:
    """Everything about ``pump`` the page draws, with the core's frames as known at ``as_of`` (core_rows)."""
    core = core_rows(session, pump, as_of)
    extras = pd.DataFrame({c: pd.Series(list(core.got[c])) for c in READING_EXTRAS})  # types as a frame infers them
    extras.index = pd.Index(core.reading_id, name="reading_id")
    return PumpRows(
        pumps=core.pumps, readings=core.readings, events=core.events, flow_points=core.flow_points,
        reading_extras=extras,
        all_readings=core.all_readings,
        all_events=_events(core.got_events, [*EVENT_COLUMNS, *EVENT_EXTRAS]).sort_values(
            "date", kind="stable").reset_index(drop=True),
        all_flow_points=core.all_flow_points,
        stays=core.stays,
    )


def _here(stays: list[Stay]) -> Stay | None:
    """The latest stay not ended (stays in time order), as load_pumps places a pump."""
    open_stays = [stay for stay in stays if stay.removed_at is None]
    return open_stays[-1] if open_stays else None
