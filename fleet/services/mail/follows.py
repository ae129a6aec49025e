"""The pumps each user follows: a site, a machine, or every pump. A scope is written ``everything``,
``site:ID`` or ``machine:ID``; where a pump sits now decides who follows it."""

from sqlalchemy import select
from sqlalchemy.orm import Session

from fleet.db.models import Follow, Machine, Site, User
from fleet.db.queries import current_places

EVERYTHING = "everything"


class FollowError(ValueError):
    """A follow that cannot be added; the message says why."""


def scope_of(follow: Follow) -> str:
    if follow.machine_id is not None:
        return f"machine:{follow.machine_id}"
    if follow.site_id is not None:
        return f"site:{follow.site_id}"
    return EVERYTHING


def scope_choices(session: Session) -> list[dict]:
    """Every scope one may follow, with its words: every pump, each site, each machine."""
    choices = [{"scope": EVERYTHING, "label": "Every pump"}]
    for site in session.scalars(select(Site).order_by(Site.name)):
        choices.append({"scope": f"site:{site.id}", "label": f"Site {site.name}"})
    for machine, site in session.execute(select(Machine, Site.name).join(Site, Site.id == Machine.site_id)
                                         .order_by(Site.name, Machine.name)):
        choices.append({"scope": f"machine:{machine.id}", "label": f"Machine {site} / {machine.name}"})
    return choices


def follows_of(session: Session, user_id: int) -> list[dict]:
    """What the user follows, with words, broadest first."""
    labels = {c["scope"]: c["label"] for c in scope_choices(session)}
    rows = session.scalars(select(Follow).where(Follow.user_id == user_id).order_by(Follow.id)).all()
    found = [{"id": f.id, "scope": scope_of(f), "label": labels.get(scope_of(f), scope_of(f))} for f in rows]
    order = {scope: i for i, scope in enumerate(labels)}
    return sorted(found, key=lambda f: order.get(f["scope"], len(order)))


def _parse_scope(session: Session, scope: str) -> tuple[int | None, int | None]:
    scope = (scope or "").strip()
    if scope == EVERYTHING:
        return None, None
    kind, _, number = scope.partition(":")
    if kind in ("site", "machine") and number.isdigit():
        model = Site if kind == "site" else Machine
        if session.get(model, int(number)) is not None:
            return (int(number), None) if kind == "site" else (None, int(number))
    raise FollowError(f"no such site or machine to follow: '{scope}'")


def add_follow(session: Session, user_id: int, scope: str) -> Follow:
    """Follow ``scope``; refused when the user follows it already."""
    site_id, machine_id = _parse_scope(session, scope)
    same_site = Follow.site_id.is_(None) if site_id is None else Follow.site_id == site_id
    same_machine = Follow.machine_id.is_(None) if machine_id is None else Follow.machine_id == machine_id
    existing = session.scalar(select(Follow.id).where(Follow.user_id == user_id, same_site, same_machine))
    if existing is not None:
        raise FollowError("you follow these pumps already")
    follow = Follow(user_id=user_id, site_id=site_id, machine_id=machine_id)
    session.add(follow)
    session.flush()
    return follow


def remove_follow(session: Session, user_id: int, follow_id: int) -> bool:
    """Stop following; False when the follow is not the user's."""
    follow = session.get(Follow, follow_id)
    if follow is None or follow.user_id != user_id:
        return False
    session.delete(follow)
    session.flush()
    return True


def followers(session: Session, pump_ids) -> dict[int, list[tuple[User, str]]]:
    """pump_id -> the active users with an address who follow it now, each with the words of their follow."""
    pump_ids = sorted({int(p) for p in pump_ids})
    if not pump_ids:
        return {}
    places = current_places(session, pump_ids)
    rows = session.execute(select(Follow, User).join(User, User.id == Follow.user_id)
                           .where(User.active.is_(True), User.email.is_not(None))).all()
    if not rows:
        return {}
    labels = {c["scope"]: c["label"] for c in scope_choices(session)}
    found: dict[int, list[tuple[User, str]]] = {}
    for pump_id in pump_ids:
        place = places.get(pump_id)
        chosen: dict[int, tuple[User, str]] = {}
        for follow, user in rows:
            follows_it = (follow.site_id is None and follow.machine_id is None) or (
                place is not None and (follow.site_id == place.site_id or follow.machine_id == place.machine_id))
            if follows_it and user.id not in chosen:
                chosen[user.id] = (user, labels.get(scope_of(follow), scope_of(follow)))
        if chosen:
            found[pump_id] = list(chosen.values())
    return found
