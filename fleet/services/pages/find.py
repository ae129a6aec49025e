"""Find a pump: a serial, part of one, or the name of the machine or position it sits in now.

Matching ignores letter case, and the words typed are matched literally: % and _ (LIKE's wildcards) and the
escape character itself are escaped, so "EY_3" finds only serials holding "EY_3".
"""

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from fleet.db.models import Installation, Machine, Position, Pump, Site
from fleet.kinds import PUMP_KINDS

MAX_QUERY = 100  # characters; longer text is no serial or name
MAX_MATCHES = 200
MATCH_COLUMNS = ("pump", "kind", "site", "machine", "position", "matched_on")
_ESCAPE = "\\"


def like_pattern(text: str) -> str:
    """``%text%`` with LIKE's wildcards in ``text`` escaped (escape character: backslash)."""
    escaped = text.replace(_ESCAPE, _ESCAPE * 2).replace("%", _ESCAPE + "%").replace("_", _ESCAPE + "_")
    return f"%{escaped}%"


def find_pumps(session: Session, query: str) -> dict:
    """Pumps matching ``query``, and ``jump``: the one serial to open (the query is a whole serial, or only one
    pump matches), else None."""
    # Control characters are no part of a name; a NUL would even cut SQLite's pattern short (to match all).
    text = "".join(ch for ch in (query or "") if ch.isprintable()).strip()[:MAX_QUERY]
    data = {"query": text, "matches": [], "jump": None, "more": False}
    if not text:
        return data
    pattern = like_pattern(text)
    here = (select(Pump.serial, Pump.kind, Site.name, Machine.name, Position.name)
            .select_from(Pump)
            .outerjoin(Installation, (Installation.pump_id == Pump.id) & Installation.removed_at.is_(None))
            .outerjoin(Position, Position.id == Installation.position_id)
            .outerjoin(Machine, Machine.id == Position.machine_id)
            .outerjoin(Site, Site.id == Machine.site_id)
            .where(or_(Pump.serial.ilike(pattern, escape=_ESCAPE), Machine.name.ilike(pattern, escape=_ESCAPE),
                       Position.name.ilike(pattern, escape=_ESCAPE)))
            .order_by(Pump.serial).limit(MAX_MATCHES + 1))
    rows = session.execute(here).all()
    data["more"] = len(rows) > MAX_MATCHES
    folded = text.casefold()
    for serial, kind, site, machine, position in rows[:MAX_MATCHES]:
        on = [name for name, value in (("serial", serial), ("machine", machine), ("position", position))
              if value and folded in value.casefold()]
        data["matches"].append({"pump": serial, "kind": PUMP_KINDS.get(kind, kind), "site": site, "machine": machine,
                                "position": position, "matched_on": ", ".join(on) or "serial"})
    whole = [m["pump"] for m in data["matches"] if m["pump"].casefold() == folded]
    if len(whole) == 1:
        data["jump"] = whole[0]
    elif len(data["matches"]) == 1:
        data["jump"] = data["matches"][0]["pump"]
    return data
