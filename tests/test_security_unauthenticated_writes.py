"""Attack: writing or reading without signing in. Every write route answers 401 and writes nothing; every page
sends a browser to the sign-in page, and its JSON and CSV twins answer 401."""

from urllib.parse import parse_qs, urlsplit

import pytest

from tests.conftest import TEST_PASSWORD, csrf_token_of
from tests.test_security_write_routes import database_contents, write_table

PAGES = ["/", "/pumps/EY-104", "/rounds", "/register", "/register/pump/new", "/register/upload", "/review", "/plan"]


def test_every_write_without_a_login_is_401_and_writes_nothing(anonymous_client, demo_db):
    writes = write_table(demo_db)
    before = database_contents(demo_db)
    for write in writes:
        response = write.send(anonymous_client)
        assert response.status_code == 401, write.name
        assert "Location" not in response.headers  # refused, not half-done and redirected
    # The same without even a session cookie's CSRF token, and asking for JSON: still 401, in the API's shape.
    for write in writes:
        response = write.send(anonymous_client, headers={"Accept": "application/json"})
        assert response.status_code == 401, write.name
        assert response.get_json()["problems"][0]["reason"].startswith("sign in first")
    assert database_contents(demo_db) == before


@pytest.mark.parametrize("path", PAGES)
def test_a_page_sends_the_browser_to_sign_in_and_back(anonymous_client, path):
    response = anonymous_client.get(path)
    assert response.status_code == 302 and "<table" not in response.get_data(as_text=True)
    target = urlsplit(response.headers["Location"])
    assert target.path == "/login" and parse_qs(target.query)["next"] == [path]
    # Signing in there leads back to the page asked for.
    form = anonymous_client.get(response.headers["Location"]).get_data(as_text=True)
    signed_in = anonymous_client.post("/login", data={"name": "test-engineer", "password": TEST_PASSWORD,
                                                      "next": path, "csrf_token": csrf_token_of(form)})
    assert signed_in.status_code == 302 and signed_in.headers["Location"] == path
    assert anonymous_client.get(path).status_code == 200


@pytest.mark.parametrize("path", ["/index.json", "/index.csv", "/pumps/EY-104.json", "/review.csv", "/plan.json",
                                  "/register.csv"])
def test_the_data_twins_answer_401(anonymous_client, path):
    response = anonymous_client.get(path)
    assert response.status_code == 401 and response.headers["WWW-Authenticate"].startswith("Bearer")
    assert "EY-" not in response.get_data(as_text=True)


def test_the_sign_in_page_and_static_files_stay_open(anonymous_client):
    assert anonymous_client.get("/login").status_code == 200
    with anonymous_client.get("/static/fleet.css") as response:  # a file response: close it
        assert response.status_code == 200
