"""Deleting a reading, maintenance event or oil sample from a pump's page, and restoring it from the trash.

A deletion goes through the ORM, so the audit trail keeps the whole row (a reading with its flow-test points),
and an engineer restores it with its old id (fleet.db.audit.restore). Run inside a unit of work
(fleet.services.writes.perform), which re-analyses the pumps the row fed.
"""

from sqlalchemy.orm import Session

from fleet.db.models import MaintenanceEvent, OilSample, Reading
from fleet.db.queries import pump_by_serial, pumps_on_machine

# URL segment -> (model, what it is called)
DELETABLE = {"readings": (Reading, "reading"), "events": (MaintenanceEvent, "maintenance event"),
             "samples": (OilSample, "oil sample")}


class NoSuchRecord(LookupError):
    """The pump has no such record (or no such pump)."""


def delete_record(session: Session, serial: str, segment: str, row_id: int) -> str:
    """Delete record ``row_id`` of kind ``segment`` if it belongs to pump ``serial``; returns what it was."""
    model, what = DELETABLE[segment]
    pump = pump_by_serial(session, serial)
    row = session.get(model, row_id)
    if pump is None or row is None:
        raise NoSuchRecord(f"Pump '{serial}' has no {what} #{row_id}.")
    # A sample is of a machine's reservoir: it belongs to every pump that has sat on that machine.
    belongs = pump.id in pumps_on_machine(session, row.machine_id, ever=True) if model is OilSample \
        else row.pump_id == pump.id
    if not belongs:
        raise NoSuchRecord(f"Pump '{serial}' has no {what} #{row_id}.")
    session.delete(row)
    return what
