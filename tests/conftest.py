"""Shared fixtures: a real database per test (a SQLite file, or the PostgreSQL server CI starts)."""

import itertools
import os
import re
import shutil
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import pytest
from sqlalchemy import Engine, func, select, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker
from sqlalchemy.pool import NullPool

from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.services.register.records import ensure_limit_defaults
from fleet.services.users import ROLES, create_user

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
def small_register(db) -> "TestDatabase":
    """The migrated database with the small invented register of tests/data/pumps_small.csv (T-101 to T-103)."""
    from fleet.services.transfer.importing import import_file

    with db.sessions.begin() as session:
        import_file(session, "pumps", DATA / "pumps_small.csv")
    return db


def readings_stored(db) -> int:
    """How many readings ``db`` holds."""
    from fleet.db.models import Reading

    with db.sessions() as session:
        return session.scalar(select(func.count()).select_from(Reading))


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
TEST_PASSWORD = "invented test password 1"  # of the test users the demo copy holds: test-viewer, -technician, -engineer


def _build_demo_into(url: str) -> None:
    from seed_demo import build_demo

    engine = make_engine(url)
    migrate.upgrade(engine)
    with make_session_factory(engine).begin() as session:
        build_demo(session, seed=DEMO_SEED, echo=lambda _line: None)
        for role in ROLES:  # one test user per role, with a password the tests know
            create_user(session, f"test-{role}", role, TEST_PASSWORD)
    engine.dispose()  # SQLite: the last connection closing folds the WAL back into the file


# --- PostgreSQL: whole databases made from a template, as cheap as copying a SQLite file -------------------

def _server_admin() -> Engine:
    """An AUTOCOMMIT engine on the server's maintenance database (CREATE DATABASE runs outside transactions)."""
    return make_engine(make_url(SERVER_URL).set(database="postgres").render_as_string(hide_password=False),
                       isolation_level="AUTOCOMMIT", poolclass=NullPool)


def _server_database_url(name: str) -> str:
    return make_url(SERVER_URL).set(database=name).render_as_string(hide_password=False)


def _create_server_database(name: str, template: str | None = None) -> str:
    admin = _server_admin()
    with admin.connect() as connection:
        connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        connection.execute(text(f'CREATE DATABASE "{name}"' + (f' TEMPLATE "{template}"' if template else "")))
    admin.dispose()
    return _server_database_url(name)


def _drop_server_database(name: str) -> None:
    admin = _server_admin()
    with admin.connect() as connection:
        connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    admin.dispose()


_server_copies = itertools.count(1)


@pytest.fixture(scope="session")
def demo_file(tmp_path_factory) -> Path | str:
    """The invented demo plant, built once per run: a SQLite file, or (with FLEET_TEST_DATABASE_URL) a template
    database on the PostgreSQL server, named here. Tests change only copies of it (``demo_db``)."""
    if SERVER_URL:
        name = f"{make_url(SERVER_URL).database}_demo_template"
        _build_demo_into(_create_server_database(name))
        yield name
        _drop_server_database(name)
        return
    path = tmp_path_factory.mktemp("demo") / "demo.sqlite"
    _build_demo_into(f"sqlite:///{path}")
    yield path


@pytest.fixture
def demo_db(demo_file, tmp_path) -> TestDatabase:
    """A private copy of the demo plant for one test: a copied SQLite file, or a server database made from the
    template (CREATE DATABASE ... TEMPLATE), dropped afterwards."""
    if SERVER_URL:
        name = f"{demo_file.removesuffix('_template')}_{os.getpid()}_{next(_server_copies)}"
        url = _create_server_database(name, template=demo_file)
        engine = make_engine(url)
        yield TestDatabase(url, engine, make_session_factory(engine))
        engine.dispose()
        _drop_server_database(name)
        return
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
        # The body is read and its iterator closed here, before a byte reaches the socket: werkzeug's server closes
        # the iterator only after draining the socket, and a browser that resets the connection as a test ends
        # makes that drain raise first, leaving a static file open for the garbage collector (a ResourceWarning).
        body = self.app(environ, start_response)
        try:
            return [b"".join(body)]
        finally:
            if hasattr(body, "close"):
                body.close()


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
    # A request still in flight (a page's script or service worker fetching as the test ends) holds a pooled
    # connection; disposing under it would leave that connection open for the garbage collector. Wait for it.
    engine = app.extensions["fleet_engine"]
    deadline = time.monotonic() + 10
    while getattr(engine.pool, "checkedout", lambda: 0)() and time.monotonic() < deadline:
        time.sleep(0.05)
    engine.dispose()


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": CHROMIUM_ARGS}


@pytest.fixture
def artifacts() -> Path:
    """Where browser tests save their screenshots."""
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


def sign_in(client, role: str = "engineer", through_form: bool = False):
    """Sign ``client`` in as the demo copy's test user of ``role`` and have it send the session's CSRF token
    (as a page's script would, in the X-CSRFToken header) with every later request; returns the client.

    By default a session is started in the database and its cookie set, as a sign-in would (without the password
    check's 0.1 s);
    ``through_form`` posts the sign-in form instead.
    """
    name = f"test-{role}"
    if through_form:
        form = client.get("/login")
        response = client.post("/login", data={"name": name, "password": TEST_PASSWORD,
                                                "csrf_token": csrf_token_of(form.get_data(as_text=True))})
        assert response.status_code == 302, response.get_data(as_text=True)
    else:
        from fleet.db.models import User
        from fleet.db.transaction import run_write
        from fleet.services.users import start_session
        from fleet.web.auth import SignedInUser

        def open_session(session):
            user = session.scalar(select(User).where(User.name == name))
            return SignedInUser.of(user, session_key=start_session(session, user.id))

        user = run_write(client.application.extensions["fleet_db"], open_session)
        with client.session_transaction() as cookie:
            cookie["_user_id"] = user.get_id()
            cookie["_fresh"] = True
    # A signed-in page carries the session's CSRF token in its sign-out form.
    client.environ_base["HTTP_X_CSRFTOKEN"] = csrf_token_of(client.get("/login").get_data(as_text=True))
    return client


def csrf_token_of(html: str) -> str:
    return re.search(r'name="csrf_token" value="([^"]+)"', html).group(1)


@pytest.fixture
def login():
    """``login(client, role)``: sign a test client in (see ``sign_in``)."""
    return sign_in


@pytest.fixture
def web_app(demo_db):
    """The dashboard app over a fresh copy of the demo plant."""
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": demo_db.url, "TESTING": True, "SECRET_KEY": "test"})
    yield app
    app.extensions["fleet_engine"].dispose()


@pytest.fixture
def anonymous_client(web_app):
    """A Flask test client over a fresh copy of the demo plant, signed in as no one."""
    with web_app.test_client() as test_client:
        yield test_client


@pytest.fixture
def client(anonymous_client):
    """A Flask test client over a fresh copy of the demo plant, signed in as an engineer (who may do anything)."""
    return sign_in(anonymous_client, "engineer")


@pytest.fixture
def browser_login(page, base_url, live_app):
    """``browser_login(role)``: sign the browser in through the sign-in page as the test user of ``role``."""

    def sign_in_browser(role: str = "engineer") -> None:
        page.goto(base_url + "/login")
        page.fill("#f-name", f"test-{role}")
        page.fill("#f-password", TEST_PASSWORD)
        page.click("button:has-text('Sign in')")
        page.wait_for_selector("#signed-in-as")

    return sign_in_browser


# --- a real SMTP server on this machine (aiosmtpd), for the mail tests ------------------------------------

@dataclass
class Received:
    """One mail as the SMTP server got it: the envelope and the parsed message."""

    sender: str
    recipients: list[str]
    message: object  # email.message.EmailMessage


class _Mailbox:
    """aiosmtpd's handler: keeps every message it accepts."""

    def __init__(self):
        self.received: list[Received] = []
        self.lock = threading.Lock()

    async def handle_DATA(self, server, session, envelope):  # noqa: N802 (aiosmtpd's name)
        from email import message_from_bytes, policy

        with self.lock:
            self.received.append(Received(envelope.mail_from, list(envelope.rcpt_tos),
                                          message_from_bytes(envelope.original_content, policy=policy.default)))
        return "250 Message accepted for delivery"


def free_port() -> int:
    import socket

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@dataclass
class SmtpServer:
    """A running SMTP server on 127.0.0.1 (aiosmtpd): ``received`` holds what it got; ``url`` for FLEET_SMTP_URL."""

    port: int
    mailbox: _Mailbox
    controller: object

    @property
    def url(self) -> str:
        return f"smtp://127.0.0.1:{self.port}"

    @property
    def received(self) -> list[Received]:
        with self.mailbox.lock:
            return list(self.mailbox.received)

    def to(self, address: str) -> list[Received]:
        return [r for r in self.received if address in r.recipients]


def start_smtp_server(port: int | None = None, **options) -> SmtpServer:
    from aiosmtpd.controller import Controller

    mailbox = _Mailbox()
    port = port or free_port()
    controller = Controller(mailbox, hostname="127.0.0.1", port=port, **options)
    controller.start()
    return SmtpServer(port, mailbox, controller)


@pytest.fixture
def smtp_server(monkeypatch):
    """A real SMTP server on 127.0.0.1, named by FLEET_SMTP_URL for this test; stopped at the end."""
    server = start_smtp_server()
    monkeypatch.setenv("FLEET_SMTP_URL", server.url)
    monkeypatch.setenv("FLEET_MAIL_FROM", "fleet@plant.example.invalid")
    monkeypatch.setenv("FLEET_BASE_URL", "https://fleet.plant.example.invalid")
    yield server
    server.controller.stop()
