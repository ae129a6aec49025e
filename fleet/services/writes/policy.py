"""The refresh policy, in one place: which pumps' analyses a write changes.

A write unit notes the rows it changed (fleet.db.changes); here they become pumps:

- a reading, a flow-test point, a maintenance event, an installation or removal: its pump (old and new,
  when a row moved);
- a pump's register entry: that pump;
- an oil sample: the pumps on that machine now (a sample is of a reservoir, and counts for the pumps in it);
- a site (tariff, motor efficiency): the pumps installed there now;
- a machine (its oil), an oil (its data sheet), a position (its machine): every pump that ever sat there, since
  each reading is referred with the oil of the machine its pump sat in when it was taken;
- a kind's default limits: every pump of that kind.

Each touched pump's data version moves on (PumpDataVersion) in the same transaction as the rows, so an analysis
older than its data is always known as stale. A kind's fleet life figures are refitted by the analysis store
whenever a re-analysed pump of that kind has other service lives, age or planning horizon than stored
(fleet.services.analysis.store): an overhaul or replacement, its deletion or restore, or new hours on a running
interval.
"""

import functools

from sqlalchemy import bindparam, select
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import Session

from fleet.db.changes import Changed
from fleet.db.models import Installation, Machine, Position, Pump, PumpDataVersion, Reading
from fleet.db.queries import current_installations


def touched_pumps(session: Session, changed: Changed) -> set[int]:
    """The pumps whose analysis the changed rows feed."""
    pumps = set(changed.values("pump", "id"))
    for table in ("reading", "maintenance_event", "installation"):
        pumps |= changed.values(table, "pump_id")
    readings = changed.values("flow_test_point", "reading_id") - changed.values("reading", "id")
    if readings:
        pumps |= set(session.scalars(select(Reading.pump_id).where(Reading.id.in_(readings))))
    on = select(Installation.pump_id).join(Position, Position.id == Installation.position_id)
    now_on = current_installations().join(Position, Position.id == Installation.position_id)
    sampled = changed.values("oil_sample", "machine_id")
    if sampled:
        pumps |= set(session.scalars(now_on.where(Position.machine_id.in_(sampled))))
    sites = changed.values("site", "id")
    if sites:
        at_site = select(Machine.id).where(Machine.site_id.in_(sites))
        pumps |= set(session.scalars(now_on.where(Position.machine_id.in_(at_site))))
    machines = changed.values("machine", "id") | changed.values("position", "machine_id")
    oils = changed.values("oil", "id")
    if oils:
        machines |= set(session.scalars(select(Machine.id).where(Machine.oil_id.in_(oils))))
    if machines:
        pumps |= set(session.scalars(on.where(Position.machine_id.in_(machines))))
    kinds = changed.values("limit_default", "kind")
    if kinds:
        pumps |= set(session.scalars(select(Pump.id).where(Pump.kind.in_(kinds))))
    return {int(p) for p in pumps}


def bump_versions(session: Session, pump_ids) -> None:
    """Move the data version of each pump on by one (a first version is 1)."""
    ids = sorted({int(p) for p in pump_ids})
    if not ids:
        return
    # Existing pumps only: a deleted pump has nothing left to analyse.
    ids = list(session.scalars(_EXISTING, {"ids": ids}))
    if ids:
        session.execute(_bump_statement(session.get_bind().dialect.name), [{"pump_id": p} for p in ids])


_EXISTING = select(Pump.id).where(Pump.id.in_(bindparam("ids", expanding=True)))


@functools.cache
def _bump_statement(dialect: str):
    """A pump's version inserted as 1, or moved on by one where it has one: built once per dialect and run with
    each pump's id (a write's statements cost more to build than to run for its pump or two)."""
    insert = {"sqlite": sqlite.insert, "postgresql": postgresql.insert}[dialect]
    return insert(PumpDataVersion.__table__).values(pump_id=bindparam("pump_id"), version=1).on_conflict_do_update(
        index_elements=[PumpDataVersion.pump_id], set_={"version": PumpDataVersion.version + 1})
