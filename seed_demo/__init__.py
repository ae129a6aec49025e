"""The invented demo plant: generated tables (seed_demo.plant) loaded through the same importer users use."""

import secrets
from collections.abc import Callable
from dataclasses import dataclass
from datetime import timedelta

import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from fleet.db.models import Pump
from fleet.io.columns import LOAD_ORDER
from fleet.timeutil import utcnow

HISTORY_WEEKS = 6
# Before those weeks, one analysis every REPLAY_EVERY_WEEKS back to REPLAY_FROM_WEEKS ago (the readings begin about
# 130 weeks before the end), so the forecast record has the forecasts of 3, 6 and 12 months before the demo's
# overhauls and limit crossings to score.
REPLAY_EVERY_WEEKS = 4
REPLAY_FROM_WEEKS = 122


def demo_present(session: Session) -> bool:
    """True when the database already holds pumps (demo or real): the demo never overwrites data."""
    return bool(session.scalar(select(func.count()).select_from(Pump)))


def _as_text(table: pd.DataFrame) -> pd.DataFrame:
    return table.astype(object).where(table.notna(), "").astype(str)


def _add_shutdown_windows(session: Session, end) -> None:
    """Two planned stops for the planner to fit overhauls into (invented), entered as the plan page does."""
    from fleet.db.models import Site
    from fleet.services.pages.plan import add_window

    sites = dict(session.execute(select(Site.name, Site.id)).all())
    for site, weeks, days, note in (("East Yard", 3, 2, "invented: winter maintenance stop"),
                                    ("River Shop", 9, 3, "invented: spring line rebuild")):
        if site in sites:
            start = end + timedelta(weeks=weeks)
            add_window(session, {"scope": f"site:{sites[site]}", "starts_at": start.isoformat(),
                                 "ends_at": (start + timedelta(days=days)).isoformat(), "note": note})


# One invented user per role, so every part of the dashboard can be tried.
DEMO_USERS = (("demo-engineer", "engineer"), ("demo-technician", "technician"), ("demo-viewer", "viewer"))


@dataclass(frozen=True)
class DemoBuilt:
    summary: str
    users: tuple[tuple[str, str, str], ...]  # (name, role, password): for printing once; only hashes are stored


def _add_demo_users(session: Session) -> tuple[tuple[str, str, str], ...]:
    """Each demo user gets a fresh random password, returned for printing once; the database keeps its hash."""
    from fleet.services.users import create_user

    users = []
    for name, role in DEMO_USERS:
        password = secrets.token_urlsafe(12)
        create_user(session, name, role, password)
        users.append((name, role, password))
    return tuple(users)


def replay_weeks() -> list[int]:
    """How many weeks before now each replayed analysis of the demo is made, oldest first."""
    monthly = range(REPLAY_FROM_WEEKS, HISTORY_WEEKS, -REPLAY_EVERY_WEEKS)
    return [*monthly, *range(HISTORY_WEEKS, 0, -1)]


def password_box(users, address: str | None = None) -> str:
    """The demo sign-ins in a box of their own, apart from the import lines (every line with a password says
    'password', so a log filter can drop them)."""
    where = f"Sign in at {address} as one of these invented users." if address else \
        "Sign in as one of these invented users."
    rows = [where, "The passwords are shown only now; the database keeps their hashes.", ""]
    rows += [f"{name:<16} {role:<11} password: {password}" for name, role, password in users]
    rows += ["", "Lost one? fleet user password NAME sets a new one."]
    width = max(len(row) for row in rows)
    rule = "+" + "-" * (width + 2) + "+"
    return "\n".join([rule, *(f"| {row:<{width}} |" for row in rows), rule])


def build_demo(session: Session, seed: int = 2026, end=None, echo: Callable[[str], None] = print) -> DemoBuilt:
    """Generate the invented plant and import it kind by kind, then analyse it; the caller commits, then prints
    the demo users' passwords (``password_box``)."""
    from fleet.services.analysis import refresh_analysis
    from fleet.services.register.records import ensure_limit_defaults
    from fleet.services.transfer.importing import import_table
    from seed_demo.history import earlier_overhauls
    from seed_demo.plant import generate

    ensure_limit_defaults(session)
    if end is None:  # yesterday's round is the last one: today's would still lie ahead of the clock
        end = (utcnow() - timedelta(days=1)).date()
    tables = generate(seed=seed, end=end)
    for kind in LOAD_ORDER:
        if kind in tables:
            result = import_table(session, kind, _as_text(tables[kind]), source="import")
            echo(f"  {result.summary()}")
    result = import_table(session, "events", _as_text(earlier_overhauls(tables, seed)), source="import")
    echo(f"  earlier overhauls from the (invented) paper log: {result.summary()}")
    _add_shutdown_windows(session, end)
    users = _add_demo_users(session)
    # Replay past analyses, each on what was known then: monthly over the demo's history, so the forecast record
    # has forecasts to score, then weekly over the last weeks, so the weekly review has a history of status
    # changes to show; the last analysis is of now.
    last = utcnow()
    for weeks_ago in replay_weeks():
        refresh_analysis(session, now=last - timedelta(weeks=weeks_ago))
    summary = refresh_analysis(session, now=last)
    return DemoBuilt(f"invented demo plant built (seed {seed}); {summary.describe()}", users)
