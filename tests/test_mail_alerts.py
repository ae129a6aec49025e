"""Alerts through a real SMTP server on 127.0.0.1 (aiosmtpd, started by each test): a followed pump that gets
worse sends one mail to each follower after the write that caused it; nothing else does; a failed send keeps the
write and the mail, which goes on a retry."""

import itertools
from email.message import EmailMessage

from click.testing import CliRunner
from sqlalchemy import select

from fleet.cli import main
from fleet.db.models import Machine, OutboxMail, Pump, Site, StatusChange
from fleet.services import users
from fleet.services.analysis import statuses
from fleet.services.mail.follows import add_follow
from fleet.services.mail.outbox import worse
from fleet.services.writes import perform
from tests.conftest import free_port, start_smtp_server
from tests.test_api_readings import _reading

WORSENS = "EY-105"  # invented demo vane pump on East Yard / power-unit-1, healthy in the demo
ADDRESS = "engineer@plant.example.invalid"
_calls = itertools.count()  # each reading a minute later than the one before


def follow(demo_db, name: str, address: str | None, *places: str) -> None:
    """Give NAME an address and the follows ``places`` ('everything', a site's name or 'site/machine')."""
    def work(session):
        users.set_email(session, name, address)
        user = users.find_user(session, name)
        for place in places:
            if place == "everything":
                add_follow(session, user.id, "everything")
            elif "/" in place:
                site, machine = place.split("/")
                found = session.scalar(select(Machine.id).join(Site).where(Site.name == site, Machine.name == machine))
                add_follow(session, user.id, f"machine:{found}")
            else:
                add_follow(session, user.id, f"site:{session.scalar(select(Site.id).where(Site.name == place))}")

    perform(demo_db.sessions, work)


def worsen(client, demo_db, serial: str = WORSENS, **changes):
    """Post a reading of ``serial`` by the API (by default one of 10 L/min, far below its rated flow). For WORSENS
    an engineer then sets its volumetric efficiency limit to 0.999, which no pump meets: the wear trend is robust
    to one bad reading, so the limit is what takes the pump past it, deterministically."""
    changes = {"outlet_flow": 10.0, "minutes_ago": 30 - next(_calls) % 30} | changes
    response = client.post("/api/readings", json=_reading(demo_db, serial, **changes))
    assert response.status_code == 201, response.get_json()
    if serial != WORSENS:
        return response.get_json()["pumps"][0]

    def strict_limit(session):
        session.scalar(select(Pump).where(Pump.serial == serial)).eta_v_limit = 0.999

    perform(demo_db.sessions, strict_limit)
    with demo_db.sessions() as session:
        return statuses(session, [session.scalar(select(Pump.id).where(Pump.serial == serial))])[0]


def parts(message: EmailMessage) -> tuple[str, str]:
    assert message.get_content_type() == "multipart/alternative"
    text = message.get_body(preferencelist=("plain",)).get_content()
    html = message.get_body(preferencelist=("html",)).get_content()
    return text, html


def outbox(demo_db) -> list[OutboxMail]:
    with demo_db.sessions() as session:
        return list(session.scalars(select(OutboxMail).order_by(OutboxMail.id)))


def test_statuses_order_healthy_watch_due_soon_past_limit():
    assert worse("healthy", "watch") and worse("watch", "due_soon") and worse("due_soon", "past_limit")
    assert worse("healthy", "past_limit")
    assert not worse("past_limit", "due_soon") and not worse("watch", "watch") and not worse(None, "past_limit")


def test_a_reading_that_worsens_a_followed_pump_sends_one_alert(client, demo_db, smtp_server):
    follow(demo_db, "test-engineer", ADDRESS, "East Yard/power-unit-1")
    follow(demo_db, "test-viewer", "viewer@plant.example.invalid", "everything")
    follow(demo_db, "test-technician", "tech@plant.example.invalid", "River Shop")  # not EY-105's site
    result = worsen(client, demo_db)
    assert result["status"] == "past_limit"
    # Sent by the time the request answered: after the write, by the same unit of work.
    assert sorted(r for m in smtp_server.received for r in m.recipients) == [ADDRESS, "viewer@plant.example.invalid"]
    mail = smtp_server.to(ADDRESS)[0]
    assert mail.sender == "fleet@plant.example.invalid"
    message = mail.message
    assert message["Subject"] == "[fleet] EY-105 is now Past limit (was Healthy)"
    assert message["To"] == ADDRESS and message["From"] == "fleet@plant.example.invalid"
    text, html = parts(message)
    link = "https://fleet.plant.example.invalid/pumps/EY-105"
    for part in (text, html):
        assert "EY-105" in part and link in part and "East Yard / power-unit-1" in part
        assert "Volumetric efficiency at reference is" in part and "limit 99.9 %" in part  # the reason, as given
        assert "Before you work on a pump" in part
    assert "because you follow Machine East Yard / power-unit-1" in text
    assert "<img" not in html.lower() and "src=" not in html.lower()
    with demo_db.sessions() as session:
        rows = session.scalars(select(OutboxMail)).all()
        change = session.scalar(select(StatusChange).order_by(StatusChange.id.desc()).limit(1))
    assert len(rows) == 2 and all(r.sent_at is not None and r.attempts == 1 and r.last_error is None for r in rows)
    assert {r.status_change_id for r in rows} == {change.id} and change.previous_status == "healthy"


def test_an_unfollowed_pump_and_a_second_write_send_nothing_more(client, demo_db, smtp_server):
    follow(demo_db, "test-engineer", ADDRESS, "East Yard/press-2")
    worsen(client, demo_db)  # EY-105 is on power-unit-1, which no one follows
    assert smtp_server.received == [] and outbox(demo_db) == []
    follow(demo_db, "test-engineer", ADDRESS, "East Yard/power-unit-1")
    result = worsen(client, demo_db, outlet_flow=5.0)  # worse figures, the same status: no new alert
    assert result["status"] == "past_limit"
    assert smtp_server.received == [] and outbox(demo_db) == []
    # Another pump on the machine that gets worse: one alert; its next reading, no worse, none.
    # (EY-103 is a variable pump: a reading without its stroke cannot be referred, which is a reason to watch.)
    assert worsen(client, demo_db, "EY-103")["status"] == "watch"
    [mail] = smtp_server.to(ADDRESS)
    assert mail.message["Subject"] == "[fleet] EY-103 is now Watch (was Healthy)"
    assert "could not be referred" in parts(mail.message)[0]
    assert worsen(client, demo_db, "EY-103", outlet_flow=9.0)["status"] == "watch"
    assert len(smtp_server.received) == 1 and len(outbox(demo_db)) == 1


def test_with_the_server_down_the_write_stands_and_the_mail_goes_on_retry(client, demo_db, monkeypatch):
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    port = free_port()  # nothing listens here yet
    monkeypatch.setenv("FLEET_SMTP_URL", f"smtp://127.0.0.1:{port}")
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    assert worsen(client, demo_db)["status"] == "past_limit"  # the write succeeded
    [waiting] = outbox(demo_db)
    assert waiting.sent_at is None and waiting.attempts == 1 and "could not reach 127.0.0.1" in waiting.last_error
    assert waiting.next_attempt_at > waiting.created_at  # a wait before the next write tries again
    server = start_smtp_server(port)
    try:
        result = CliRunner().invoke(main, ["mail", "send"])
        assert result.exit_code == 0, result.output
        assert "1 mail(s) sent" in result.output
        [mail] = server.to(ADDRESS)
        assert mail.message["Message-ID"] == waiting.message_id  # the same mail, not a new one
        [sent] = outbox(demo_db)
        assert sent.sent_at is not None and sent.attempts == 2 and sent.last_error is None
        again = CliRunner().invoke(main, ["mail", "send"])
        assert again.exit_code == 0 and "nothing to send" in again.output and len(server.received) == 1
    finally:
        server.controller.stop()


def test_a_failed_mail_is_retried_by_the_next_write_once_its_wait_is_over(client, demo_db, monkeypatch):
    port = free_port()
    monkeypatch.setenv("FLEET_SMTP_URL", f"smtp://127.0.0.1:{port}")
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    worsen(client, demo_db)
    server = start_smtp_server(port)
    try:
        follow(demo_db, "test-viewer", "viewer@plant.example.invalid")  # a write while the failed mail waits
        assert server.received == []
        with demo_db.sessions.begin() as session:  # its wait is over
            waiting = session.scalar(select(OutboxMail))
            waiting.next_attempt_at = waiting.created_at
        follow(demo_db, "test-technician", "tech@plant.example.invalid")  # any write, even one that feeds no analysis
        assert [m.recipients for m in server.received] == [[ADDRESS]] and outbox(demo_db)[0].sent_at is not None
    finally:
        server.controller.stop()


def test_mail_off_queues_nothing(client, demo_db, monkeypatch):
    monkeypatch.delenv("FLEET_SMTP_URL", raising=False)
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    assert worsen(client, demo_db)["status"] == "past_limit"
    assert outbox(demo_db) == []


def test_fleet_serve_sends_what_waits_before_it_starts(client, demo_db, monkeypatch):
    from fleet.cli import Database, _send_waiting_mail

    port = free_port()
    monkeypatch.setenv("FLEET_SMTP_URL", f"smtp://127.0.0.1:{port}")
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    worsen(client, demo_db)
    assert outbox(demo_db)[0].sent_at is None
    server, db = start_smtp_server(port), Database(demo_db.url)
    try:
        _send_waiting_mail(db)  # what `fleet serve` does before it listens
        assert len(server.to(ADDRESS)) == 1 and outbox(demo_db)[0].sent_at is not None
    finally:
        db.close()  # its pooled connection, left open, would be collected during a later test
        server.controller.stop()
