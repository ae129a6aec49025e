"""Attack: posting readings with a forged, guessed, revoked or borrowed API token. Only a live token of an active
technician or engineer writes; everything else is refused (401 for a bad token, 403 for a viewer's) and writes
nothing. A token is shown once and stored only as its SHA-256."""

import hashlib
from datetime import timedelta
from pathlib import Path

from sqlalchemy import func, select

from fleet.db.models import ApiToken, Pump, Reading, User
from fleet.services import users
from fleet.timeutil import utcnow
from tests.test_security_write_routes import database_contents, write_table


def _issue(demo_db, name: str, label: str = "logger (invented)") -> users.IssuedToken:
    with demo_db.sessions.begin() as s:
        return users.create_token(s, name, label)


def _reading(demo_db, minutes_ago: int = 10) -> dict:
    with demo_db.sessions() as s:
        hours = s.scalar(select(func.max(Reading.hours)).join(Pump).where(Pump.serial == "EY-104"))
    return {"pump": "EY-104", "taken_at": (utcnow() - timedelta(minutes=minutes_ago)).isoformat(timespec="minutes"),
            "hours": hours + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0, "oil_temp": 50}


def _bearer(secret: str) -> dict:
    return {"Authorization": f"Bearer {secret}"}


def test_a_technicians_token_posts_without_cookie_or_csrf(anonymous_client, demo_db):
    issued = _issue(demo_db, "test-technician")
    response = anonymous_client.post("/api/readings", json=_reading(demo_db), headers=_bearer(issued.secret))
    assert response.status_code == 201, response.get_json()
    assert "Set-Cookie" not in response.headers  # a token request opens no session
    with demo_db.sessions() as s:
        stored = s.get(Reading, response.get_json()["readings"][0]["id"])
        token = s.get(ApiToken, issued.id)
        assert stored.source == "api" and token.last_used_at is not None
        # Only the SHA-256 of the token is kept (FIPS 180-4, as Python's hashlib computes it).
        assert token.token_hash == hashlib.sha256(issued.secret.encode()).hexdigest()
    # The same token reads the data twins, so a script needs no password.
    assert anonymous_client.get("/index.json", headers=_bearer(issued.secret)).status_code == 200


def test_forged_guessed_and_malformed_tokens_are_401_and_write_nothing(anonymous_client, demo_db):
    real = _issue(demo_db, "test-engineer")
    before = database_contents(demo_db)
    forged = [
        "fleet_" + "A" * 43,                              # the right shape, made up
        real.secret[:-1] + ("A" if real.secret[-1] != "A" else "B"),  # one character off a real token
        real.secret.removeprefix(users.TOKEN_PREFIX),   # the secret without its prefix
        hashlib.sha256(real.secret.encode()).hexdigest(),  # the stored hash, as if read from a stolen backup
        "' OR '1'='1",                                    # SQL in the header
        "",                                               # 'Bearer' and nothing
    ]
    for secret in forged:
        response = anonymous_client.post("/api/readings", json=_reading(demo_db), headers=_bearer(secret))
        assert response.status_code == 401, secret
        assert response.get_json()["problems"][0]["reason"] == "the API token is unknown or revoked"
    for header in (f"Basic {real.secret}", f"Token {real.secret}", "Bearer"):
        response = anonymous_client.post("/api/readings", json=_reading(demo_db), headers={"Authorization": header})
        assert response.status_code == 401, header
    # Before the database changed, so not even the real token's "last used" moved.
    assert database_contents(demo_db) == before


def test_a_bad_token_is_refused_even_with_a_signed_in_session(client, demo_db):
    before = database_contents(demo_db)
    response = client.post("/api/readings", json=_reading(demo_db), headers=_bearer("fleet_not-a-real-token"))
    assert response.status_code == 401  # a wrong token is never quietly ignored in favour of the cookie
    assert database_contents(demo_db) == before


def test_a_revoked_token_and_a_disabled_users_token_are_401(anonymous_client, demo_db):
    revoked, disabled = _issue(demo_db, "test-technician"), _issue(demo_db, "test-engineer")
    assert anonymous_client.post("/api/readings", json=_reading(demo_db, 30),
                                 headers=_bearer(revoked.secret)).status_code == 201
    with demo_db.sessions.begin() as s:
        users.revoke_token(s, revoked.id)
        s.scalar(select(User).where(User.name == "test-engineer")).active = False
    before = database_contents(demo_db)
    for secret in (revoked.secret, disabled.secret):
        response = anonymous_client.post("/api/readings", json=_reading(demo_db), headers=_bearer(secret))
        assert response.status_code == 401
    assert database_contents(demo_db) == before


def test_a_viewers_token_reads_but_every_write_is_403(anonymous_client, demo_db):
    issued = _issue(demo_db, "test-viewer", "dashboard screen (invented)")
    writes = write_table(demo_db)
    before = database_contents(demo_db)
    for write in writes:
        response = write.send(anonymous_client, headers=_bearer(issued.secret))
        assert response.status_code == 403, write.name
    assert database_contents(demo_db) == before
    assert anonymous_client.get("/review.json", headers=_bearer(issued.secret)).status_code == 200


def test_the_token_itself_is_nowhere_in_the_database_file(demo_db):
    from sqlalchemy import String, Text, select

    from fleet.db.base import Base

    issued = _issue(demo_db, "test-technician")
    # Every text value of every table, on any backend: the secret is not among them (only its hash is).
    with demo_db.sessions() as session:
        for table in Base.metadata.sorted_tables:
            for column in table.columns:
                if isinstance(column.type, String | Text):
                    values = session.scalars(select(column).where(column.contains(issued.secret[:16])))
                    assert list(values) == [], (table.name, column.name)
    if demo_db.url.startswith("sqlite"):  # and not in the raw file either, write-ahead log folded in
        demo_db.engine.dispose()
        assert issued.secret.encode() not in Path(demo_db.url.removeprefix("sqlite:///")).read_bytes()
