"""Every write route of the dashboard, with a request that really writes when the right person sends it.

The attack tests (test_security_*.py) send these same requests without a login, with too low a role, without a
CSRF token or with a bad API token, and check that each is refused and the database is unchanged. The checks here
keep that honest: each request succeeds for its role, and no write route is missing from the table.
"""

import io
from collections.abc import Callable
from dataclasses import dataclass
from datetime import timedelta

from sqlalchemy import func, select

from fleet.db import audit
from fleet.db.base import Base
from fleet.db.models import (
    AuditRecord,
    Follow,
    Installation,
    Machine,
    MaintenanceEvent,
    OilSample,
    OutboxMail,
    Position,
    Pump,
    Reading,
    User,
)
from fleet.services.pages.plan import add_window
from fleet.services.register.forms import FORMS
from fleet.services.rounds import create_route
from fleet.timeutil import utcnow

# Endpoints that write but belong to everyone: signing in and out (CSRF-checked, tested in test_security_login).
SIGN_IN_ENDPOINTS = {"auth.login", "auth.logout"}


@dataclass(frozen=True)
class Write:
    name: str
    endpoint: str
    role: str  # the lowest role allowed
    path: str
    body: Callable[[], dict]  # keyword arguments of client.post; a function, since a file can be read only once
    succeeds_with: int
    method: str = "POST"

    def send(self, client, **extra):
        return client.open(self.path, method=self.method, **self.body(), **extra)


def write_table(demo_db) -> list[Write]:
    """One request per write route (and per register form kind that differs in role), on the demo plant."""
    with demo_db.sessions.begin() as s:
        position_id = s.scalar(select(Position.id).where(Position.name == "pump 1"))
        machine = s.scalar(select(Machine).where(Machine.name == "power-unit-1"))
        machine_id, site_id = machine.id, machine.site_id
        pumps = {p.serial: p for p in s.scalars(select(Pump).where(Pump.serial.in_(["EY-101", "EY-104", "EY-105"])))}
        last = dict(s.execute(select(Pump.serial, func.max(Reading.hours)).join(Reading)
                              .where(Pump.serial.in_(list(pumps))).group_by(Pump.serial)).all())
        route_id = create_route(s, "Security walk (invented)", ["EY-105"]).id
        start = utcnow() + timedelta(days=40)
        window_id = add_window(s, {"scope": f"site:{site_id}", "starts_at": start.strftime("%Y-%m-%d"),
                                   "ends_at": start.strftime("%Y-%m-%d"), "note": "invented"}).id
        vane = pumps["EY-105"]
        # Records the engineer may delete, and one deleted already (through the ORM: the trail keeps it).
        gear = pumps["EY-101"]
        reading_ids = s.scalars(select(Reading.id).where(Reading.pump_id == gear.id).order_by(Reading.id)
                                .limit(2)).all()
        event_id = s.scalar(select(MaintenanceEvent.id).where(MaintenanceEvent.pump_id == gear.id).limit(1))
        sample_id = s.scalar(select(OilSample.id).where(OilSample.machine_id == gear_machine_id(s, gear.id))
                             .limit(1))
        with audit.acting_as("test setup"):
            s.delete(s.get(Reading, reading_ids[1]))
            s.flush()
        record_id = s.scalar(select(AuditRecord.id).where(AuditRecord.table_name == "reading",
                                                          AuditRecord.row_id == reading_ids[1]))
        # The viewer's follow of a machine, to stop; a mail that failed and waits for its retry, to send now.
        viewer_id = s.scalar(select(User.id).where(User.name == "test-viewer"))
        follow = Follow(user_id=viewer_id, machine_id=machine_id)
        s.add(follow)
        s.add(OutboxMail(kind="alert", user_id=viewer_id, to_address="viewer@plant.example.invalid",
                         subject="an invented alert", text_body="invented", html_body="<p>invented</p>",
                         message_id="<invented@plant.example.invalid>", created_at=utcnow(), attempts=1,
                         next_attempt_at=utcnow() + timedelta(minutes=30), last_error="invented: server down"))
        s.flush()
        follow_id = follow.id
        # A reading the technician took an hour ago, which they may still correct.
        own = Reading(pump_id=gear.id, taken_at=(utcnow() - timedelta(hours=1)).replace(microsecond=0),
                      hours=last["EY-101"] + 1, pressure_bar=0.8 * gear.rated_pressure_bar,
                      speed_rpm=gear.rated_speed_rpm, temp_c=50.0, taken_by="test-technician", source="form")
        s.add(own)
        s.flush()
        own_id, own_hours = own.id, own.hours
        round_form = {"taken_at": (utcnow() - timedelta(minutes=20)).strftime("%Y-%m-%dT%H:%M"),
                      "hours": f"{last['EY-105'] + 12:.1f}", "outlet_pressure": f"{0.8 * vane.rated_pressure_bar:.1f}",
                      "speed": f"{vane.rated_speed_rpm:.0f}",
                      "outlet_flow": f"{0.9 * vane.displacement_cc * vane.rated_speed_rpm / 1000:.2f}",
                      "oil_temp": "50", "action": "confirm"}
    moment = (utcnow() - timedelta(hours=2)).strftime("%Y-%m-%dT%H:%M")
    api_reading = {"pump": "EY-104", "taken_at": (utcnow() - timedelta(minutes=10)).isoformat(timespec="minutes"),
                   "hours": last["EY-104"] + 8, "outlet_pressure": 150, "speed": 1450, "outlet_flow": 40.0,
                   "oil_temp": 50}
    with demo_db.sessions() as s:  # the edit forms as they open, with one value changed
        pump_edit = {**FORMS["pump"].initial(s, "EY-101"), "note": "edited (invented)"}
        limits = {**FORMS["limits"].initial(s, "vane"), "eta_v_limit": "0.79"}
    events_csv = f"pump,date,kind,note\nEY-101,{moment[:10]},inspection,uploaded (invented)\n".encode()
    return [
        Write("a route", "rounds.create", "technician", "/rounds",
              lambda: {"data": {"name": "Another walk (invented)", "pumps": "EY-104"}}, 302),
        Write("a round's reading", "rounds.reading", "technician", f"/rounds/{route_id}/stops/1",
              lambda: {"data": round_form}, 302),
        Write("a reading by the API", "api.post_readings", "technician", "/api/readings",
              lambda: {"json": api_reading}, 201),
        Write("a reading's correction", "corrections.correct", "technician", f"/pumps/EY-101/readings/{own_id}",
              lambda: {"data": {"hours": f"{own_hours + 0.5}", "reason": "one digit typed wrong (invented)"}}, 302),
        Write("a reading's correction by the API", "api.correct_reading_api", "technician", f"/api/readings/{own_id}",
              lambda: {"json": {"oil_temp": 51, "reason": "gauge read again (invented)"}}, 200, "PATCH"),
        Write("a lab result", "register.new", "technician", "/register/sample/new",
              lambda: {"data": {"machine_id": str(machine_id), "sampled_at": moment, "iso4406": "18/16/13"}}, 302),
        Write("a maintenance event", "register.new", "engineer", "/register/event/new",
              lambda: {"data": {"pump": "EY-101", "date": moment, "kind": "inspection"}}, 302),
        Write("a new site", "register.new", "engineer", "/register/site/new",
              lambda: {"data": {"site": "Hill Works (invented)", "currency": "EUR"}}, 302),
        Write("a new pump", "register.new", "engineer", "/register/pump/new",
              lambda: {"data": {"pump": "SEC-1", "position_id": str(position_id), "kind": "vane",
                                "displacement": "20", "rated_speed": "1450", "rated_pressure": "140"}}, 302),
        Write("a pump's edit", "register.edit", "engineer", "/register/pump/EY-101/edit",
              lambda: {"data": pump_edit}, 302),
        Write("the default limits", "register.edit", "engineer", "/register/limits/vane/edit",
              lambda: {"data": limits}, 302),
        Write("a CSV upload", "register.upload", "engineer", "/register/upload",
              lambda: {"data": {"kind": "events", "file": (io.BytesIO(events_csv), "events.csv")},
                       "content_type": "multipart/form-data"}, 200),
        Write("a shutdown window", "plan.add", "engineer", "/plan/windows",
              lambda: {"data": {"scope": f"machine:{machine_id}", "starts_at": start.strftime("%Y-%m-%d"),
                                "ends_at": start.strftime("%Y-%m-%d")}}, 302),
        Write("a window's removal", "plan.delete", "engineer", f"/plan/windows/{window_id}/delete",
              lambda: {}, 302),
        Write("a reading's deletion", "trash.delete_reading", "engineer",
              f"/pumps/EY-101/readings/{reading_ids[0]}/delete", lambda: {}, 302),
        Write("an event's deletion", "trash.delete_event", "engineer", f"/pumps/EY-101/events/{event_id}/delete",
              lambda: {}, 302),
        Write("a lab result's deletion", "trash.delete_sample", "engineer",
              f"/pumps/EY-101/samples/{sample_id}/delete", lambda: {}, 302),
        Write("a restore from the trash", "trash.restore", "engineer", f"/trash/{record_id}/restore",
              lambda: {}, 302),
        Write("the outbox sent now", "outbox.retry", "engineer", "/outbox/retry", lambda: {}, 302),
        # Everyone's own mail settings: the user is the one signed in (test-viewer, for the lowest role).
        Write("one's own address and digest", "account.save", "viewer", "/account",
              lambda: {"data": {"email": "viewer@plant.example.invalid", "digest": "on"}}, 302),
        Write("a follow of one's own", "account.follow", "viewer", "/account/follows",
              lambda: {"data": {"scope": "everything"}}, 302),
        Write("one's own follow stopped", "account.unfollow", "viewer", f"/account/follows/{follow_id}/delete",
              lambda: {}, 302),
    ]


def gear_machine_id(session, pump_id: int) -> int:
    return session.scalar(select(Position.machine_id).join(Installation, Installation.position_id == Position.id)
                          .where(Installation.pump_id == pump_id, Installation.removed_at.is_(None)))


def database_contents(demo_db) -> dict[str, list]:
    """Every row of every table, in key order: equal before and after means nothing was written."""
    with demo_db.engine.connect() as connection:
        return {table.name: connection.execute(select(table).order_by(*table.primary_key.columns)).all()
                for table in Base.metadata.sorted_tables}


def write_endpoints(app) -> set[str]:
    return {rule.endpoint for rule in app.url_map.iter_rules()
            if rule.methods & {"POST", "PUT", "PATCH", "DELETE"}} - SIGN_IN_ENDPOINTS


def test_the_table_covers_every_write_route_and_every_form(web_app, demo_db):
    writes = write_table(demo_db)
    assert write_endpoints(web_app) == {w.endpoint for w in writes}
    # Every write view says which role it needs (a forgotten decorator would let any viewer write).
    for endpoint in write_endpoints(web_app):
        assert hasattr(web_app.view_functions[endpoint], "required_role"), endpoint
    # Forms needing a technician are exactly the lab results; the rest of the register is an engineer's.
    role_of = web_app.view_functions["register.new"].required_role
    assert {name for name in FORMS if role_of(form=name) == "technician"} == {"sample"}


def test_each_write_succeeds_for_its_role_and_writes(web_app, demo_db, login):
    writes = write_table(demo_db)
    for write in writes:
        client = login(web_app.test_client(), write.role)
        before = database_contents(demo_db)
        response = write.send(client)
        assert response.status_code == write.succeeds_with, (write.name, response.get_data(as_text=True)[:500])
        assert database_contents(demo_db) != before, write.name


def test_writes_name_the_signed_in_user(web_app, demo_db, login):
    writes = {w.name: w for w in write_table(demo_db)}
    technician, engineer = login(web_app.test_client(), "technician"), login(web_app.test_client(), "engineer")
    assert writes["a round's reading"].send(technician).status_code == 302
    assert writes["a pump's edit"].send(engineer).status_code == 302
    with demo_db.sessions() as s:
        # A blank 'taken by' on the round form is the technician who is signed in.
        newest = s.scalar(select(Reading).order_by(Reading.id.desc()).limit(1))
        assert newest.source == "form" and newest.taken_by == "test-technician"
        # The audit trail names the engineer who edited the pump.
        edit = s.scalar(select(AuditRecord).where(AuditRecord.table_name == "pump", AuditRecord.action == "update")
                        .order_by(AuditRecord.id.desc()).limit(1))
        assert edit.actor == "test-engineer" and edit.after["note"] == "edited (invented)"
