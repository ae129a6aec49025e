"""Deleting records and getting them back: the delete routes of readings, events and samples, and the trash.

A deletion goes through the ORM, so the audit trail keeps the whole row (a reading with its flow-test points);
/trash lists what was deleted, newest first, and an engineer restores a row with its old id. Both re-analyse
the pumps the row feeds.
"""

from flask import Blueprint, abort, flash, jsonify, redirect, url_for
from sqlalchemy import select

from fleet.db.models import MaintenanceEvent, OilSample, Pump, Reading
from fleet.services import audit
from fleet.services.analysis import refresh_analysis
from fleet.web.auth import requires
from fleet.web.db import session
from fleet.web.respond import respond, twin_routes, wants_json

bp = Blueprint("trash", __name__)


@twin_routes(bp, "/trash")
@requires("engineer")
def index(fmt):
    return respond(audit.trash_page(session()), "trash/index.html", fmt, "deleted", audit.TRASH_COLUMNS, "trash")


@bp.post("/trash/<int:record_id>/restore")
@requires("engineer")
def restore(record_id: int):
    db = session()
    try:
        record = audit.restore(db, record_id)
    except audit.RestoreRefused as refused:
        db.rollback()
        if wants_json(None):
            return jsonify({"problems": [{"row": 0, "column": "", "reason": str(refused)}]}), 409
        flash(f"Not restored: {refused}", "error")
        return redirect(url_for("trash.index"))
    pump_ids = audit.pumps_fed_by(db, record)
    if pump_ids:
        refresh_analysis(db, pump_ids=pump_ids)
    what = audit.WHAT.get(record.table_name, record.table_name)
    db.commit()
    if wants_json(None):
        return jsonify({"restored": record.id, "table": record.table_name, "row_id": record.row_id}), 200
    flash(f"The {what} #{record.row_id} is back.", "saved")
    return redirect(url_for("trash.index"))


def _pump_or_404(serial: str) -> Pump:
    pump = session().scalar(select(Pump).where(Pump.serial == serial))
    if pump is None:
        abort(404, description=f"No pump '{serial}' in the register.")
    return pump


def _delete(row, pump_ids: list[int], what: str, serial: str):
    db = session()
    db.delete(row)
    db.flush()  # the audit record is written here, in the same transaction
    if pump_ids:
        refresh_analysis(db, pump_ids=pump_ids)
    db.commit()
    if wants_json(None):
        return jsonify({"deleted": row.id, "what": what}), 200
    flash(f"The {what} #{row.id} was deleted; an engineer can restore it from the trash.", "saved")
    return redirect(url_for("pumps.page", serial=serial))


@bp.post("/pumps/<path:serial>/readings/<int:row_id>/delete")
@requires("engineer")
def delete_reading(serial: str, row_id: int):
    pump = _pump_or_404(serial)
    reading = session().get(Reading, row_id)
    if reading is None or reading.pump_id != pump.id:
        abort(404, description=f"Pump '{serial}' has no reading #{row_id}.")
    return _delete(reading, [pump.id], "reading", serial)


@bp.post("/pumps/<path:serial>/events/<int:row_id>/delete")
@requires("engineer")
def delete_event(serial: str, row_id: int):
    pump = _pump_or_404(serial)
    event = session().get(MaintenanceEvent, row_id)
    if event is None or event.pump_id != pump.id:
        abort(404, description=f"Pump '{serial}' has no maintenance event #{row_id}.")
    return _delete(event, [pump.id], "maintenance event", serial)


@bp.post("/pumps/<path:serial>/samples/<int:row_id>/delete")
@requires("engineer")
def delete_sample(serial: str, row_id: int):
    pump = _pump_or_404(serial)
    db = session()
    sample = db.get(OilSample, row_id)
    if sample is None or pump.id not in audit.pumps_on_machine(db, sample.machine_id, ever=True):
        abort(404, description=f"Pump '{serial}' has never sat on the machine of oil sample #{row_id}.")
    return _delete(sample, audit.pumps_on_machine(db, sample.machine_id), "oil sample", serial)
