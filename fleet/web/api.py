"""POST /api/readings: readings from data loggers and handhelds, checked by the same importer as a CSV file.
PATCH /api/readings/<id>: a correction of one reading's values, with a reason (fleet.services.corrections).

The body is one JSON object or a list of them, keyed by the readings CSV column names. A number may carry its
unit: ``"outlet_pressure": {"value": 3000, "unit": "psi"}``. All or nothing: 201 with the stored readings and
each pump's refreshed status and the doubts worth a second look (an hour meter gone backwards or faster than
the clock: ``{"row", "field", "code", "message"}``), or 422 with every problem and nothing written. Problem rows
count the posted objects from 1 (row 0: the request as a whole).

Two optional keys are not readings columns (fleet.services.posted_readings): ``client_id``, the id the device
gave the reading (text, at most 64 characters), so that sending again is safe: a repeat with the same values
answers 200 with the stored reading and ``"repeat": true``, the same id with other values 409; and ``place``,
``{"site": ..., "machine": ..., "position": ...}`` where the pump sat when it was read: 422 if it was moved since.

Posting needs a technician or engineer: an API token (``Authorization: Bearer fleet_...``, made by
``fleet user token``) or a signed-in browser session that sends its CSRF token in an ``X-CSRFToken`` header.
"""

import json
import math

from flask import Blueprint, jsonify, request

from fleet import units
from fleet.io.columns import READINGS
from fleet.io.parse import MAX_MAGNITUDE, ImportRejected, Problem
from fleet.services.analysis import statuses
from fleet.services.corrections import CORRECTABLE, CorrectionRefused, correct_reading
from fleet.services.posted_readings import ClientIdConflict, client_id_problem, place_problem, store_posted
from fleet.services.users import mark_token_used
from fleet.services.writes import perform
from fleet.web.auth import requires, signed_in_user
from fleet.web.db import session, sessions

bp = Blueprint("api", __name__, url_prefix="/api")

# 'source' is the server's to set: everything posted here is an API reading.
FIELDS = {column.name: column for column in READINGS if column.name != "source"}
MAX_ITEMS = 5000
MAX_DEPTH = 4  # a list of reading objects, a value with its unit, the number: 4 levels


def _problems_response(problems: list[Problem], status: int = 422):
    body = {"problems": [{"row": p.row, "column": p.column, "reason": p.reason} for p in sorted(problems)]}
    return jsonify(body), status


def _cell(value, item_no: int, name: str, problems: list[Problem]) -> str:
    """A JSON scalar as the text cell the importer reads; anything else is a problem."""
    if value is None:
        return ""
    if isinstance(value, bool):
        problems.append(Problem(item_no, name, "true/false is not a value of this field"))
        return ""
    if isinstance(value, int) and abs(value) > MAX_MAGNITUDE:  # 10**400 has no float; name it, don't overflow
        problems.append(Problem(item_no, name, f"a number of {len(str(abs(value)))} digits is not a finite number "
                                f"of a sensible size (at most {MAX_MAGNITUDE:g} in canonical units)"))
        return ""
    if isinstance(value, int | float):
        if not math.isfinite(value):
            problems.append(Problem(item_no, name, f"{value} is not a finite number"))
            return ""
        return repr(value)
    if isinstance(value, str):
        spec = FIELDS[name]
        if spec.type == "number" and value.strip().lower().lstrip("+-") in ("inf", "infinity", "nan"):
            problems.append(Problem(item_no, name, f"'{value}' is not a finite number"))
            return ""
        return value
    problems.append(Problem(item_no, name, "expected a number or text, or {\"value\": ..., \"unit\": ...}"))
    return ""


def readings_rows(items: list) -> tuple[list[dict[str, str]], list[Problem]]:
    """The posted objects as rows of text cells for the importer (each row has every column, in the same order),
    and the problems of their shape.

    A column whose values all carry the same unit keeps it in its header (the importer converts it); when
    objects use different units, each value is converted here to the canonical unit with fleet.units.
    """
    problems: list[Problem] = []
    cells: list[dict[str, str]] = []
    unit_of: list[dict[str, str | None]] = []
    for item_no, item in enumerate(items, start=1):
        row: dict[str, str] = {}
        row_units: dict[str, str | None] = {}
        if not isinstance(item, dict):
            problems.append(Problem(item_no, "", "each reading must be a JSON object"))
        else:
            for name, value in item.items():
                if name not in FIELDS:
                    shown = str(name).encode("utf-8", "backslashreplace").decode("utf-8")[:40]
                    problems.append(Problem(item_no, shown, f"not a readings field (fields: {', '.join(FIELDS)})"))
                    continue
                unit = None
                if isinstance(value, dict):
                    unit, value = _split_unit(value, item_no, name, problems)
                row[name] = _cell(value, item_no, name, problems)
                row_units[name] = unit
        cells.append(row)
        unit_of.append(row_units)
    columns = [name for name in FIELDS if any(name in row for row in cells)]
    table = {}
    for name in columns:
        used = {u.get(name) for u in unit_of if name in u}
        values = [row.get(name, "") for row in cells]
        if len(used) <= 1:
            unit = next(iter(used), None)
            table[f"{name} [{unit}]" if unit else name] = values
        else:
            table[name] = [_to_canonical(v, u.get(name), FIELDS[name].quantity)
                           for v, u in zip(values, unit_of, strict=True)]
    rows = [dict(zip(table, values, strict=True)) for values in zip(*table.values(), strict=True)]
    return rows or [{} for _ in cells], problems


def _split_unit(value: dict, item_no: int, name: str, problems: list[Problem]):
    spec = FIELDS[name]
    unit = value.get("unit")
    if set(value) - {"value", "unit"} or "value" not in value:
        problems.append(Problem(item_no, name, 'write a number with its unit as {"value": 10, "unit": "gal/min"}'))
        return None, None
    if unit is None:
        return None, value["value"]
    if not isinstance(unit, str):
        problems.append(Problem(item_no, name, "the unit must be text, e.g. \"psi\""))
        return None, None
    if spec.quantity is None:
        problems.append(Problem(item_no, name, "this field takes a plain value, without a unit"))
        return None, None
    try:
        units.resolve(unit, spec.quantity)
    except units.UnitError as error:
        problems.append(Problem(item_no, name, str(error)))
        return None, None
    return unit, value["value"]


def _to_canonical(text: str, unit: str | None, quantity: str | None) -> str:
    if not unit or not text.strip() or quantity is None:
        return text
    try:
        return repr(units.convert_one(float(text), unit, quantity))
    except ValueError:
        return text  # not a number: the importer names it


def _json_body():
    """(the posted JSON, None) or (None, why it is refused): not JSON, not UTF-8, or nested deeper than a list of
    readings can be (Python's parser gives up on very deep nesting with a RecursionError)."""
    if not request.content_length and not request.get_data(cache=True):
        return None, "the body is empty: send one reading object or a list of them as JSON"
    try:
        body = json.loads(request.get_data(cache=True).decode("utf-8"))
    except RecursionError:
        return None, "the JSON is nested too deeply: send one reading object or a list of them"
    except (ValueError, UnicodeDecodeError):
        return None, "the body must be JSON (UTF-8): one reading object or a list of them"
    if _depth(body) > MAX_DEPTH:
        return None, f"the JSON is nested deeper than a list of readings ({MAX_DEPTH} levels) can be"
    return body, None


def _depth(value, level: int = 1) -> int:
    if isinstance(value, dict):
        return max((_depth(v, level + 1) for v in value.values()), default=level)
    if isinstance(value, list):
        return max((_depth(v, level + 1) for v in value[:MAX_ITEMS + 1]), default=level)
    return level


@bp.post("/readings")
@requires("technician")
def post_readings():
    body, problem = _json_body()
    if problem:
        return _problems_response([Problem(0, "", problem)], 400)
    items = body if isinstance(body, list) else [body]
    if not items:
        return _problems_response([Problem(0, "", "the list holds no readings")])
    if len(items) > MAX_ITEMS:
        return _problems_response([Problem(0, "", f"at most {MAX_ITEMS} readings per request")], 413)
    client_ids, places, problems = _device_keys(items)
    if problems:
        return _problems_response(problems, 400)
    if repeated := _repeated_ids(client_ids):
        return _problems_response(repeated)
    rows, problems = readings_rows(items)
    if problems:
        return _problems_response(problems)
    token_id = signed_in_user().token_id

    def work(db):
        result = store_posted(db, rows, client_ids, places)
        if token_id is not None:
            mark_token_used(db, token_id)
        return result

    try:
        outcome = perform(sessions(), work)
    except (ImportRejected, ClientIdConflict) as rejected:
        # The importer counts rows as a spreadsheet does (header = row 1); here row 1 is the first object.
        return _problems_response([Problem(max(p.row - 1, 0), _field_name(p.column), p.reason)
                                   for p in rejected.problems], 409 if isinstance(rejected, ClientIdConflict) else 422)
    db = session()
    db.rollback()  # a fresh snapshot: this request's reads began before the write
    repeat = outcome.value.created == 0
    # Doubts (fleet.io.meter) are stored readings worth a second look; rows count the posted objects from 1.
    doubts = [{**doubt, "row": doubt["row"] - 1} for doubt in outcome.value.doubts]
    return jsonify({"created": outcome.value.created, "repeat": repeat, "readings": outcome.value.readings,
                    "pumps": statuses(db, outcome.value.pump_ids), "doubts": doubts}), 200 if repeat else 201


def _device_keys(items: list) -> tuple[list, list, list[Problem]]:
    """Take ``client_id`` and ``place`` out of each posted object (they are not readings columns)."""
    client_ids, places, problems = [], [], []
    for item_no, item in enumerate(items, start=1):
        client_id = place = None
        if isinstance(item, dict):
            if "client_id" in item:
                client_id = item.pop("client_id")
                if reason := client_id_problem(client_id):
                    problems.append(Problem(item_no, "client_id", reason))
            if "place" in item:
                place = item.pop("place")
                if reason := place_problem(place):
                    problems.append(Problem(item_no, "place", reason))
        client_ids.append(client_id)
        places.append(place)
    return client_ids, places, problems


def _repeated_ids(client_ids: list) -> list[Problem]:
    first: dict[str, int] = {}
    problems = []
    for item_no, client_id in enumerate(client_ids, start=1):
        if client_id is None:
            continue
        if client_id in first:
            problems.append(Problem(item_no, "client_id", f"'{client_id}' is also the client_id of reading "
                                    f"{first[client_id]} of this list: each reading needs its own"))
        first.setdefault(client_id, item_no)
    return problems


def _field_name(column: str) -> str:
    try:
        return units.parse_header(column)[0]
    except units.UnitError:
        return column


@bp.patch("/readings/<int:reading_id>")
@requires("technician")
def correct_reading_api(reading_id: int):
    """Correct a stored reading: ``{"hours": 1234.5, "outlet_pressure": {"value": 3000, "unit": "psi"},
    "reason": "..."}``. 200 with what changed (old and new values in canonical units), the doubts the new values
    raise and the pump's refreshed status; 404, 403 or 422 with every problem and nothing changed."""
    body, problem = _json_body()
    if problem or not isinstance(body, dict):
        return jsonify({"problems": [{"field": "", "reason": problem or "send one JSON object of the values to "
                                                                        "correct and a 'reason'"}]}), 400
    reason = body.pop("reason", None)
    values, chosen, problems = {}, {}, []
    for name, value in body.items():
        if name not in CORRECTABLE:
            values[str(name)[:40]] = ""  # the service names it as no correctable value
            continue
        unit = None
        if isinstance(value, dict):
            unit, value = _split_unit(value, 1, name, problems)
        values[name] = _cell(value, 1, name, problems)
        if unit:
            chosen[name] = unit
    if problems:
        return jsonify({"problems": [{"field": p.column, "reason": p.reason} for p in problems]}), 422
    if not isinstance(reason, str):
        reason = ""
    user = signed_in_user()
    token_id = user.token_id

    def work(db):
        done = correct_reading(db, reading_id, values, reason, user.name, chosen)
        if token_id is not None:
            mark_token_used(db, token_id)
        return done

    try:
        outcome = perform(sessions(), work)
    except CorrectionRefused as refused:
        return jsonify({"problems": refused.problems}), refused.status
    db = session()
    db.rollback()  # a fresh snapshot: this request's reads began before the write
    done = outcome.value
    return jsonify({"reading": done.reading_id, "pump": done.pump, "changes": done.changes, "doubts": done.doubts,
                    "pumps": statuses(db, outcome.pumps)}), 200
