"""Attacks on signing in: guessing passwords (rate limit), probing for names, stealing or planting the session
cookie, bouncing a user to another site after sign-in, and riding on a session after the password changed."""

import pytest
from sqlalchemy import select

from fleet.db.models import User
from fleet.services import users
from fleet.web import create_app
from tests.conftest import TEST_PASSWORD, csrf_token_of


def _attempt(client, name: str, password: str, environ: dict | None = None, **extra):
    form = client.get("/login", environ_base=environ or {}).get_data(as_text=True)
    return client.post("/login", data={"name": name, "password": password, "csrf_token": csrf_token_of(form),
                                       **extra}, environ_base=environ or {})


def _cookie_header(response) -> str:
    return next(h for h in response.headers.getlist("Set-Cookie") if h.startswith("session="))


def test_password_guessing_is_stopped_after_the_limit(demo_db):
    app = create_app({"DATABASE_URL": demo_db.url, "TESTING": True, "SECRET_KEY": "test",
                      "LOGIN_RATE_LIMIT": "5 per minute"})
    client = app.test_client()
    for guess in range(5):  # a name each, so the per-name delay stays out of it: this is the per-address limit
        assert _attempt(client, f"guessed-name-{guess}", f"guess number {guess}").status_code == 401
    # The 6th attempt within the minute is refused before the password is even checked, right or wrong.
    blocked = _attempt(client, "test-engineer", TEST_PASSWORD)
    assert blocked.status_code == 429 and "too many sign-in attempts" in blocked.get_data(as_text=True)
    assert client.get("/").status_code == 302  # not signed in
    # Another address is counted on its own.
    other = app.test_client()
    response = _attempt(other, "test-engineer", TEST_PASSWORD, environ={"REMOTE_ADDR": "10.0.0.7"})
    assert response.status_code == 302
    app.extensions["fleet_engine"].dispose()


def test_the_default_limit_is_ten_a_minute(web_app):
    assert web_app.config["LOGIN_RATE_LIMIT"] == "10 per minute"
    client = web_app.test_client()
    codes = [_attempt(client, f"guessed-name-{n}", "not the password").status_code for n in range(11)]
    assert codes == [401] * 10 + [429]


def test_a_wrong_name_and_a_wrong_password_look_the_same(anonymous_client):
    unknown = _attempt(anonymous_client, "no-such-user", "whatever it is")
    wrong = _attempt(anonymous_client, "test-engineer", "whatever it is")
    assert unknown.status_code == wrong.status_code == 401

    def message(response):
        return response.get_data(as_text=True).split('id="login-error">')[1].split("<")[0]

    assert message(unknown) == message(wrong) == "That name and password do not match an active user."


def test_a_disabled_user_cannot_sign_in(anonymous_client, demo_db):
    with demo_db.sessions.begin() as s:
        s.scalar(select(User).where(User.name == "test-technician")).active = False
    assert _attempt(anonymous_client, "test-technician", TEST_PASSWORD).status_code == 401


def test_session_cookie_flags(anonymous_client):
    response = _attempt(anonymous_client, "test-engineer", TEST_PASSWORD)
    header = _cookie_header(response)
    assert "HttpOnly" in header and "SameSite=Lax" in header
    assert "Secure" not in header  # plain http on a test client, and FLEET_SECURE_COOKIES unset


@pytest.mark.parametrize("how", ["setting", "https"])
def test_the_cookie_is_secure_when_asked_or_over_https(demo_db, monkeypatch, how):
    if how == "setting":
        monkeypatch.setenv("FLEET_SECURE_COOKIES", "1")
    app = create_app({"DATABASE_URL": demo_db.url, "TESTING": True, "SECRET_KEY": "test"})
    base = "https://fleet.invalid" if how == "https" else "http://localhost"
    client = app.test_client()
    form = client.get("/login", base_url=base).get_data(as_text=True)
    # Over https Flask-WTF also wants the Referer of this site, as a browser sends it.
    response = client.post("/login", base_url=base, headers={"Referer": f"{base}/login"},
                           data={"name": "test-engineer", "password": TEST_PASSWORD,
                                 "csrf_token": csrf_token_of(form)})
    assert response.status_code == 302
    header = _cookie_header(response)
    assert "Secure" in header and "HttpOnly" in header and "SameSite=Lax" in header
    app.extensions["fleet_engine"].dispose()


@pytest.mark.parametrize("target", ["https://evil.invalid/", "//evil.invalid/x", "/\\evil.invalid",
                                    "javascript:alert(1)", "http://localhost.evil.invalid/"])
def test_sign_in_never_sends_the_user_to_another_site(anonymous_client, target):
    response = _attempt(anonymous_client, "test-engineer", TEST_PASSWORD, next=target)
    assert response.status_code == 302 and response.headers["Location"] == "/"


def test_a_planted_session_does_not_survive_sign_in(anonymous_client):
    with anonymous_client.session_transaction() as planted:
        planted["planted_by_attacker"] = "yes"
    _attempt(anonymous_client, "test-engineer", TEST_PASSWORD)
    with anonymous_client.session_transaction() as cookie:
        assert "planted_by_attacker" not in cookie and cookie["_user_id"]


def test_a_new_password_ends_the_sessions_of_the_old_one(web_app, demo_db, login):
    stolen = login(web_app.test_client(), "engineer", through_form=True)
    assert stolen.get("/register").status_code == 200
    with demo_db.sessions.begin() as s:
        users.set_password(s, "test-engineer", "a brand new invented password")
    assert stolen.get("/register").status_code == 302  # back to the sign-in page


def test_signing_out_ends_the_session(client):
    assert client.get("/").status_code == 200
    assert client.post("/logout").status_code == 302
    assert client.get("/").status_code == 302
    assert client.post("/plan/windows", data={}).status_code == 401
