"""One database session per request for reading, closed when the request ends; writes go through
fleet.services.writes.perform with the session factory (``sessions``)."""

from flask import Flask, current_app, g, request
from sqlalchemy.orm import Session, sessionmaker


def session() -> Session:
    if "db_session" not in g:
        g.db_session = current_app.extensions["fleet_db"]()
    return g.db_session


def sessions() -> sessionmaker[Session]:
    """The session factory, for a write: fleet.services.writes.perform opens its own unit of work."""
    return current_app.extensions["fleet_db"]


def _close(_exc=None) -> None:
    db_session = g.pop("db_session", None)
    if db_session is not None:
        db_session.close()


def analysis_up_to_date() -> None:
    """Before a page is read, bring stale analyses up to date (a write whose refresh did not finish, a bulk
    import with --no-analysis): pages never show a stale figure without saying so."""
    if request.method not in ("GET", "HEAD") or request.endpoint in (None, "static") or \
            request.blueprint == "assets":
        return
    from fleet.services.analysis import any_stale, bring_up_to_date

    if any_stale(session()):
        session().rollback()  # a fresh snapshot for the page, after the refresh
        bring_up_to_date(sessions())


def init_app(app: Flask) -> None:
    app.teardown_appcontext(_close)
