"""`fleet review --send`: the weekly review by mail, through a real SMTP server on 127.0.0.1, to every active user
with an address who has not opted out."""

import json
from html import unescape

import pytest
from click.testing import CliRunner
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import OutboxMail, User
from fleet.safety import CAUTION_TITLE, CAUTIONS, CHECK_NOW_CAUTION, calls_for_work
from fleet.services import users
from fleet.services.writes import perform
from fleet.timeutil import utcnow
from tests.conftest import free_port
from tests.test_mail_alerts import outbox, parts

ENGINEER, VIEWER = "engineer@plant.example.invalid", "viewer@plant.example.invalid"


@pytest.fixture
def readers(demo_db, monkeypatch):
    """The engineer reads the digest; the viewer has an address but opted out; the technician has no address; a
    disabled user with an address gets nothing either."""
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)

    def work(session):
        users.set_email(session, "test-engineer", ENGINEER)
        users.set_email(session, "test-viewer", VIEWER)
        session.scalar(select(User).where(User.name == "test-viewer")).digest = False
        users.create_user(session, "gone", "viewer", "an invented password", "gone@plant.example.invalid")
        users.set_active(session, "gone", False)

    perform(demo_db.sessions, work)


def test_the_digest_reaches_readers_with_an_address_except_those_opted_out(demo_db, readers, smtp_server):
    week = ["--week", utcnow().date().isoformat()]  # a fixed week: the same report each time it is asked
    result = CliRunner().invoke(main, ["review", "--send", *week])
    assert result.exit_code == 0, result.output
    assert "Weekly review" in result.stdout  # the review is printed as without --send
    assert "queued for 1 reader(s): test-engineer" in result.output and "1 mail(s) sent" in result.output
    assert [m.recipients for m in smtp_server.received] == [[ENGINEER]]
    message = smtp_server.received[0].message
    assert message["Subject"].startswith("[fleet] Weekly review ")
    assert message["Auto-Submitted"] == "auto-generated"
    text, html = parts(message)
    text = text.replace("\r\n", "\n")  # lines end in CRLF on the wire
    printed = CliRunner().invoke(main, ["review", *week]).stdout.strip()
    assert text.startswith(printed + "\n")  # the same report as `fleet review` prints
    assert f"https://fleet.plant.example.invalid/review?week={week[1]}" in text
    assert "https://fleet.plant.example.invalid/account" in text
    data = json.loads(CliRunner().invoke(main, ["review", "--json", *week]).stdout)
    for title in data["sections"].values():
        assert f">{title} (" in html
    for item in data["items"]:
        assert item["pump"] in html
    # The cautions of the review page (fleet.safety): beside each reason that sends someone to the pump now, and
    # the whole list at the end.
    plain_html = unescape(html)
    sending = [item for item in data["new_reasons"] if calls_for_work([item["reason"]])]
    assert plain_html.count(CHECK_NOW_CAUTION) == sum(calls_for_work([item.get("what")]) for item in data["items"])
    assert sending, "the invented demo plant has a pump to check now this week"
    assert plain_html.count(CHECK_NOW_CAUTION) >= len(sending)
    assert CAUTION_TITLE in plain_html and all(line in plain_html for line in CAUTIONS)
    lowered = html.lower()
    assert "<img" not in lowered and "src=" not in lowered and "url(" not in lowered and "<link" not in lowered
    [row] = outbox(demo_db)
    assert row.kind == "digest" and row.sent_at is not None


def test_json_output_stays_json_when_sending(demo_db, readers, smtp_server):
    result = CliRunner().invoke(main, ["review", "--json", "--send"])
    assert result.exit_code == 0, result.output
    assert set(json.loads(result.stdout)) >= {"counts", "status_changes", "items", "sections"}
    assert len(smtp_server.received) == 1


def test_without_a_server_the_digest_is_refused_and_with_one_down_it_waits(demo_db, readers, monkeypatch):
    monkeypatch.delenv("FLEET_SMTP_URL", raising=False)
    off = CliRunner().invoke(main, ["review", "--send"])
    assert off.exit_code == 1 and "mail is off" in off.output and outbox(demo_db) == []
    monkeypatch.setenv("FLEET_SMTP_URL", f"smtp://127.0.0.1:{free_port()}")
    down = CliRunner().invoke(main, ["review", "--send"])
    assert down.exit_code == 1 and "stays in the outbox" in down.output
    with demo_db.sessions() as session:
        [waiting] = session.scalars(select(OutboxMail)).all()
    assert waiting.kind == "digest" and waiting.to_address == ENGINEER and waiting.sent_at is None
    assert waiting.attempts == 1 and "could not reach" in waiting.last_error


def test_addresses_at_the_command_line(cli_env, db):
    added = CliRunner().invoke(main, ["user", "add", "m.reader", "--role", "viewer", "--email",
                                      "reader@plant.example.invalid", "--password-stdin"],
                               input="an invented password\n")
    assert added.exit_code == 0 and "mail to reader@plant.example.invalid" in added.output
    listing = CliRunner().invoke(main, ["user", "list"]).output
    assert "reader@plant.example.invalid" in listing
    bad = CliRunner().invoke(main, ["user", "email", "m.reader", "reader@plant.example.invalid\nBcc: x@y.invalid"])
    assert bad.exit_code == 1 and "not a plain mail address" in bad.output
    assert CliRunner().invoke(main, ["user", "email", "nobody", "a@plant.example.invalid"]).exit_code == 1
    refused = CliRunner().invoke(main, ["user", "add", "m.two", "--role", "viewer", "--email", "not an address",
                                        "--password-stdin"], input="an invented password\n")
    assert refused.exit_code == 1
    changed = CliRunner().invoke(main, ["user", "email", "m.reader", "other@plant.example.invalid"])
    assert changed.exit_code == 0 and "goes to other@plant.example.invalid" in changed.output
    cleared = CliRunner().invoke(main, ["user", "email", "m.reader", ""])
    assert cleared.exit_code == 0 and "gets no mail" in cleared.output
    with db.sessions() as session:
        assert session.scalar(select(User.email).where(User.name == "m.reader")) is None
        assert session.scalar(select(User).where(User.name == "m.two")) is None
