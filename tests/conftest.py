"""Shared fixtures: a real database per test (a SQLite file, or the PostgreSQL server CI starts)."""

import os
import shutil
import threading
from dataclasses import dataclass
from pathlib import Path

import pytest
from sqlalchemy import Engine, text
from sqlalchemy.orm import Session, sessionmaker

from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.services.register import ensure_limit_defaults

DATA = Path(__file__).parent / "data"
# Set by .ci/run for its second pass: the whole suite against a throw-away PostgreSQL server.
SERVER_URL = os.environ.get("FLEET_TEST_DATABASE_URL")


@dataclass
class TestDatabase:
    url: str
    engine: Engine
    sessions: sessionmaker[Session]


def reset_server_schema(engine: Engine) -> None:
    """Leave a server database empty: drop fleet's tables through the migrations, then any leftovers."""
    migrate.downgrade_to_empty(engine)
    with engine.begin() as connection:
        connection.execute(text("DROP TABLE IF EXISTS alembic_version"))


@pytest.fixture
def empty_database_url(tmp_path) -> str:
    """A URL of an empty database: a fresh SQLite file, or the CI PostgreSQL database emptied."""
    if SERVER_URL:
        engine = make_engine(SERVER_URL)
        reset_server_schema(engine)
        engine.dispose()
        return SERVER_URL
    return f"sqlite:///{tmp_path / 'fleet.sqlite'}"


@pytest.fixture
def db(empty_database_url) -> TestDatabase:
    """A migrated database with the default limits stored."""
    engine = make_engine(empty_database_url)
    migrate.upgrade(engine)
    sessions = make_session_factory(engine)
    with sessions.begin() as session:
        ensure_limit_defaults(session)
    yield TestDatabase(empty_database_url, engine, sessions)
    engine.dispose()


@pytest.fixture
def cli_env(db, monkeypatch):
    """Environment for invoking the CLI against the test database."""
    monkeypatch.setenv("FLEET_DATABASE_URL", db.url)
    return {"FLEET_DATABASE_URL": db.url}


# --- the demo plant and a live server for the browser tests -----------------------------------------------

ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"
CHROMIUM = os.environ.get("CHROMIUM_PATH") or shutil.which("chromium") or "/usr/bin/chromium"
# Without the background-networking flags Chromium tries to reach the internet, which this network refuses.
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
DEMO_SEED = 2026


@pytest.fixture(scope="session")
def demo_file(tmp_path_factory) -> Path:
    """The invented demo plant, built once per run into a SQLite file (tests copy it before changing it)."""
    from seed_demo import build_demo

    path = tmp_path_factory.mktemp("demo") / "demo.sqlite"
    engine = make_engine(f"sqlite:///{path}")
    migrate.upgrade(engine)
    with make_session_factory(engine).begin() as session:
        build_demo(session, seed=DEMO_SEED, echo=lambda _line: None)
    engine.dispose()  # the last connection closing folds the WAL back into the file
    return path


@pytest.fixture
def demo_db(demo_file, tmp_path) -> TestDatabase:
    """A private copy of the demo plant for one test."""
    path = tmp_path / "demo.sqlite"
    shutil.copyfile(demo_file, path)
    url = f"sqlite:///{path}"
    engine = make_engine(url)
    yield TestDatabase(url, engine, make_session_factory(engine))
    engine.dispose()


class _SwappableApp:
    """A WSGI app that forwards to whichever Flask app the current test set (one server for the session)."""

    def __init__(self):
        self.app = None

    def __call__(self, environ, start_response):
        return self.app(environ, start_response)


@pytest.fixture(scope="session")
def _live_server():
    from werkzeug.serving import make_server

    holder = _SwappableApp()
    server = make_server("127.0.0.1", 0, holder, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_port}", holder
    server.shutdown()
    thread.join(timeout=10)


@pytest.fixture(scope="session")
def base_url(_live_server) -> str:
    """Overrides pytest-base-url's fixture: pages are served by the live server above."""
    return _live_server[0]


@pytest.fixture
def live_app(_live_server, demo_db):
    """The dashboard over a fresh copy of the demo plant, served at ``base_url``."""
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": demo_db.url, "TESTING": True, "SECRET_KEY": "test"})
    _live_server[1].app = app
    yield app
    _live_server[1].app = None
    app.extensions["fleet_engine"].dispose()


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": CHROMIUM_ARGS}


@pytest.fixture
def artifacts() -> Path:
    """Where browser tests save their screenshots."""
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture
def client(demo_db):
    """A Flask test client over a fresh copy of the demo plant."""
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": demo_db.url, "TESTING": True, "SECRET_KEY": "test"})
    with app.test_client() as test_client:
        yield test_client
    app.extensions["fleet_engine"].dispose()
