"""Attack: a stolen copy of the database (or a backup). It holds no password and no API token, only slow salted
Argon2id hashes of the passwords (RFC 9106) and SHA-256 hashes of the tokens; the demo's printed passwords are
nowhere in it either."""

import re
from pathlib import Path

import pytest
from argon2 import PasswordHasher
from sqlalchemy import select

from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.db.models import User
from fleet.services import users
from seed_demo import DEMO_USERS, build_demo, password_box

# The PHC string format argon2-cffi writes (RFC 9106 names Argon2id the primary variant; v=19 is version 1.3).
ARGON2ID = re.compile(r"^\$argon2id\$v=19\$m=\d+,t=\d+,p=\d+\$[A-Za-z0-9+/]{22}\$[A-Za-z0-9+/]{43}$")


def _file_bytes(url: str) -> bytes:
    return Path(url.removeprefix("sqlite:///")).read_bytes()


def test_passwords_are_stored_only_as_salted_argon2id_hashes(db):
    password = "invented shared password"
    with db.sessions.begin() as s:
        users.create_user(s, "a.first", "technician", password)
        users.create_user(s, "b.second", "engineer", password)
    with db.sessions() as s:
        hashes = s.scalars(select(User.password_hash).order_by(User.name)).all()
    assert all(ARGON2ID.match(h) for h in hashes), hashes
    assert hashes[0] != hashes[1]  # a salt each: equal passwords do not show as equal hashes
    # argon2-cffi checks its own hashes: the right password matches, a near miss does not.
    assert PasswordHasher().verify(hashes[0], password)
    with db.sessions.begin() as s:
        assert users.verify_password(s, "a.first", password).name == "a.first"
        assert users.verify_password(s, "a.first", password + " ") is None
    if db.url.startswith("sqlite"):
        db.engine.dispose()
        assert password.encode() not in _file_bytes(db.url)


@pytest.mark.parametrize("name, role, password, words", [
    ("x", "technician", "short", "at least 10 characters"),
    ("y", "admin", "long enough password", "unknown role 'admin'"),
    ("<script>", "viewer", "long enough password", "a user name is"),
])
def test_short_passwords_unknown_roles_and_odd_names_are_refused(db, name, role, password, words):
    with db.sessions.begin() as s, pytest.raises(users.UserError, match=re.escape(words)):
        users.create_user(s, name, role, password)
    with db.sessions() as s:
        assert s.scalar(select(User.id)) is None


def test_the_demo_prints_each_password_once_and_stores_only_hashes(tmp_path):
    url = f"sqlite:///{tmp_path / 'demo.sqlite'}"
    engine = make_engine(url)
    migrate.upgrade(engine)
    printed = []
    with make_session_factory(engine).begin() as s:
        built = build_demo(s, seed=7, echo=printed.append)
    assert not any("password" in line for line in printed)  # the import lines carry none
    box = password_box(built.users)
    passwords = {}
    for line in box.splitlines():
        found = re.fullmatch(r"\| (\S+) +(\w+) +password: (\S+) +\|", line)
        if found:
            passwords[found[1]] = (found[2], found[3])
    assert all(box.count(password) == 1 for _, password in passwords.values())
    assert {name: role for name, (role, _) in passwords.items()} == dict(DEMO_USERS)
    assert len({password for _, password in passwords.values()}) == 3  # generated, not one shared word
    with make_session_factory(engine).begin() as s:
        for name, (role, password) in passwords.items():
            assert users.verify_password(s, name, password).role == role
    engine.dispose()
    stored = _file_bytes(url)
    assert not any(password.encode() in stored for _, password in passwords.values())
