"""Deleting records and getting them back: the delete routes of readings, events and samples, and the trash.

A deletion goes through the ORM, so the audit trail keeps the whole row (a reading with its flow-test points);
/trash lists what was deleted, newest first, and an engineer restores a row with its old id. Each is one unit of
work (fleet.services.writes), which re-analyses the pumps the row feeds.
"""

from collections.abc import Callable

from flask import Blueprint, abort, flash, jsonify, redirect, url_for
from sqlalchemy.orm import Session

from fleet.db import audit
from fleet.db.models import MaintenanceEvent, OilSample, Pump, Reading
from fleet.db.queries import pump_by_serial, pumps_on_machine
from fleet.services.writes import perform
from fleet.web.auth import requires
from fleet.web.db import session, sessions
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("trash", __name__)


@twin_routes(bp, "/trash")
@requires("engineer")
def index(fmt):
    return respond(audit.trash_page(session()), "trash/index.html", fmt, "deleted", audit.TRASH_COLUMNS, "trash")


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


class _NoSuchRow(LookupError):
    pass


def _delete(serial: str, model, row_id: int, what: str, belongs: Callable[[Session, Pump, object], bool]):
    """Delete the row of ``model`` with ``row_id`` if it belongs to pump ``serial`` (else 404), in one unit of
    work: the audit trail keeps the whole row, and the policy re-analyses the pumps it fed."""

    def work(db: Session) -> None:
        pump = pump_by_serial(db, serial)
        row = db.get(model, row_id)
        if pump is None or row is None or not belongs(db, pump, row):
            raise _NoSuchRow
        db.delete(row)

    try:
        perform(sessions(), work)
    except _NoSuchRow:
        abort(404, description=f"Pump '{serial}' has no {what} #{row_id}.")
    if wants_json(None):
        return jsonify({"deleted": row_id, "what": what}), 200
    flash(f"The {what} #{row_id} was deleted; an engineer can restore it from the trash.", "saved")
    return redirect(url_for("pumps.page", serial=serial))


def _own(_db, pump, row) -> bool:
    return row.pump_id == pump.id


@bp.post("/pumps/<path:serial>/readings/<int:row_id>/delete")
@requires("engineer")
def delete_reading(serial: str, row_id: int):
    return _delete(serial, Reading, row_id, "reading", _own)


@bp.post("/pumps/<path:serial>/events/<int:row_id>/delete")
@requires("engineer")
def delete_event(serial: str, row_id: int):
    return _delete(serial, MaintenanceEvent, row_id, "maintenance event", _own)


@bp.post("/pumps/<path:serial>/samples/<int:row_id>/delete")
@requires("engineer")
def delete_sample(serial: str, row_id: int):
    # A sample is of a machine's reservoir: it belongs to every pump that has sat on that machine.
    return _delete(serial, OilSample, row_id, "oil sample",
                   lambda db, pump, row: pump.id in pumps_on_machine(db, row.machine_id, ever=True))
