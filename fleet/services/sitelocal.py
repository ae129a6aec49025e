"""Each site's conventions (time zone, display units, decimal comma), looked up for the rows and pages that need
them. Storage stays UTC and canonical; this is where a row, a form or a page learns which site's way to use.

A pump's site is the site of its latest installation (a pump lying in the store keeps the site it came from);
a pump never installed follows UTC, canonical units and a decimal point.
"""

import functools
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session, aliased

from fleet import units
from fleet.db.models import Installation, Machine, Position, Pump, Site
from fleet.io.localtime import DEFAULT_ZONE, offset_text, to_local
from fleet.io.parse import FALSE_WORDS, TRUE_WORDS, RowConventions, is_arrow_text
from fleet.timeutil import utcnow


@dataclass(frozen=True)
class Conventions:
    time_zone: str = DEFAULT_ZONE
    pressure_unit: str = "bar"
    flow_unit: str = "L/min"
    temperature_unit: str = "degC"
    decimal_comma: bool = False
    site: str | None = None  # the site's name (None: the pump sits at no site)

    def unit_of(self, quantity: str | None) -> str | None:
        """The site's unit of a quantity (pressure, flow, temperature), None for any other."""
        return {"pressure": self.pressure_unit, "flow": self.flow_unit,
                "temperature": self.temperature_unit}.get(quantity or "")


UTC_CANONICAL = Conventions()


def of_site(site: Site | None) -> Conventions:
    if site is None:
        return UTC_CANONICAL
    return Conventions(site.time_zone or DEFAULT_ZONE, site.pressure_unit or "bar", site.flow_unit or "L/min",
                       site.temperature_unit or "degC", bool(site.decimal_comma), site.name)


def queryable(text) -> bool:
    """Text a database can be asked about: valid Unicode without NUL (the parser reports the others)."""
    if not isinstance(text, str) or "\x00" in text:
        return False
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return False
    return True


def pump_sites(session: Session, serials) -> dict[str, Site]:
    """serial -> the site of the pump's latest installation."""
    serials = [s for s in set(serials) if queryable(s)]
    if not serials:
        return {}
    rows = session.execute(
        select(Pump.serial, Site).select_from(Pump)
        .join(Installation, Installation.id == latest_installation())
        .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
        .join(Site, Site.id == Machine.site_id).where(Pump.serial.in_(serials)))
    return {serial: site for serial, site in rows}


def pump_zones(session: Session, serials) -> dict[str, tuple[int, str]]:
    """serial -> (pump id, the time zone of its site) for the pumps of the register (one statement; UTC for a
    pump never installed): what a few posted readings need to be read and stored."""
    serials = [s for s in set(serials) if queryable(s)]
    if not serials:
        return {}
    rows = session.execute(_zones_statement(), {"serials": serials})
    return {serial: (pump_id, zone or DEFAULT_ZONE) for serial, pump_id, zone in rows}


@functools.cache
def _zones_statement():
    """pump_zones' statement, built once (building it, with its correlated look-up, costs ten times running it
    for the pump or two of a post); made on first use, as latest_installation is defined below."""
    return (select(Pump.serial, Pump.id, Site.time_zone).select_from(Pump)
            .outerjoin(Installation, Installation.id == latest_installation())
            .outerjoin(Position, Position.id == Installation.position_id)
            .outerjoin(Machine, Machine.id == Position.machine_id).outerjoin(Site, Site.id == Machine.site_id)
            .where(Pump.serial.in_(bindparam("serials", expanding=True))))


def latest_installation():
    """The id of each pump's latest installation, as a subquery correlated to Pump: an indexed look-up per pump
    asked about (a grouped subquery would first group every installation of the fleet)."""
    later = aliased(Installation)
    return (select(later.id).where(later.pump_id == Pump.id)
            .order_by(later.installed_at.desc(), later.id.desc()).limit(1).correlate(Pump).scalar_subquery())


def of_pump(session: Session, pump: Pump | str) -> Conventions:
    serial = pump if isinstance(pump, str) else pump.serial
    return of_site(pump_sites(session, [serial]).get(serial))


def _cells(table: pd.DataFrame, name: str) -> pd.Series | None:
    for header in table.columns:
        try:
            if units.parse_header(str(header))[0] == name:
                column = table[header]
                column = column.iloc[:, 0] if isinstance(column, pd.DataFrame) else column
                return (column if is_arrow_text(column) else column.astype("string")).str.strip()
        except units.UnitError:
            continue
    return None


def row_sites(session: Session, kind: str, table: pd.DataFrame) -> list[Site | None]:
    """Each row's site, by its pump (readings, flow tests, events) or its site (the others; a sample without a
    site by its machine when only one site has a machine of that name). None when it has none."""
    pumps, sites, machines = _cells(table, "pump"), _cells(table, "site"), _cells(table, "machine")
    if pumps is not None and kind not in {"pumps", "installations"}:
        by_serial = pump_sites(session, pumps.dropna())
        return [by_serial.get(s) if isinstance(s, str) else None for s in pumps]
    if sites is None and machines is None:
        return [None] * len(table)
    by_name = {site.name: site for site in session.scalars(select(Site))}
    by_machine: dict[str, set[str]] = {}
    for machine, site in session.execute(select(Machine.name, Site.name).join(Site)):
        by_machine.setdefault(machine, set()).add(site)
    found: list[Site | None] = []
    for position in range(len(table)):
        name = sites.iloc[position] if sites is not None else None
        machine = machines.iloc[position] if machines is not None else None
        if (not isinstance(name, str) or not name) and isinstance(machine, str):
            candidates = by_machine.get(machine, set())
            name = next(iter(candidates)) if len(candidates) == 1 else None
        found.append(by_name.get(name) if isinstance(name, str) else None)
    return found


def row_conventions(session: Session, kind: str, table: pd.DataFrame) -> RowConventions:
    """Each row's site conventions (fleet.io.parse reads times and numbers by them)."""
    pumps = _cells(table, "pump")
    if pumps is not None and kind not in {"pumps", "installations"}:
        # Readings come by the hundred thousand: look each pump up once and spread its site's ways over its rows.
        codes, serials = pd.factorize(pumps)
        by_serial = pump_sites(session, serials)
        found = [of_site(by_serial.get(serial)) for serial in serials] + [UTC_CANONICAL]  # code -1: no serial
        zones = np.array([c.time_zone for c in found], dtype=object)[codes]
        comma = np.array([c.decimal_comma for c in found], dtype=bool)[codes]
        return RowConventions(pd.Series(zones, dtype=object), pd.Series(comma, dtype=bool))
    found = [of_site(site) for site in row_sites(session, kind, table)]
    comma = pd.Series([c.decimal_comma for c in found], dtype=bool)
    own = _cells(table, "decimal_comma") if kind == "sites" else None
    if own is not None:  # a site row that sets the decimal comma writes its own tariff that way too
        said = own.fillna("").str.lower()
        comma = comma.mask(said.isin(TRUE_WORDS).to_numpy(), True).mask(said.isin(FALSE_WORDS - {""}).to_numpy(), False)
    return RowConventions(pd.Series([c.time_zone for c in found], dtype=object), comma.astype(bool))


def zone_label(conventions: Conventions, now=None) -> str:
    """How a form names the zone its times are read in: 'America/Chicago, UTC−06:00 now'."""
    local = to_local(now or utcnow(), conventions.time_zone)
    return f"{conventions.time_zone}, UTC{offset_text(local.utcoffset()).replace('-', '−')} now"
