"""The asset register: sites, machines, positions, oils, pumps and where each pump sits over time.

Functions take a session and never commit: the caller owns the transaction.
"""

from datetime import datetime

from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.models import Installation, LimitDefault, Machine, Oil, Position, Pump, Site
from fleet.limits import DEFAULT_LIMITS


def get_or_create_site(session: Session, name: str) -> Site:
    site = session.scalar(select(Site).where(Site.name == name))
    if site is None:
        site = Site(name=name)
        session.add(site)
        session.flush()
    return site


def get_or_create_machine(session: Session, site: Site, name: str) -> Machine:
    machine = session.scalar(select(Machine).where(Machine.site_id == site.id, Machine.name == name))
    if machine is None:
        machine = Machine(site_id=site.id, name=name)
        session.add(machine)
        session.flush()
    return machine


def get_or_create_position(session: Session, machine: Machine, name: str) -> Position:
    position = session.scalar(select(Position).where(Position.machine_id == machine.id, Position.name == name))
    if position is None:
        position = Position(machine_id=machine.id, name=name)
        session.add(position)
        session.flush()
    return position


def locate_position(session: Session, site: str, machine: str, position: str) -> Position:
    """The position named by site, machine and position, created if new."""
    site_row = get_or_create_site(session, site)
    machine_row = get_or_create_machine(session, site_row, machine)
    return get_or_create_position(session, machine_row, position)


def set_oil(session: Session, name: str, nu40: float, nu100: float, density15: float | None,
            iso_vg: int | None) -> Oil:
    """Create the oil or bring its data-sheet values up to date."""
    oil = session.scalar(select(Oil).where(Oil.name == name))
    if oil is None:
        oil = Oil(name=name)
        session.add(oil)
    oil.viscosity_40 = nu40
    oil.viscosity_100 = nu100
    if density15 is not None:
        oil.density_15 = density15
    elif oil.density_15 is None:
        oil.density_15 = 0.87  # typical mineral hydraulic oil at 15 degC, from memory
    if iso_vg is not None:
        oil.iso_vg = iso_vg
    session.flush()
    return oil


def current_installation(pump: Pump) -> Installation | None:
    open_rows = [row for row in pump.installations if row.removed_at is None]
    return max(open_rows, key=lambda row: row.installed_at) if open_rows else None


def place_pump(session: Session, pump: Pump, position: Position, at: datetime, hours: float | None) -> bool:
    """Record that ``pump`` went into ``position`` at ``at`` (hour meter ``hours``); False if already recorded.

    The history may be filled in any order: the pump's installation running at ``at`` ends then, and so does the
    stay of whatever other pump occupied the position; the new stay runs until the pump's next recorded move.
    """
    pump_rows = list(session.scalars(select(Installation).where(Installation.pump_id == pump.id)))
    for row in pump_rows:
        if row.position_id == position.id and row.installed_at == at:
            return False
    later = [row.installed_at for row in pump_rows if row.installed_at > at]
    until = min(later) if later else None
    for row in pump_rows:
        if row.installed_at < at and (row.removed_at is None or row.removed_at > at):
            row.removed_at, row.removed_hours = at, hours
    occupants = session.scalars(
        select(Installation).where(Installation.position_id == position.id, Installation.pump_id != pump.id)
    )
    for row in occupants:
        if row.installed_at <= at and (row.removed_at is None or row.removed_at > at):
            row.removed_at = at
    new = Installation(pump_id=pump.id, position_id=position.id, installed_at=at, installed_hours=hours,
                       removed_at=until)
    session.add(new)
    session.flush()
    session.expire(pump, ["installations"])
    return True


def ensure_limit_defaults(session: Session) -> int:
    """Store the built-in default limits for every pump kind that has none yet; return how many were added."""
    present = set(session.scalars(select(LimitDefault.kind)))
    added = 0
    for kind, limits in DEFAULT_LIMITS.items():
        if kind in present:
            continue
        session.add(LimitDefault(kind=kind, **{k: getattr(limits, k) for k in (
            "eta_v_limit", "drain_limit_pct", "oil_temp_max_c", "oil_temp_min_c", "cleanliness_target",
            "reading_interval_days", "planning_horizon_weeks", "source")}))
        added += 1
    session.flush()
    return added
