"""The pages of mail: each user's own (/account: address, digest, follows) and the engineers' outbox, against a
real SMTP server on 127.0.0.1."""

from sqlalchemy import select

from fleet.db.models import Follow, Machine, User
from fleet.services import users
from fleet.services.writes import perform
from tests.conftest import csrf_token_of, free_port, start_smtp_server
from tests.test_mail_alerts import ADDRESS, follow, outbox, parts, worsen


def _user(demo_db, name: str) -> User:
    with demo_db.sessions() as session:
        return session.scalar(select(User).where(User.name == name))


def _machine_id(demo_db, name: str) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(Machine.id).where(Machine.name == name))


def test_a_technician_sets_an_address_follows_a_machine_and_gets_the_alert(web_app, demo_db, login, smtp_server):
    technician = login(web_app.test_client(), "technician")
    page = technician.get("/account")
    assert page.status_code == 200 and "Your mail" in page.get_data(as_text=True)
    assert 'name="csrf_token"' in page.get_data(as_text=True)
    saved = technician.post("/account", data={"email": " tech@plant.example.invalid ", "digest": "on"})
    assert saved.status_code == 302
    assert technician.post("/account/follows", data={"scope": f"machine:{_machine_id(demo_db, 'power-unit-1')}"}) \
        .status_code == 302
    state = technician.get("/account.json").get_json()
    assert state["email"] == "tech@plant.example.invalid" and state["digest"] is True
    assert [f["label"] for f in state["follows"]] == ["Machine East Yard / power-unit-1"]
    assert "Machine East Yard / power-unit-1" not in [c["label"] for c in state["choices"]]
    assert technician.post("/account/follows", data={"scope": f"machine:{_machine_id(demo_db, 'power-unit-1')}"}) \
        .status_code == 400  # once is enough
    worsen(technician, demo_db)
    [mail] = smtp_server.to("tech@plant.example.invalid")
    assert "EY-105" in mail.message["Subject"]
    # Opting out of the digest keeps the alerts; stopping the follow ends them.
    technician.post("/account", data={"email": "tech@plant.example.invalid"})
    assert _user(demo_db, "test-technician").digest is False
    [followed] = technician.get("/account.json").get_json()["follows"]
    assert technician.post(f"/account/follows/{followed['id']}/delete").status_code == 302
    assert technician.get("/account.json").get_json()["follows"] == []


def test_an_address_that_could_add_a_header_or_is_not_one_is_refused(web_app, demo_db, login):
    viewer = login(web_app.test_client(), "viewer")
    for bad in ("tech@plant.example.invalid\r\nBcc: other@elsewhere.example.invalid", "two@a.invalid, three@b.invalid",
                "no-at-sign", "<tech@plant.example.invalid>", "a@b..invalid", "x" * 250 + "@a.invalid"):
        response = viewer.post("/account", data={"email": bad, "digest": "on"})
        assert response.status_code == 400, bad
        assert 'id="account-error"' in response.get_data(as_text=True)
    assert _user(demo_db, "test-viewer").email is None
    assert viewer.post("/account/follows", data={"scope": "machine:99999"}).status_code == 400
    assert viewer.post("/account/follows", data={"scope": "everyone's"}).status_code == 400


def test_no_one_changes_another_users_settings(web_app, demo_db, login):
    engineer_id = _user(demo_db, "test-engineer").id
    with demo_db.sessions.begin() as session:
        theirs = Follow(user_id=engineer_id, site_id=None, machine_id=None)
        session.add(theirs)
        session.flush()
        follow_id = theirs.id
    viewer = login(web_app.test_client(), "viewer")
    assert viewer.post(f"/account/follows/{follow_id}/delete").status_code == 404
    # A form naming another user changes only the signed-in one.
    viewer.post("/account", data={"email": "viewer@plant.example.invalid", "name": "test-engineer",
                                  "user_id": str(engineer_id)})
    assert _user(demo_db, "test-engineer").email is None
    assert _user(demo_db, "test-viewer").email == "viewer@plant.example.invalid"
    with demo_db.sessions() as session:
        assert session.get(Follow, follow_id) is not None


def test_an_api_token_cannot_redirect_its_users_mail(anonymous_client, demo_db):
    issued = perform(demo_db.sessions, lambda s: users.create_token(s, "test-technician", "logger (invented)")).value
    response = anonymous_client.post("/account", data={"email": "thief@elsewhere.example.invalid"},
                                     headers={"Authorization": f"Bearer {issued.secret}"})
    assert response.status_code == 403
    assert _user(demo_db, "test-technician").email is None


def test_every_value_in_an_alert_is_escaped_in_its_html(client, demo_db, smtp_server):
    with demo_db.sessions.begin() as session:
        session.get(Machine, _machine_id(demo_db, "power-unit-1")).name = '<b onclick="x()">unit & "1"</b>'
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    worsen(client, demo_db)
    text, html = parts(smtp_server.to(ADDRESS)[0].message)
    assert '<b onclick="x()">unit & "1"</b>' in text  # plain text says it as it is
    assert "&lt;b onclick=&#34;x()&#34;&gt;unit &amp; &#34;1&#34;&lt;/b&gt;" in html
    assert "<b onclick" not in html


def test_the_outbox_shows_a_failed_mail_to_engineers_and_sends_it_on_retry(web_app, demo_db, login, monkeypatch):
    port = free_port()
    monkeypatch.setenv("FLEET_SMTP_URL", f"smtp://127.0.0.1:{port}")
    follow(demo_db, "test-engineer", ADDRESS, "everything")
    engineer = login(web_app.test_client(), "engineer")
    worsen(engineer, demo_db)
    for role in ("viewer", "technician"):
        client = login(web_app.test_client(), role)
        assert client.get("/outbox").status_code == 403 and client.get("/outbox.json").status_code == 403
    data = engineer.get("/outbox.json").get_json()
    assert data["counts"] == {"pending": 0, "failed": 1, "sent": 0} and data["server"] == f"smtp://127.0.0.1:{port}"
    [mail] = data["mails"]
    assert mail["state"] == "failed" and mail["pump"] == "EY-105" and mail["to"] == ADDRESS
    assert mail["attempts"] == 1 and "could not reach" in mail["last_error"]
    page = engineer.get("/outbox").get_data(as_text=True)
    assert "Failed" in page and "could not reach" in page and "Send now" in page
    csv = engineer.get("/outbox.csv").get_data(as_text=True)
    assert csv.splitlines()[0].startswith("id,kind,state,to,subject") and ",failed," in csv
    server = start_smtp_server(port)
    try:
        response = engineer.post("/outbox/retry", data={"csrf_token": csrf_token_of(page)})
        assert response.status_code == 302
        assert "1 mail(s) sent" in engineer.get("/outbox").get_data(as_text=True)
        assert len(server.to(ADDRESS)) == 1
        assert engineer.get("/outbox.json").get_json()["counts"] == {"pending": 0, "failed": 0, "sent": 1}
        assert outbox(demo_db)[0].attempts == 2
    finally:
        server.controller.stop()


def test_the_menu_shows_the_outbox_to_engineers_only(web_app, login):
    assert 'href="/outbox"' in login(web_app.test_client(), "engineer").get("/account").get_data(as_text=True)
    page = login(web_app.test_client(), "technician").get("/account").get_data(as_text=True)
    assert 'href="/outbox"' not in page and 'href="/account"' in page

