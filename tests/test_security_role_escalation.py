"""Attack: a signed-in user doing more than their role allows. A viewer may write nothing but their own mail
settings; a technician may log readings and lab results but not touch the register, limits, events, uploads, plan,
trash or outbox. Each refusal is 403 and writes nothing, even with a valid CSRF token."""

from tests.test_security_write_routes import database_contents, write_table


def test_a_viewer_can_write_nothing(web_app, demo_db, login):
    writes = [w for w in write_table(demo_db) if w.role != "viewer"]  # but their own settings
    assert len(writes) >= 15
    viewer = login(web_app.test_client(), "viewer")
    before = database_contents(demo_db)
    for write in writes:
        response = write.send(viewer)
        assert response.status_code == 403, write.name
        assert "needs a technician or higher" in response.get_data(as_text=True) or \
            "needs an engineer or higher" in response.get_data(as_text=True), write.name
    assert database_contents(demo_db) == before


def test_a_technician_cannot_do_an_engineers_writes(web_app, demo_db, login):
    writes = [w for w in write_table(demo_db) if w.role == "engineer"]
    assert len(writes) >= 10
    technician = login(web_app.test_client(), "technician")
    before = database_contents(demo_db)
    for write in writes:
        response = write.send(technician, headers={"Accept": "application/json"})
        assert response.status_code == 403, write.name
        reason = response.get_json()["problems"][0]["reason"]
        assert reason == "this needs an engineer or higher; test-technician is a technician", write.name
    assert database_contents(demo_db) == before


def test_engineer_forms_do_not_even_open_for_a_technician(web_app, login):
    technician = login(web_app.test_client(), "technician")
    for path in ("/register/pump/new", "/register/pump/EY-101/edit", "/register/limits/vane/edit",
                 "/register/event/new", "/register/upload", "/register/pump/new.json"):
        assert technician.get(path).status_code == 403, path
    assert technician.get("/register/sample/new").status_code == 200  # lab results are theirs
    viewer = login(web_app.test_client(), "viewer")
    assert viewer.get("/register/sample/new").status_code == 403
    assert viewer.get("/register").status_code == 200 and viewer.get("/pumps/EY-101.json").status_code == 200


def test_a_forged_role_in_the_form_changes_nothing(web_app, demo_db, login):
    # The role comes from the database, never from the request: extra fields and headers are ignored.
    writes = {w.endpoint: w for w in write_table(demo_db)}
    viewer = login(web_app.test_client(), "viewer")
    before = database_contents(demo_db)
    write = writes["plan.add"]
    response = viewer.post(write.path, data={**write.body()["data"], "role": "engineer"},
                           headers={"X-Role": "engineer"})
    assert response.status_code == 403
    assert database_contents(demo_db) == before
