"""Readings posted by devices (POST /api/readings): each may carry the id its device gave it (``client_id``) and
the place its pump sat when the technician stood there (``place``).

A device that lost its connection sends again; the id makes that safe. A posted reading whose id is stored
already with the same values is a repeat: nothing new is stored. The same id with other values is a conflict.
A place that is no longer the pump's (it was moved meanwhile) refuses the reading, so the technician looks again.

A post is one reading, or the few of an offline round: when every cell reads plainly (fleet.io.plain) and every
pump is in the register with no reading at that time yet, the rows are stored with a handful of indexed
statements and no table machinery. Anything else (a cell to refuse or to think about, an unknown pump, a reading
stored already, a large batch) goes through the CSV importer, which names every problem in its words.
"""

import math
from dataclasses import dataclass, field

import pandas as pd
from sqlalchemy import insert, or_, select, update
from sqlalchemy.orm import Session

from fleet.db import changes
from fleet.db.models import Pump, Reading
from fleet.db.queries import current_places
from fleet.io.meter import meter_doubt
from fleet.io.parse import ImportRejected, Problem, parse_table
from fleet.io.plain import plain_row
from fleet.services.sitelocal import pump_zones, row_conventions
from fleet.services.transfer.importing import import_table
from fleet.timeutil import utcnow

CLIENT_ID_MAX = 64
PLACE_PARTS = ("site", "machine", "position")
# Posted field -> stored attribute, compared to tell a repeat from a conflict (canonical units on both sides).
_NUMBERS = {"hours": "hours", "outlet_pressure": "pressure_bar", "speed": "speed_rpm", "outlet_flow": "flow_lpm",
            "case_drain_flow": "drain_lpm", "oil_temp": "temp_c", "stroke": "stroke"}
_TEXTS = {"note": "note", "taken_by": "taken_by"}
# Up to this many posted rows are stored row by row (store_plainly); a larger batch goes through the importer,
# whose whole-column work is then the cheaper.
PLAIN_ROWS_AT_MOST = 50


class ClientIdConflict(ValueError):
    """A client_id stored already with other values: nothing was written."""

    def __init__(self, problems: list[Problem]):
        self.problems = sorted(problems)
        super().__init__("; ".join(str(p) for p in self.problems))


@dataclass
class PostedOutcome:
    created: int
    readings: list[dict]  # per posted row: id, pump, taken_at, client_id, repeat
    pump_ids: set[int] = field(default_factory=set)
    doubts: list[dict] = field(default_factory=list)  # hour-meter doubts, rows counted as posted (header = row 1)


def client_id_problem(value) -> str | None:
    """Why ``value`` cannot be a client_id, or None."""
    if not isinstance(value, str):
        return "client_id must be text, e.g. a UUID made on the device"
    if not value.strip():
        return "client_id must not be blank"
    if len(value) > CLIENT_ID_MAX:
        return f"client_id has {len(value)} characters; at most {CLIENT_ID_MAX}"
    return None


def place_problem(value) -> str | None:
    """Why ``value`` cannot be a place ({"site": ..., "machine": ..., "position": ...}), or None."""
    if not isinstance(value, dict) or set(value) != set(PLACE_PARTS):
        return 'place must be {"site": ..., "machine": ..., "position": ...}'
    if not all(v is None or isinstance(v, str) for v in value.values()):
        return "each part of place must be text (or null for a pump not installed)"
    return None


def store_posted(session: Session, rows: list[dict[str, str]], client_ids: list[str | None],
                 places: list[dict | None], source: str = "api") -> PostedOutcome:
    """Store the posted rows (each a row of text cells by readings header, as in a CSV file) that are not repeats;
    raise ImportRejected (rows counted as the importer does, header = row 1) or ClientIdConflict with nothing
    written."""
    stored = store_plainly(session, rows, client_ids, places, source)
    if stored is not None:
        return stored
    return _store_imported(session, pd.DataFrame(rows, index=range(len(rows)), dtype=str), client_ids, places,
                           source)


def store_plainly(session: Session, rows: list[dict[str, str]], client_ids: list[str | None],
                  places: list[dict | None], source: str = "api") -> PostedOutcome | None:
    """store_posted for a few rows that read plainly, of pumps in the register, at times not stored yet; None,
    with nothing written, for any other post (the importer then reads it, and names what it refuses)."""
    if not rows or len(rows) > PLAIN_ROWS_AT_MOST:
        return None
    serials = [row.get("pump") for row in rows]
    pumps = pump_zones(session, [s.strip() for s in serials if isinstance(s, str)])
    now, values = utcnow(), []
    for row, serial in zip(rows, serials, strict=True):
        pump = pumps.get(serial.strip()) if isinstance(serial, str) else None
        parsed = plain_row("readings", row, pump[1], now) if pump else None
        if parsed is None:
            return None
        values.append(parsed)
    keys = [(pumps[v["pump"]][0], v["taken_at"].to_pydatetime()) for v in values]
    if len(set(keys)) < len(keys):
        return None  # the same pump and time twice: the importer names it
    repeats = _repeats(session, values, client_ids)
    fresh = [i for i in range(len(rows)) if i not in repeats]
    _check_places(session, [v["pump"] for v in values], places, fresh)
    if fresh and session.execute(select(Reading.id).where(or_(*(
            (Reading.pump_id == keys[i][0]) & (Reading.taken_at == keys[i][1]) for i in fresh))).limit(1)).first():
        return None  # a reading of that pump at that time is stored: the importer names it
    doubts = _doubts(session, values, keys, fresh)
    created_at = utcnow()
    records = [_record(values[i], keys[i], client_ids[i], source, created_at) for i in fresh]
    ids = []
    if records:
        ids = session.execute(insert(Reading.__table__).returning(Reading.id, sort_by_parameter_order=True),
                              records).scalars().all()
        changes.note(session, "reading", "pump_id", {record["pump_id"] for record in records})
    new = dict(zip(fresh, ids, strict=True))
    readings = [{"id": new[i] if i in new else repeats[i].id, "pump": v["pump"],
                 "taken_at": (keys[i][1] if i in new else repeats[i].taken_at).isoformat(timespec="minutes"),
                 "client_id": client_ids[i], "repeat": i in repeats} for i, v in enumerate(values)]
    return PostedOutcome(len(records), readings, {record["pump_id"] for record in records}, doubts)


def _repeats(session: Session, rows: list, client_ids: list[str | None]) -> dict[int, Reading]:
    """Row -> the stored reading it repeats (its client_id is stored with the same values); ClientIdConflict
    when a client_id is stored with other values."""
    stored = _stored_by_client_id(session, [c for c in client_ids if c])
    conflicts, repeats = [], {}
    for index, client_id in enumerate(client_ids):
        if client_id in stored:
            differences = _differences(rows[index], *stored[client_id])
            if differences:
                conflicts.append(Problem(index + 2, "client_id", f"'{client_id}' was stored already with other "
                                         f"values ({'; '.join(differences)}); nothing was stored"))
            repeats[index] = stored[client_id][0]
    if conflicts:
        raise ClientIdConflict(conflicts)
    return repeats


def _doubts(session: Session, values: list[dict], keys: list[tuple], fresh: list[int]) -> list[dict]:
    """The hour-meter doubts of the fresh rows (fleet.io.meter), each against the reading before it: stored, or
    another fresh row of the same pump. Rows counted as the importer does."""
    found = []
    for i in fresh:
        pump_id, at = keys[i]
        before = session.execute(select(Reading.taken_at, Reading.hours).where(
            Reading.pump_id == pump_id, Reading.taken_at < at).order_by(Reading.taken_at.desc()).limit(1)).first()
        for j in fresh:
            if keys[j][0] == pump_id and keys[j][1] < at and (before is None or keys[j][1] > before[0]):
                before = (keys[j][1], values[j]["hours"])
        doubt = meter_doubt(before[0], before[1], at, values[i]["hours"]) if before else None
        if doubt:
            found.append({"row": i + 2, "field": "hours", "code": doubt.code, "message": doubt.message})
    return found


def _record(values: dict, key: tuple, client_id: str | None, source: str, created_at) -> dict:
    """A reading's row as the importer stores it (fleet.services.transfer.importing), with its client_id."""
    def number(name):
        value = values.get(name)
        return None if _blank(value) else float(value)

    return {"pump_id": key[0], "taken_at": key[1], "hours": values["hours"], "pressure_bar": values["outlet_pressure"],
            "speed_rpm": values["speed"], "flow_lpm": number("outlet_flow"), "drain_lpm": number("case_drain_flow"),
            "temp_c": values["oil_temp"], "stroke": number("stroke"), "taken_by": values.get("taken_by"),
            "note": values.get("note"), "source": values.get("source") or source, "created_at": created_at,
            "client_id": client_id}


def _store_imported(session: Session, table: pd.DataFrame, client_ids: list[str | None],
                    places: list[dict | None], source: str) -> PostedOutcome:
    """store_posted through the CSV importer: any post, and the words of every problem."""
    parsed, problems = parse_table("readings", table, row_conventions(session, "readings", table))
    if problems:  # the importer names every problem of the table, in its words (it raises ImportRejected)
        import_table(session, "readings", table, source=source)
        raise ImportRejected(problems)
    data = parsed.data
    repeats = _repeats(session, [data.iloc[i] for i in range(len(data))], client_ids)
    fresh = [i for i in range(len(client_ids)) if i not in repeats]
    _check_places(session, list(data["pump"]), places, fresh)
    created, pump_ids, doubts = 0, set(), []
    if fresh:
        try:
            result = import_table(session, "readings", table.iloc[fresh].reset_index(drop=True), source=source)
        except ImportRejected as rejected:
            if _stored_by_client_id(session, [client_ids[i] for i in fresh if client_ids[i]]):
                # Another send of the same id committed after this unit looked (PostgreSQL reads each statement
                # afresh): look again, and those rows are now repeats or conflicts.
                return _store_imported(session, table, client_ids, places, source)
            # Its rows count the fresh ones: name them as posted.
            raise ImportRejected([Problem(fresh[p.row - 2] + 2 if p.row >= 2 else p.row, p.column, p.reason)
                                  for p in rejected.problems]) from None
        created, pump_ids = result.created, result.pump_ids
        doubts = [{**doubt, "row": fresh[doubt["row"] - 2] + 2} for doubt in result.doubts]
        _keep_client_ids(session, data, client_ids, fresh)
    return PostedOutcome(created, _described(session, data, client_ids, repeats), pump_ids, doubts)


def _stored_by_client_id(session: Session, client_ids: list[str]) -> dict[str, tuple[Reading, str]]:
    if not client_ids:
        return {}
    rows = session.execute(select(Reading, Pump.serial).join(Pump, Pump.id == Reading.pump_id)
                           .where(Reading.client_id.in_(client_ids)))
    return {reading.client_id: (reading, serial) for reading, serial in rows}


def _blank(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NaT


def _differences(row, reading: Reading, serial: str) -> list[str]:
    """Where a posted row differs from the stored reading (fields the post left out are not compared)."""
    found = []
    if row["pump"] != serial:
        found.append(f"pump: stored {serial}, posted {row['pump']}")
    if row["taken_at"].to_pydatetime() != reading.taken_at:
        found.append(f"taken_at: stored {reading.taken_at:%Y-%m-%d %H:%M}, posted {row['taken_at']:%Y-%m-%d %H:%M}")
    for name, attribute in _NUMBERS.items():
        if name not in row:  # a Series' index or a dict's keys
            continue
        posted, kept = row[name], getattr(reading, attribute)
        if _blank(posted) and kept is None:
            continue
        if _blank(posted) or kept is None or not math.isclose(float(posted), kept, rel_tol=1e-9, abs_tol=1e-9):
            found.append(f"{name}: stored {'blank' if kept is None else f'{kept:g}'}, "
                         f"posted {'blank' if _blank(posted) else f'{float(posted):g}'}")
    for name, attribute in _TEXTS.items():
        posted = None if name not in row or _blank(row[name]) else str(row[name])
        if posted is not None and posted != (getattr(reading, attribute) or ""):
            found.append(f"{name} differs")
    return found


def _check_places(session: Session, serials: list[str], places: list[dict | None], rows: list[int]) -> None:
    """Refuse readings whose pump (``serials``: each row's) no longer sits where the device saw it."""
    wanted = [i for i in rows if places[i] is not None]
    if not wanted:
        return
    ids = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_({str(serials[i]) for i in wanted})))
               .all())
    now = current_places(session, ids.values())
    problems = []
    for index in wanted:
        serial = str(serials[index])
        if serial not in ids:
            continue  # the importer names an unknown pump
        seen = tuple(places[index][part] for part in PLACE_PARTS)
        place = now.get(ids[serial])
        actual = (place.site, place.machine, place.position) if place else (None, None, None)
        if seen != actual:
            where = " · ".join(actual) if place else "not installed anywhere"
            problems.append(Problem(index + 2, "place", f"pump {serial} was moved: the reading was taken at "
                                    f"{' · '.join(p or '-' for p in seen)}, and the register now has it "
                                    f"{'at ' + where if place else where}; nothing was stored"))
    if problems:
        raise ImportRejected(problems)


def _keep_client_ids(session: Session, data: pd.DataFrame, client_ids: list[str | None], rows: list[int]) -> None:
    """Give the readings just imported their client_ids: part of storing them, not an edit, so a plain UPDATE
    that leaves no audit record (through the ORM it would count as a correction: fleet.db.queries)."""
    table = Reading.__table__
    for index in rows:
        if client_ids[index] is None:
            continue
        row = data.iloc[index]
        pump_id = select(Pump.id).where(Pump.serial == row["pump"]).scalar_subquery()
        session.execute(update(table).where(table.c.pump_id == pump_id,
                                            table.c.taken_at == row["taken_at"].to_pydatetime())
                        .values(client_id=client_ids[index]))


def _described(session: Session, data: pd.DataFrame, client_ids: list[str | None],
               repeats: dict[int, Reading]) -> list[dict]:
    found = []
    for index, client_id in enumerate(client_ids):
        row = data.iloc[index]
        reading = repeats.get(index) or session.scalars(select(Reading).join(Pump, Pump.id == Reading.pump_id).where(
            Pump.serial == row["pump"], Reading.taken_at == row["taken_at"].to_pydatetime())).one()
        found.append({"id": reading.id, "pump": str(row["pump"]),
                      "taken_at": reading.taken_at.isoformat(timespec="minutes"), "client_id": client_id,
                      "repeat": index in repeats})
    return found
