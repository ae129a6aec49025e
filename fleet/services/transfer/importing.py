"""Import a table of one kind (CSV, form or JSON) into the database: whole or not at all.

``import_table`` parses and checks every row first; if any row has a problem it raises ImportRejected naming each
one (row, column, reason) and writes nothing. It never commits: the caller owns the transaction.
"""

from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
from sqlalchemy import insert, select, tuple_
from sqlalchemy.orm import Session

from fleet import units
from fleet.db import changes
from fleet.db.models import (
    FlowTestPoint,
    Machine,
    MaintenanceEvent,
    OilSample,
    Pump,
    Reading,
    Site,
)
from fleet.db.queries import pumps_on_machine
from fleet.io import rules
from fleet.io.files import NotUtf8, StreamBroken, StreamedCsv, is_xlsx_path, read_file, stream_csv
from fleet.io.localtime import ZoneError, zone_name
from fleet.io.parse import ImportRejected, ParsedTable, Problem, parse_table, row_numbers
from fleet.io.spreadsheet import SpreadsheetError
from fleet.physics.cleanliness import code_from_counts
from fleet.services.register import records as register
from fleet.services.sitelocal import row_conventions
from fleet.services.transfer.bulk import insert_frame
from fleet.services.transfer.reading_blocks import import_readings
from fleet.timeutil import utcnow


@dataclass
class ImportResult:
    kind: str
    rows: int
    created: int = 0
    updated: int = 0
    skipped: int = 0  # rows already stored exactly so
    pump_ids: set[int] = field(default_factory=set)  # pumps whose analysis the import changes
    ignored_columns: list[str] = field(default_factory=list)
    # Stored, but worth a second look (fleet.io.meter): {"row", "field", "code", "message"}, rows as in problems.
    doubts: list[dict] = field(default_factory=list)

    def summary(self) -> str:
        text = f"{self.kind}: {self.rows} row(s): {self.created} new, {self.updated} updated"
        if self.skipped:
            text += f", {self.skipped} already stored"
        if self.ignored_columns:
            text += f"; columns not used: {', '.join(self.ignored_columns)}"
        return text

    def doubt_lines(self) -> list[str]:
        return [f"row {d['row']}, column '{d['field']}': stored; look again: {d['message']}" for d in self.doubts]


def import_file(session: Session, kind: str, path: str | Path, **kwargs) -> ImportResult:
    """Import a CSV file, or an .xlsx workbook when its name ends in .xlsx (problems then name their cells).

    A CSV of readings is read in blocks as they are stored (``fleet.io.files.stream_csv``), unless pandas' reader
    must read it; when pyarrow's reader refuses a later part, what was stored of it is undone and the file is read
    whole, as any other. A file's readings equal to stored ones are counted as already stored (a file imported
    again, or one that repeats rows imported before), unless ``skip_stored_same=False`` is given."""
    kwargs.setdefault("skip_stored_same", True)
    if kind == "readings" and not is_xlsx_path(path):
        streamed = stream_csv(path)
        if streamed is not None:
            try:
                return import_table(session, kind, streamed, **kwargs)
            except StreamBroken:
                pass
    table, places = read_readable(path)
    return import_placed(session, kind, table, places, **kwargs)


def import_placed(session: Session, kind: str, table: pd.DataFrame, places, **kwargs) -> ImportResult:
    """``import_table`` of a file's table, its problems and doubts named by the file's own rows: ``places`` is
    what ``read_readable`` gave with the table (a workbook's sheet, a CSV's rows when blank ones were left out, or
    None when the table's rows are the file's)."""
    try:
        result = import_table(session, kind, table, **kwargs)
    except ImportRejected as rejected:
        if places is None:
            raise
        raise places.locate(rejected) from None
    if places is not None:
        result.doubts = places.locate_doubts(result.doubts)
    return result


def read_readable(source: str | Path | bytes, filename: str | None = None):
    """``fleet.io.files.read_file``, with a file that cannot be read at all as a problem (of row 1, or of the row
    and column of its first byte that is not UTF-8)."""
    try:
        return read_file(source, filename)
    except NotUtf8 as exc:
        raise ImportRejected([Problem(exc.row, exc.column, str(exc))]) from None
    except ValueError as exc:  # a broken workbook, a CSV that is no CSV
        kind = "an .xlsx workbook" if isinstance(exc, SpreadsheetError) else "a CSV file"
        detail = str(exc).splitlines()[0] if str(exc) else exc.__class__.__name__
        raise ImportRejected([Problem(1, "", f"the file is not readable as {kind} ({detail})")]) from None


def import_table(session: Session, kind: str, table: pd.DataFrame | StreamedCsv, *, now: datetime | None = None,
                 source: str = "import", taken_by: str | None = None, skip_stored_same: bool = False) -> ImportResult:
    """Import ``table`` of ``kind`` in the caller's transaction, whole or not at all (ImportRejected names every
    problem). ``skip_stored_same``: readings equal to stored ones are counted as already stored, not refused (a
    file imported again; fleet.services.transfer.reading_blocks.import_readings)."""
    now = now or utcnow()
    if kind == "readings":  # in blocks, parsed while the block before is stored
        return _import_readings_table(session, table, now, source, taken_by, skip_stored_same)
    parsed, problems = parse_table(kind, table, row_conventions(session, kind, table))
    problems += rules.table_rules(kind, parsed.data, now)  # every problem at once, not cell problems first
    if problems:
        if "pump" in parsed.present and kind != "pumps":
            _pump_ids(session, parsed, problems)  # name unknown pumps in the same report
        raise ImportRejected(problems)
    handler = _HANDLERS[kind]
    result = ImportResult(kind, len(parsed.data), ignored_columns=parsed.ignored)
    context = _Context(session, now, source, taken_by)
    problems = handler(context, parsed, result)
    if problems:
        raise ImportRejected(problems)
    session.flush()
    return result


@dataclass
class _Context:
    session: Session
    now: datetime
    source: str
    taken_by: str | None


def _value(row: pd.Series, name: str, default=None):
    value = row.get(name, default)
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NaT:
        return default
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    if isinstance(value, np.floating | np.integer):
        return value.item()
    return value


def _column(parsed: ParsedTable, name: str) -> pd.Series:
    if name in parsed.data:
        return parsed.data[name]
    return pd.Series([None] * len(parsed.data), index=parsed.data.index, dtype=object)


def _pump_ids(session: Session, parsed: ParsedTable, problems: list[Problem]) -> pd.Series:
    """Map the 'pump' column to pump ids; unknown serials become problems."""
    serials = parsed.data["pump"]
    codes, unique = pd.factorize(serials)
    known = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(list(unique)))).all())
    found = np.array([known.get(serial, np.nan) for serial in unique] + [np.nan], dtype=float)
    ids = pd.Series(found[codes], index=serials.index)  # code -1 (a blank cell) takes the NaN at the end
    unknown = ids.isna() & serials.notna()  # a blank or refused cell is already a problem of its own
    for row, serial in zip(row_numbers(parsed.data.index[unknown]), serials[unknown], strict=True):
        problems.append(Problem(int(row), "pump", f"no pump '{serial}' in the register (import it with the pumps "
                                "first)"))
    return ids


def _duplicates_in_file(parsed: ParsedTable, keys: list[str], problems: list[Problem], what: str) -> None:
    dup = parsed.data.duplicated(subset=keys, keep="first")
    for row in row_numbers(parsed.data.index[dup]):
        problems.append(Problem(int(row), keys[-1], f"the same {what} appears earlier in the file"))


# --- sites -------------------------------------------------------------------------------------------------

def _import_sites(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    _duplicates_in_file(parsed, ["site"], problems, "site")
    conventions = site_conventions(parsed, problems)
    if problems:
        return problems
    for index, row in parsed.data.iterrows():
        site = ctx.session.scalar(select(Site).where(Site.name == row["site"]))
        if site is None:
            site = Site(name=row["site"])
            ctx.session.add(site)
            result.created += 1
        else:
            result.updated += 1
        for column, attribute in (("currency", "currency"), ("tariff_per_kwh", "tariff_per_kwh"),
                                  ("motor_efficiency", "motor_efficiency"), ("note", "note")):
            value = _value(row, column)
            if value is not None:
                setattr(site, attribute, value)
        for attribute, value in conventions.get(index, {}).items():
            setattr(site, attribute, value)
    return problems


def site_conventions(parsed: ParsedTable, problems: list[Problem]) -> dict[int, dict]:
    """row index -> the conventions the row sets (time zone, display units, decimal comma), each checked: the zone
    by the IANA data (zoneinfo), a unit by pint among the site choices (fleet.units.site_unit)."""
    found: dict[int, dict] = {}
    for index, row in parsed.data.iterrows():
        values: dict = {}
        zone_text = _value(row, "time_zone")
        if zone_text is not None:
            try:
                values["time_zone"] = zone_name(zone_text)
            except ZoneError as exc:
                problems.append(Problem(int(index) + 2, "time_zone", str(exc)))
        for column, quantity in units.SITE_QUANTITIES.items():
            unit_text = _value(row, column)
            if unit_text is None:
                continue
            try:
                values[column] = units.site_unit(unit_text, quantity)
            except units.UnitError as exc:
                problems.append(Problem(int(index) + 2, column, str(exc)))
        if _value(row, "decimal_comma") is not None:
            values["decimal_comma"] = bool(_value(row, "decimal_comma"))
        found[index] = values
    return found


# --- pumps -------------------------------------------------------------------------------------------------

_PUMP_FIELDS = {  # csv column -> Pump attribute, for optional values that simply overwrite
    "max_flow": "max_flow_lpm",
    "eta_v_limit": "eta_v_limit",
    "drain_limit_pct": "drain_limit_pct",
    "oil_temp_max": "oil_temp_max_c",
    "oil_temp_min": "oil_temp_min_c",
    "reading_interval_days": "reading_interval_days",
    "planning_horizon_weeks": "planning_horizon_weeks",
    "overhaul_cost": "overhaul_cost",
    "note": "note",
}


def _check_pumps(parsed: ParsedTable, problems: list[Problem]) -> None:
    data = parsed.data
    _duplicates_in_file(parsed, ["pump"], problems, "pump")
    # One machine has one reservoir: every row of a machine must name the same oil.
    oil_cols = [c for c in ("oil", "viscosity_40", "viscosity_100", "density_15") if c in data]
    for (_, _), group in data.groupby(["site", "machine"], sort=False):
        first = group.iloc[0]
        for index, row in group.iloc[1:].iterrows():
            for column in oil_cols:
                a, b = row[column], first[column]
                same = (pd.isna(a) and pd.isna(b)) or a == b
                if not same:
                    problems.append(Problem(int(index) + 2, column, f"machine '{row['machine']}' has one "
                                            f"reservoir, but this row's {column} differs from row "
                                            f"{int(group.index[0]) + 2}"))
                    break
    for oil, group in data.groupby("oil", sort=False):
        for column in ("viscosity_40", "viscosity_100"):
            if group[column].nunique() > 1:
                problems.append(Problem(int(group.index[-1]) + 2, column, f"oil '{oil}' is given different "
                                        f"{column} values in this file"))


def _import_pumps(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    _check_pumps(parsed, problems)
    if problems:
        return problems
    session = ctx.session
    for _, row in parsed.data.iterrows():
        oil = register.set_oil(session, row["oil"], row["viscosity_40"], row["viscosity_100"],
                               _value(row, "density_15"), _int(_value(row, "oil_grade")))
        position = register.locate_position(session, row["site"], row["machine"], row["position"])
        position.machine.oil_id = oil.id
        pump = session.scalar(select(Pump).where(Pump.serial == row["pump"]))
        if pump is None:
            pump = Pump(serial=row["pump"])
            session.add(pump)
            result.created += 1
        else:
            result.updated += 1
        pump.kind = row["kind"]
        pump.variable = bool(_value(row, "variable", pump.variable or False))
        pump.case_drain = bool(_value(row, "case_drain", pump.case_drain or False))
        pump.displacement_cc = row["displacement"]
        pump.rated_speed_rpm = row["rated_speed"]
        pump.rated_pressure_bar = row["rated_pressure"]
        pump.reference_temp_c = _value(row, "reference_temp", pump.reference_temp_c or 50.0)
        code = _value(row, "cleanliness_target")
        if code is not None:
            pump.cleanliness_target = str(code)
        for column, attribute in _PUMP_FIELDS.items():
            if column in parsed.present:
                value = _value(row, column)
                if attribute in ("reading_interval_days", "planning_horizon_weeks"):
                    value = _int(value)
                setattr(pump, attribute, value)
        session.flush()
        current = register.current_installation(pump)
        if current is None or current.position_id != position.id:
            at = _value(row, "installed_at") or ctx.now
            register.place_pump(session, pump, position, at, _value(row, "installed_hours"))
        result.pump_ids.add(pump.id)
    return problems


def _int(value):
    return None if value is None else int(round(value))


# --- installations -----------------------------------------------------------------------------------------

def _import_installations(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    ids = _pump_ids(ctx.session, parsed, problems)
    _duplicates_in_file(parsed, ["pump", "installed_at"], problems, "pump and time")
    if problems:
        return problems
    data = parsed.data.assign(pump_id=ids).sort_values("installed_at", kind="stable")
    for _, row in data.iterrows():
        pump = ctx.session.get(Pump, int(row["pump_id"]))
        position = register.locate_position(ctx.session, row["site"], row["machine"], row["position"])
        if register.place_pump(ctx.session, pump, position, _value(row, "installed_at"), _value(row, "hours")):
            result.created += 1
        else:
            result.skipped += 1
        result.pump_ids.add(pump.id)
    return problems


# --- readings: fleet/services/transfer/reading_blocks.py ------------------------------------------------

def check_readings(session: Session, table: pd.DataFrame, now: datetime | None = None) -> list[Problem]:
    """Every problem an import of these readings would meet, without writing anything."""
    outcome = import_readings(session, table, now or utcnow(), "form", None, store=False)
    return sorted(outcome.problems)


def _import_readings_table(session: Session, table: pd.DataFrame, now: datetime, source: str,
                           taken_by: str | None, skip_stored_same: bool = False) -> ImportResult:
    outcome = import_readings(session, table, now, source, taken_by, skip_stored_same=skip_stored_same)
    if outcome.problems:
        raise ImportRejected(outcome.problems)
    return ImportResult("readings", outcome.rows, created=outcome.created, skipped=outcome.skipped,
                        pump_ids=outcome.pump_ids, ignored_columns=outcome.ignored_columns, doubts=outcome.doubts)


# --- flow tests --------------------------------------------------------------------------------------------

def _import_flowtests(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    ids = _pump_ids(ctx.session, parsed, problems)
    data = parsed.data.assign(pump_id=ids)
    known = data[ids.notna()]
    reading_ids: dict[tuple[int, pd.Timestamp], int] = {}
    if len(known):
        rows = ctx.session.execute(
            select(Reading.pump_id, Reading.taken_at, Reading.id).where(
                tuple_(Reading.pump_id, Reading.taken_at).in_(
                    [(int(p), t.to_pydatetime()) for p, t in zip(known["pump_id"], known["taken_at"], strict=True)]
                )
            )
        )
        reading_ids = {(p, pd.Timestamp(t)): rid for p, t, rid in rows}
    resolved = []
    for index, row in known.iterrows():
        reading_id = reading_ids.get((int(row["pump_id"]), row["taken_at"]))
        if reading_id is None:
            problems.append(Problem(int(index) + 2, "taken_at", f"no reading of pump '{row['pump']}' at "
                                    f"{row['taken_at']:%Y-%m-%d %H:%M}: import the visit's reading first"))
        resolved.append(reading_id)
    if problems:
        return problems
    records = [
        {"reading_id": rid, "pressure_bar": float(p), "flow_lpm": float(q)}
        for rid, p, q in zip(resolved, known["outlet_pressure"], known["outlet_flow"], strict=True)
    ]
    if records:
        ctx.session.execute(insert(FlowTestPoint), records)
        changes.note(ctx.session, "flow_test_point", "reading_id", {r["reading_id"] for r in records})
    result.created = len(records)
    result.pump_ids.update(int(x) for x in known["pump_id"].unique())
    return problems


# --- oil samples -------------------------------------------------------------------------------------------

def _machines_by_name(session: Session) -> dict[tuple[str, str], Machine]:
    rows = session.execute(select(Site.name, Machine).join(Machine, Machine.site_id == Site.id))
    return {(site, machine.name): machine for site, machine in rows}


def _import_samples(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    machines = _machines_by_name(ctx.session)
    by_name: dict[str, list[Machine]] = {}
    for (_, name), machine in machines.items():
        by_name.setdefault(name, []).append(machine)
    _duplicates_in_file(parsed, [c for c in ("site", "machine", "sampled_at") if c in parsed.present], problems,
                        "machine and sampling time")
    rows = []
    for index, row in parsed.data.iterrows():
        number = int(index) + 2
        site, name = _value(row, "site"), row["machine"]
        if site is not None:
            machine = machines.get((site, name))
            if machine is None:
                problems.append(Problem(number, "machine", f"no machine '{name}' at site '{site}'"))
                continue
        else:
            candidates = by_name.get(name, [])
            if len(candidates) != 1:
                reason = (f"no machine '{name}' in the register" if not candidates else
                          f"machine '{name}' exists at {len(candidates)} sites: add a 'site' column")
                problems.append(Problem(number, "machine", reason))
                continue
            machine = candidates[0]
        reported = _value(row, "reported_at")
        code = _value(row, "iso4406")
        counts = [_value(row, f"count_{size}") for size in (4, 6, 14)]
        if code is None and counts[1] is not None and counts[2] is not None:
            try:
                code = code_from_counts(*counts)
            except ValueError as exc:
                problems.append(Problem(number, "count_6", str(exc)))
                continue
        elif code is None and any(c is not None for c in counts):
            problems.append(Problem(number, "count_6", "particle counts need at least the 6 and 14 µm channels"))
            continue
        if reported is not None and code is None and _value(row, "water") is None \
                and _value(row, "viscosity_40") is None:
            problems.append(Problem(number, "iso4406", "a reported result needs a code, counts, water or "
                                    "viscosity"))
            continue
        rows.append((machine, row, code, counts))
    if problems:
        return problems
    for machine, row, code, counts in rows:
        sampled = _value(row, "sampled_at")
        sample = ctx.session.scalar(
            select(OilSample).where(OilSample.machine_id == machine.id, OilSample.sampled_at == sampled)
        )
        if sample is None:
            sample = OilSample(machine_id=machine.id, sampled_at=sampled)
            ctx.session.add(sample)
            result.created += 1
        else:
            result.updated += 1
        for column, attribute in (("reported_at", "reported_at"), ("water", "water_ppm"),
                                  ("viscosity_40", "viscosity_40"), ("lab_ref", "lab_ref"), ("note", "note")):
            value = _value(row, column)
            if value is not None:
                setattr(sample, attribute, value)
        if code is not None:
            sample.code_4, sample.code_6, sample.code_14 = code.c4, code.c6, code.c14
            sample.low_count = code.low_count
        for size, count in zip((4, 6, 14), counts, strict=True):
            if count is not None:
                setattr(sample, f"count_{size}", count)
        result.pump_ids.update(pumps_on_machine(ctx.session, machine.id))
    return problems


# --- maintenance events ------------------------------------------------------------------------------------

def _import_events(ctx: _Context, parsed: ParsedTable, result: ImportResult) -> list[Problem]:
    problems: list[Problem] = []
    ids = _pump_ids(ctx.session, parsed, problems)
    _duplicates_in_file(parsed, ["pump", "date", "kind"], problems, "pump, date and kind")
    data = parsed.data.assign(pump_id=ids)
    known = data[ids.notna()]
    if len(known):
        stored = set(
            (p, pd.Timestamp(d), k) for p, d, k in ctx.session.execute(
                select(MaintenanceEvent.pump_id, MaintenanceEvent.date, MaintenanceEvent.kind).where(
                    MaintenanceEvent.pump_id.in_([int(x) for x in known["pump_id"].unique()])
                )
            )
        )
        for index, row in known.iterrows():
            if (int(row["pump_id"]), row["date"], row["kind"]) in stored:
                problems.append(Problem(int(index) + 2, "date", f"this {row['kind']} of pump '{row['pump']}' "
                                        "is already stored"))
    if problems:
        return problems
    frame = pd.DataFrame({
        "pump_id": data["pump_id"].astype(int),
        "date": data["date"],
        "hours": _column(parsed, "hours"),
        "kind": data["kind"],
        "cost": _column(parsed, "cost"),
        "downtime_h": _column(parsed, "downtime"),
        "failure_mode": _column(parsed, "failure_mode"),
        "note": _column(parsed, "note"),
    })
    frame["created_at"] = pd.Timestamp(utcnow())
    insert_frame(ctx.session, MaintenanceEvent, frame)
    result.created = len(frame)
    result.pump_ids.update(int(x) for x in frame["pump_id"].unique())
    return problems


_HANDLERS = {
    "sites": _import_sites,
    "pumps": _import_pumps,
    "installations": _import_installations,
    "flowtests": _import_flowtests,
    "samples": _import_samples,
    "events": _import_events,
}
