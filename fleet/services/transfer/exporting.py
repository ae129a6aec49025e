"""Export each kind as the importer reads it, canonical units written into the headers, so files round-trip.

CSV and .xlsx carry the same columns; every text cell passes the formula guard (``fleet.io.formulas``). Times are
each row's site's local time: ISO 8601 with the offset in CSV (``2026-01-15T08:00:00-06:00``), the wall-clock
time in .xlsx (a spreadsheet date has no offset; the importer reads it back in the same site's zone). With
``units="site"`` pressure, flow and temperature are written in the units of the rows' site (one site's rows, or
sites that agree), the header saying which.
"""

import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session, aliased

from fleet import units
from fleet.db.models import (
    FlowTestPoint,
    Installation,
    Machine,
    MaintenanceEvent,
    Oil,
    OilSample,
    Position,
    Pump,
    Reading,
    Site,
)
from fleet.io.columns import KINDS, Column
from fleet.io.formulas import guard
from fleet.io.localtime import zone
from fleet.io.spreadsheet import frame_to_xlsx
from fleet.physics.cleanliness import Iso4406Code
from fleet.services.sitelocal import row_conventions, row_sites

UNIT_MODES = ("canonical", "site")


class ExportError(ValueError):
    """An export that cannot be written as asked (e.g. site units for sites that use different ones)."""


def header(column: Column, unit: str | None = None) -> str:
    if column.quantity is None:
        return column.name
    label = unit or column.export_unit or units.LABELS[column.quantity]
    return f"{column.name} [{label}]" if label else column.name


def export_csv(session: Session, kind: str, unit_mode: str = "canonical", site: str | None = None
               ) -> tuple[str, int]:
    """``kind`` as CSV text, and its number of rows."""
    table = export_table(session, kind, unit_mode=unit_mode, site=site)
    return _guarded(table).to_csv(index=False, lineterminator="\n"), len(table)


def export_xlsx(session: Session, kind: str, unit_mode: str = "canonical", site: str | None = None
                ) -> tuple[bytes, int]:
    """``kind`` as an .xlsx workbook (numbers as numbers, times as Excel dates), and its number of rows."""
    table = export_table(session, kind, text_times=False, unit_mode=unit_mode, site=site)
    return frame_to_xlsx(table, title=kind), len(table)


def _guarded(table: pd.DataFrame) -> pd.DataFrame:
    """Text cells through the formula guard; numbers and times untouched."""
    out = table.copy()
    for name in out.columns:
        series = out[name]
        if not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_datetime64_any_dtype(series)):
            out[name] = series.astype(object).map(guard)
    return out


def export_table(session: Session, kind: str, text_times: bool = True, unit_mode: str = "canonical",
                 site: str | None = None) -> pd.DataFrame:
    """The rows of ``kind`` with the importer's headers; times as text unless ``text_times`` is False; only the
    rows of ``site`` when given; pressure, flow and temperature in the site's units when ``unit_mode`` is
    'site'. ExportError when the rows' sites use different units (export one site, or canonical units)."""
    if unit_mode not in UNIT_MODES:
        raise ExportError(f"units '{unit_mode}' is not one of {', '.join(UNIT_MODES)}")
    frame = _QUERIES[kind](session)
    if site is not None:
        if session.scalar(select(Site.id).where(Site.name == site)) is None:
            raise ExportError(f"no site '{site}' in the register")
        frame = frame[[s is not None and s.name == site for s in row_sites(session, kind, frame)]]
        frame = frame.reset_index(drop=True)
    zones = row_conventions(session, kind, frame).zones
    site_units = _site_units(session, kind, frame) if unit_mode == "site" else {}
    specs = KINDS[kind]
    out = pd.DataFrame(index=frame.index)
    for column in specs:
        values = frame[column.name] if column.name in frame else pd.Series([None] * len(frame), dtype=object)
        unit = site_units.get(column.quantity)
        if column.type == "datetime":
            values = _local_times(pd.to_datetime(values), zones, text_times)
        elif column.type == "bool":
            values = values.map(lambda v: "" if v is None else ("yes" if v else "no"))
        elif column.quantity is not None and (unit or column.export_unit):
            converted = units.from_canonical(values.astype(float), column.quantity, unit or column.export_unit)
            values = pd.Series(units.significant(converted), index=frame.index)
        out[header(column, unit)] = values
    return out


def _local_times(stamps: pd.Series, zones: pd.Series, text: bool) -> pd.Series:
    """Stored naive-UTC times in each row's zone: ISO 8601 text with the offset, or wall-clock datetimes."""
    cells = []
    for stamp, name in zip(stamps, zones, strict=True):
        if pd.isna(stamp):
            cells.append("" if text else None)
            continue
        local = stamp.floor("s").tz_localize("UTC").tz_convert(zone(name))
        cells.append(local.isoformat() if text else local.tz_localize(None).to_pydatetime())
    return pd.Series(cells, index=stamps.index, dtype=object)


def _site_units(session: Session, kind: str, frame: pd.DataFrame) -> dict[str, str]:
    """quantity -> the unit every row's site shows it in; ExportError when the sites disagree."""
    found: dict[str, dict[str, str]] = {}
    for site in row_sites(session, kind, frame):
        if site is None:
            continue
        for attribute, quantity in units.SITE_QUANTITIES.items():
            found.setdefault(quantity, {}).setdefault(getattr(site, attribute), site.name)
    chosen = {}
    for quantity, by_unit in found.items():
        if len(by_unit) > 1:
            named = ", ".join(f"{name} in {units.shown(unit)}"
                              for unit, name in sorted(by_unit.items(), key=lambda pair: pair[1]))
            raise ExportError(f"the rows' sites show {quantity} in different units ({named}): export one site "
                              "or canonical units")
        chosen[quantity] = next(iter(by_unit))
    return chosen


def _frame(session: Session, statement, columns: list[str]) -> pd.DataFrame:
    return pd.DataFrame(session.execute(statement).all(), columns=columns)


def _sites(session: Session) -> pd.DataFrame:
    return _frame(session, select(Site.name, Site.currency, Site.tariff_per_kwh, Site.motor_efficiency, Site.note,
                                  Site.time_zone, Site.pressure_unit, Site.flow_unit, Site.temperature_unit,
                                  Site.decimal_comma).order_by(Site.name),
                  ["site", "currency", "tariff_per_kwh", "motor_efficiency", "note", "time_zone", "pressure_unit",
                   "flow_unit", "temperature_unit", "decimal_comma"])


def _pumps(session: Session) -> pd.DataFrame:
    current = aliased(Installation)
    statement = (
        select(Pump, Site.name, Machine.name, Position.name, Oil, current.installed_at, current.installed_hours)
        .outerjoin(current, (current.pump_id == Pump.id) & current.removed_at.is_(None))
        .outerjoin(Position, Position.id == current.position_id)
        .outerjoin(Machine, Machine.id == Position.machine_id)
        .outerjoin(Site, Site.id == Machine.site_id)
        .outerjoin(Oil, Oil.id == Machine.oil_id)
        .order_by(Pump.serial)
    )
    rows = []
    for pump, site, machine, position, oil, installed_at, installed_hours in session.execute(statement):
        rows.append({
            "pump": pump.serial, "site": site, "machine": machine, "position": position, "kind": pump.kind,
            "variable": pump.variable, "displacement": pump.displacement_cc, "rated_speed": pump.rated_speed_rpm,
            "rated_pressure": pump.rated_pressure_bar, "max_flow": pump.max_flow_lpm, "case_drain": pump.case_drain,
            "reference_temp": pump.reference_temp_c, "oil": oil.name if oil else None,
            "oil_grade": oil.iso_vg if oil else None, "viscosity_40": oil.viscosity_40 if oil else None,
            "viscosity_100": oil.viscosity_100 if oil else None, "density_15": oil.density_15 if oil else None,
            "eta_v_limit": pump.eta_v_limit, "drain_limit_pct": pump.drain_limit_pct,
            "oil_temp_max": pump.oil_temp_max_c, "oil_temp_min": pump.oil_temp_min_c,
            "cleanliness_target": pump.cleanliness_target, "reading_interval_days": pump.reading_interval_days,
            "planning_horizon_weeks": pump.planning_horizon_weeks, "overhaul_cost": pump.overhaul_cost,
            "installed_at": installed_at, "installed_hours": installed_hours, "note": pump.note,
        })
    frame = pd.DataFrame(rows, columns=[c.name for c in KINDS["pumps"]])
    for name in ("oil_grade", "reading_interval_days", "planning_horizon_weeks"):
        frame[name] = frame[name].astype("Int64")
    return frame


def _installations(session: Session) -> pd.DataFrame:
    statement = (
        select(Pump.serial, Site.name, Machine.name, Position.name, Installation.installed_at,
               Installation.installed_hours)
        .join(Pump, Pump.id == Installation.pump_id)
        .join(Position, Position.id == Installation.position_id)
        .join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id)
        .order_by(Pump.serial, Installation.installed_at)
    )
    return _frame(session, statement, ["pump", "site", "machine", "position", "installed_at", "hours"])


def _readings(session: Session) -> pd.DataFrame:
    statement = (
        select(Pump.serial, Reading.taken_at, Reading.hours, Reading.pressure_bar, Reading.speed_rpm,
               Reading.flow_lpm, Reading.drain_lpm, Reading.temp_c, Reading.stroke, Reading.taken_by, Reading.note,
               Reading.source)
        .join(Pump, Pump.id == Reading.pump_id)
        .order_by(Pump.serial, Reading.taken_at)
    )
    return _frame(session, statement, ["pump", "taken_at", "hours", "outlet_pressure", "speed", "outlet_flow",
                                       "case_drain_flow", "oil_temp", "stroke", "taken_by", "note", "source"])


def _flowtests(session: Session) -> pd.DataFrame:
    statement = (
        select(Pump.serial, Reading.taken_at, FlowTestPoint.pressure_bar, FlowTestPoint.flow_lpm)
        .join(Reading, Reading.id == FlowTestPoint.reading_id)
        .join(Pump, Pump.id == Reading.pump_id)
        .order_by(Pump.serial, Reading.taken_at, FlowTestPoint.pressure_bar)
    )
    return _frame(session, statement, ["pump", "taken_at", "outlet_pressure", "outlet_flow"])


def _code_text(sample: OilSample) -> str | None:
    if sample.code_6 is None or sample.code_14 is None:
        return None
    return str(Iso4406Code(sample.code_4, sample.code_6, sample.code_14, low_count=sample.low_count))


def _samples(session: Session) -> pd.DataFrame:
    statement = (
        select(Site.name, Machine.name, OilSample)
        .join(Machine, Machine.id == OilSample.machine_id)
        .join(Site, Site.id == Machine.site_id)
        .order_by(Site.name, Machine.name, OilSample.sampled_at)
    )
    rows = [
        {"site": site, "machine": machine, "sampled_at": s.sampled_at, "reported_at": s.reported_at,
         "iso4406": _code_text(s), "count_4": s.count_4, "count_6": s.count_6, "count_14": s.count_14,
         "water": s.water_ppm, "viscosity_40": s.viscosity_40, "lab_ref": s.lab_ref, "note": s.note}
        for site, machine, s in session.execute(statement)
    ]
    return pd.DataFrame(rows, columns=[c.name for c in KINDS["samples"]])


def _events(session: Session) -> pd.DataFrame:
    statement = (
        select(Pump.serial, MaintenanceEvent.date, MaintenanceEvent.hours, MaintenanceEvent.kind,
               MaintenanceEvent.cost, MaintenanceEvent.downtime_h, MaintenanceEvent.failure_mode,
               MaintenanceEvent.note)
        .join(Pump, Pump.id == MaintenanceEvent.pump_id)
        .order_by(Pump.serial, MaintenanceEvent.date)
    )
    return _frame(session, statement, ["pump", "date", "hours", "kind", "cost", "downtime", "failure_mode", "note"])


_QUERIES = {
    "sites": _sites,
    "pumps": _pumps,
    "installations": _installations,
    "readings": _readings,
    "flowtests": _flowtests,
    "samples": _samples,
    "events": _events,
}
assert set(_QUERIES) == set(KINDS)
