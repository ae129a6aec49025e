"""Readings posted by devices (POST /api/readings): each may carry the id its device gave it (``client_id``) and
the place its pump sat when the technician stood there (``place``).

A device that lost its connection sends again; the id makes that safe. A posted reading whose id is stored
already with the same values is a repeat: nothing new is stored. The same id with other values is a conflict.
A place that is no longer the pump's (it was moved meanwhile) refuses the reading, so the technician looks again.
"""

import math
from dataclasses import dataclass, field

import pandas as pd
from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.models import Pump, Reading
from fleet.db.queries import current_places
from fleet.io.parse import ImportRejected, Problem, parse_table
from fleet.services.sitelocal import row_conventions
from fleet.services.transfer.importing import import_table

CLIENT_ID_MAX = 64
PLACE_PARTS = ("site", "machine", "position")
# Posted field -> stored attribute, compared to tell a repeat from a conflict (canonical units on both sides).
_NUMBERS = {"hours": "hours", "outlet_pressure": "pressure_bar", "speed": "speed_rpm", "outlet_flow": "flow_lpm",
            "case_drain_flow": "drain_lpm", "oil_temp": "temp_c", "stroke": "stroke"}
_TEXTS = {"note": "note", "taken_by": "taken_by"}


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


def store_posted(session: Session, table: pd.DataFrame, client_ids: list[str | None],
                 places: list[dict | None], source: str = "api") -> PostedOutcome:
    """Store the rows of ``table`` (one per posted reading) that are not repeats; raise ImportRejected (rows
    counted as the importer does, header = row 1) or ClientIdConflict with nothing written."""
    parsed, problems = parse_table("readings", table, row_conventions(session, "readings", table))
    if problems:  # the importer names every problem of the table, in its words (it raises ImportRejected)
        import_table(session, "readings", table, source=source)
        raise ImportRejected(problems)
    data = parsed.data
    stored = _stored_by_client_id(session, [c for c in client_ids if c])
    conflicts, repeats = [], {}
    for index, client_id in enumerate(client_ids):
        if client_id in stored:
            differences = _differences(data.iloc[index], *stored[client_id])
            if differences:
                conflicts.append(Problem(index + 2, "client_id", f"'{client_id}' was stored already with other "
                                         f"values ({'; '.join(differences)}); nothing was stored"))
            repeats[index] = stored[client_id][0]
    if conflicts:
        raise ClientIdConflict(conflicts)
    fresh = [i for i in range(len(client_ids)) if i not in repeats]
    _check_places(session, data, places, fresh)
    created, pump_ids, doubts = 0, set(), []
    if fresh:
        try:
            result = import_table(session, "readings", table.iloc[fresh].reset_index(drop=True), source=source)
        except ImportRejected as rejected:
            if _stored_by_client_id(session, [client_ids[i] for i in fresh if client_ids[i]]):
                # Another send of the same id committed after this unit looked (PostgreSQL reads each statement
                # afresh): look again, and those rows are now repeats or conflicts.
                return store_posted(session, table, client_ids, places, source)
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


def _differences(row: pd.Series, reading: Reading, serial: str) -> list[str]:
    """Where a posted row differs from the stored reading (fields the post left out are not compared)."""
    found = []
    if row["pump"] != serial:
        found.append(f"pump: stored {serial}, posted {row['pump']}")
    if row["taken_at"].to_pydatetime() != reading.taken_at:
        found.append(f"taken_at: stored {reading.taken_at:%Y-%m-%d %H:%M}, posted {row['taken_at']:%Y-%m-%d %H:%M}")
    for name, attribute in _NUMBERS.items():
        if name not in row.index:
            continue
        posted, kept = row[name], getattr(reading, attribute)
        if _blank(posted) and kept is None:
            continue
        if _blank(posted) or kept is None or not math.isclose(float(posted), kept, rel_tol=1e-9, abs_tol=1e-9):
            found.append(f"{name}: stored {'blank' if kept is None else f'{kept:g}'}, "
                         f"posted {'blank' if _blank(posted) else f'{float(posted):g}'}")
    for name, attribute in _TEXTS.items():
        posted = None if name not in row.index or _blank(row[name]) else str(row[name])
        if posted is not None and posted != (getattr(reading, attribute) or ""):
            found.append(f"{name} differs")
    return found


def _check_places(session: Session, data: pd.DataFrame, places: list[dict | None], rows: list[int]) -> None:
    """Refuse readings whose pump no longer sits where the device saw it."""
    wanted = [i for i in rows if places[i] is not None]
    if not wanted:
        return
    serials = {str(data.iloc[i]["pump"]) for i in wanted}
    ids = dict(session.execute(select(Pump.serial, Pump.id).where(Pump.serial.in_(serials))).all())
    now = current_places(session, ids.values())
    problems = []
    for index in wanted:
        serial = str(data.iloc[index]["pump"])
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
    for index in rows:
        if client_ids[index] is None:
            continue
        row = data.iloc[index]
        reading = session.scalars(select(Reading).join(Pump, Pump.id == Reading.pump_id).where(
            Pump.serial == row["pump"], Reading.taken_at == row["taken_at"].to_pydatetime())).one()
        reading.client_id = client_ids[index]
    session.flush()


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
