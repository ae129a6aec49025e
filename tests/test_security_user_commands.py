"""The accounts at the command line: `fleet user add/password/list/token/revoke`. Attacks tried: a mistyped
(unconfirmed) password, a password on the command line where other users' `ps` would show it (there is no such
option), reading passwords or tokens back from `fleet user list`, and using a token after `fleet user revoke`."""

from click.testing import CliRunner
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import ApiToken, User
from fleet.services import users


def _run(args, stdin=None):
    return CliRunner().invoke(main, args, input=stdin)


def test_add_asks_twice_and_refuses_a_mismatch(cli_env, db):
    mismatch = _run(["user", "add", "t.one", "--role", "technician"],
                    "first invented password\nsecond invented password\nfirst invented password\n"
                    "first invented password\n")
    # click asks again after a mismatch; the third and fourth lines agree, so the user is added with them.
    assert "Error: The two entered values do not match." in mismatch.output
    assert mismatch.exit_code == 0 and "user t.one added as technician" in mismatch.output
    assert "first invented password" not in mismatch.output  # typed without echo
    with db.sessions.begin() as s:
        assert users.verify_password(s, "t.one", "first invented password") is not None


def test_add_from_stdin_password_change_and_list(cli_env, db):
    assert _run(["user", "add", "e.one", "--role", "engineer", "--password-stdin"],
                "an invented password\n").exit_code == 0
    assert _run(["user", "add", "e.one", "--role", "viewer", "--password-stdin"],
                "another invented one\n").output.endswith("there is already a user 'e.one'\n")
    assert _run(["user", "add", "v.one", "--role", "boss", "--password-stdin"], "x" * 12 + "\n").exit_code == 2
    assert "No such option '--password'" in _run(["user", "add", "v.two", "--role", "viewer", "--password",
                                                 "on the command line"]).output
    changed = _run(["user", "password", "e.one", "--password-stdin"], "a new invented password\n")
    assert changed.exit_code == 0 and "password of e.one changed" in changed.output
    with db.sessions.begin() as s:
        assert users.verify_password(s, "e.one", "an invented password") is None
        assert users.verify_password(s, "e.one", "a new invented password").name == "e.one"
        stored_hash = s.scalar(select(User.password_hash).where(User.name == "e.one"))
    assert _run(["user", "password", "nobody", "--password-stdin"], "a new invented password\n").exit_code == 1
    listing = _run(["user", "list"])
    assert listing.exit_code == 0 and "e.one" in listing.output and "engineer" in listing.output
    assert stored_hash not in listing.output and "argon2" not in listing.output


def test_token_is_printed_once_and_revoke_stops_it(cli_env, db):
    _run(["user", "add", "logger", "--role", "technician", "--password-stdin"], "an invented password\n")
    issued = _run(["user", "token", "logger", "--label", "press hall logger (invented)"])
    assert issued.exit_code == 0
    secret = issued.stdout.strip().splitlines()[-1]
    assert secret.startswith(users.TOKEN_PREFIX) and len(secret) > 40
    with db.sessions() as s:
        token = s.scalar(select(ApiToken))
        assert token.token_hash == users.token_hash(secret) and secret not in token.token_hash
        assert users.user_for_token(s, secret)[0].name == "logger"
    listing = _run(["user", "list"]).output
    assert "press hall logger" in listing and secret not in listing
    revoked = _run(["user", "revoke", str(token.id)])
    assert revoked.exit_code == 0 and f"token {token.id}" in revoked.output
    with db.sessions() as s:
        assert users.user_for_token(s, secret) is None
    assert _run(["user", "revoke", "999"]).exit_code == 1
    assert _run(["user", "token", "nobody", "--label", "x"]).exit_code == 1
