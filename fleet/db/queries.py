"""Questions many parts ask of the register, answered in one place."""

from dataclasses import dataclass

from sqlalchemy import Select, func, select
from sqlalchemy.orm import Session

from fleet.db.models import AuditRecord, Installation, Machine, Position, Pump, Site


def pump_by_serial(session: Session, serial: str) -> Pump | None:
    """The pump with this serial, or None."""
    return session.scalar(select(Pump).where(Pump.serial == serial))


def current_installations() -> Select:
    """SELECT the pump_id of every installation still in place (a pump's current position); add joins and
    filters to narrow it."""
    return select(Installation.pump_id).where(Installation.removed_at.is_(None))


@dataclass(frozen=True)
class Place:
    """Where a pump is installed now."""

    site_id: int
    site: str
    machine_id: int
    machine: str
    position_id: int
    position: str
    installed_at: object
    installed_hours: float | None


def current_places(session: Session, pump_ids=None) -> dict[int, Place]:
    """pump_id -> where it sits now, for the pumps given (None: every installed pump)."""
    statement = (
        select(Installation.pump_id, Site.id, Site.name, Machine.id, Machine.name, Position.id, Position.name,
               Installation.installed_at, Installation.installed_hours)
        .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id).where(Installation.removed_at.is_(None))
    )
    if pump_ids is not None:
        statement = statement.where(Installation.pump_id.in_([int(p) for p in pump_ids]))
    return {row[0]: Place(*row[1:]) for row in session.execute(statement)}


def pumps_on_machine(session: Session, machine_id: int | None, ever: bool = False) -> list[int]:
    """Pumps now on a machine (or, with ``ever``, every pump that has sat on it)."""
    statement = (select(Installation.pump_id).join(Position, Position.id == Installation.position_id)
                 .where(Position.machine_id == machine_id))
    if not ever:
        statement = statement.where(Installation.removed_at.is_(None))
    return sorted(set(session.scalars(statement)))


def serials_any_case(session: Session, serial: str) -> list[str]:
    """Serials equal to ``serial`` but for letter case (a URL typed in lower case), in order."""
    return list(session.scalars(select(Pump.serial).where(func.lower(Pump.serial) == serial.lower())
                                .order_by(Pump.serial)))


def corrected_readings(session: Session, reading_ids) -> set[int]:
    """Which of these readings were corrected (an update of the reading is in the audit trail)."""
    ids = [int(i) for i in reading_ids]
    if not ids:
        return set()
    return set(session.scalars(select(AuditRecord.row_id).where(
        AuditRecord.action == "update", AuditRecord.table_name == "reading", AuditRecord.row_id.in_(ids))))
