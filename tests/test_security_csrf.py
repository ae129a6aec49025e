"""Attack: cross-site request forgery. A signed-in engineer's browser, lured to another site, posts to fleet: the
post carries the session cookie but not the session's CSRF token. Every such write is 403 and writes nothing; so is
one carrying a token taken from another session. Every form fleet draws carries the token."""

import re

from tests.conftest import TEST_PASSWORD, csrf_token_of
from tests.test_security_write_routes import database_contents, write_table


def _engineer_without_token(web_app, login):
    client = login(web_app.test_client(), "engineer")
    del client.environ_base["HTTP_X_CSRFTOKEN"]  # what a forged cross-site post lacks
    return client


def test_every_write_without_the_csrf_token_is_403_and_writes_nothing(web_app, demo_db, login):
    writes = write_table(demo_db)
    client = _engineer_without_token(web_app, login)
    before = database_contents(demo_db)
    for write in writes:
        response = write.send(client)
        assert response.status_code == 403, write.name
        assert "security token is missing" in response.get_data(as_text=True), write.name
    assert database_contents(demo_db) == before


def test_a_token_from_another_session_or_a_made_up_one_is_refused(web_app, demo_db, login):
    writes = write_table(demo_db)
    victim = _engineer_without_token(web_app, login)
    attacker = login(web_app.test_client(), "viewer")  # a real session of its own, with a real token
    stolen = attacker.environ_base["HTTP_X_CSRFTOKEN"]
    before = database_contents(demo_db)
    for token in (stolen, stolen[:-4] + "AAAA", "", "null"):
        for write in writes:
            response = write.send(victim, headers={"X-CSRFToken": token})
            assert response.status_code == 403, (write.name, token)
    assert database_contents(demo_db) == before


def test_signing_in_needs_the_token_too(anonymous_client, demo_db):
    # Login CSRF: another site must not sign a browser in as the attacker's account.
    response = anonymous_client.post("/login", data={"name": "test-engineer", "password": TEST_PASSWORD})
    assert response.status_code == 403
    assert anonymous_client.get("/").status_code == 302  # still signed out
    # And signing out: a forged post cannot end someone's session.
    form = anonymous_client.get("/login").get_data(as_text=True)
    assert anonymous_client.post("/login", data={"name": "test-engineer", "password": TEST_PASSWORD,
                                                 "csrf_token": csrf_token_of(form)}).status_code == 302
    assert anonymous_client.post("/logout").status_code == 403
    assert anonymous_client.get("/").status_code == 200


def test_every_form_that_posts_carries_the_token(client, demo_db):
    pages = ["/", "/rounds", "/register/pump/new", "/register/pump/EY-101/edit", "/register/sample/new",
             "/register/upload", "/plan", "/review", "/pumps/EY-101", "/trash"]
    client.post("/rounds", data={"name": "Walk (invented)", "pumps": "EY-104"})
    pages.append("/rounds/1")
    # A token is the session's secret, signed with a time stamp: the secret part is the same in every form.
    secret = client.environ_base["HTTP_X_CSRFTOKEN"].split(".")[0]
    posting_forms = 0
    for path in pages:
        html = client.get(path).get_data(as_text=True)
        for form in re.findall(r"<form\b[^>]*>.*?</form>", html, flags=re.DOTALL | re.IGNORECASE):
            if re.search(r'method="post"', form, flags=re.IGNORECASE):
                posting_forms += 'action="/logout"' not in form
                assert f'name="csrf_token" value="{secret}.' in form, (path, form[:200])
    # Besides the sign-out form on every page: the route, reading, register, upload, window and trash forms.
    assert posting_forms >= 7, posting_forms
