"""One database session per request, closed when the request ends."""

from flask import Flask, current_app, g
from sqlalchemy.orm import Session


def session() -> Session:
    if "db_session" not in g:
        g.db_session = current_app.extensions["fleet_db"]()
    return g.db_session


def _close(_exc=None) -> None:
    db_session = g.pop("db_session", None)
    if db_session is not None:
        db_session.close()


def init_app(app: Flask) -> None:
    app.teardown_appcontext(_close)
