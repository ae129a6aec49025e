"""Deleting records and getting them back: the delete routes of readings, events and samples, and the trash.

/trash lists what was deleted, newest first; an engineer restores a row with its old id. Each deletion and
restore is one unit of work (fleet.services.writes.deletions), which re-analyses the pumps the row feeds.
"""

from flask import Blueprint, abort, flash, jsonify, redirect, url_for

from fleet.db import audit
from fleet.services.pages.trash import TRASH_COLUMNS, trash_page
from fleet.services.writes import perform
from fleet.services.writes.deletions import NoSuchRecord, delete_record
from fleet.web.auth import requires
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("trash", __name__)


@twin_routes(bp, "/trash")
@requires("engineer")
def index(fmt):
    return respond(trash_page(session()), "trash/index.html", fmt, "deleted", TRASH_COLUMNS, "trash")


@bp.post("/trash/<int:record_id>/restore")
@requires("engineer")
def restore(record_id: int):
    try:
        record = perform(sessions(), lambda db: audit.restore(db, record_id)).value
    except audit.RestoreRefused as refused:
        if wants_json(None):
            return jsonify({"problems": [{"row": 0, "column": "", "reason": str(refused)}]}), 409
        flash(f"Not restored: {refused}", "error")
        return redirect(url_for("trash.index"))
    what = audit.WHAT.get(record.table_name, record.table_name)
    if wants_json(None):
        return jsonify({"restored": record.id, "table": record.table_name, "row_id": record.row_id}), 200
    flash(f"The {what} #{record.row_id} is back.", "saved")
    return redirect(url_for("trash.index"))


def _delete(serial: str, segment: str, row_id: int):
    try:
        what = perform(sessions(), lambda db: delete_record(db, serial, segment, row_id)).value
    except NoSuchRecord as missing:
        abort(404, description=str(missing))
    if wants_json(None):
        return jsonify({"deleted": row_id, "what": what}), 200
    flash(f"The {what} #{row_id} was deleted; an engineer can restore it from the trash.", "saved")
    return redirect(url_for("pumps.page", serial=serial))


@bp.post("/pumps/<path:serial>/readings/<int:row_id>/delete")
@requires("engineer")
def delete_reading(serial: str, row_id: int):
    return _delete(serial, "readings", row_id)


@bp.post("/pumps/<path:serial>/events/<int:row_id>/delete")
@requires("engineer")
def delete_event(serial: str, row_id: int):
    return _delete(serial, "events", row_id)


@bp.post("/pumps/<path:serial>/samples/<int:row_id>/delete")
@requires("engineer")
def delete_sample(serial: str, row_id: int):
    return _delete(serial, "samples", row_id)
