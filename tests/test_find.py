"""Find a pump: the search box in every page's header, /find and its twins, and serials in URLs regardless of
letter case. Invented demo plant."""

import pytest
from sqlalchemy import select

from fleet.db.models import Installation, Machine, Position, Pump
from fleet.services.pages.find import like_pattern


def _installed(demo_db) -> list[tuple[str, str, str]]:
    """(serial, machine, position) of every pump installed now."""
    with demo_db.sessions() as session:
        return session.execute(
            select(Pump.serial, Machine.name, Position.name).join(Installation, Installation.pump_id == Pump.id)
            .join(Position, Position.id == Installation.position_id).join(Machine, Machine.id == Position.machine_id)
            .where(Installation.removed_at.is_(None))).all()


def _serials(demo_db) -> list[str]:
    with demo_db.sessions() as session:
        return list(session.scalars(select(Pump.serial)))


def test_a_whole_serial_in_any_case_jumps_to_the_pump(client):
    response = client.get("/find?q=%20ey-104%20")
    assert response.status_code == 302 and response.headers["Location"].endswith("/pumps/EY-104")
    assert client.get("/find.json?q=ey-104").get_json()["jump"] == "EY-104"


def test_part_of_a_serial_lists_every_match(client, demo_db):
    expected = sorted(s for s in _serials(demo_db) if "ey-1" in s.lower())
    assert len(expected) > 1
    response = client.get("/find?q=ey-1")
    html = response.get_data(as_text=True)
    assert response.status_code == 200 and f"{len(expected)} pump(s) match" in html
    data = client.get("/find.json?q=ey-1").get_json()
    assert data["jump"] is None and [m["pump"] for m in data["matches"]] == expected
    csv_lines = client.get("/find.csv?q=ey-1").get_data(as_text=True).splitlines()
    assert csv_lines[0] == "pump,kind,site,machine,position,matched_on" and len(csv_lines) == len(expected) + 1


def test_a_part_that_only_one_serial_holds_jumps(client, demo_db):
    serials = _serials(demo_db)
    part = next(s[1:] for s in serials if sum(s[1:].lower() in t.lower() for t in serials) == 1)
    response = client.get(f"/find?q={part}")
    assert response.status_code == 302


def test_a_machine_name_lists_the_pumps_on_it(client, demo_db):
    installed = _installed(demo_db)
    machine = installed[0][1]
    expected = sorted({serial for serial, m, _ in installed if machine.lower() in m.lower()})
    data = client.get("/find.json", query_string={"q": machine.upper()}).get_json()
    assert sorted(m["pump"] for m in data["matches"]) == expected
    assert all("machine" in m["matched_on"] for m in data["matches"])


def test_a_position_name_finds_its_pump(client, demo_db):
    serial, machine, position = _installed(demo_db)[0]
    data = client.get("/find.json", query_string={"q": position}).get_json()
    found = {m["pump"]: m for m in data["matches"]}
    assert serial in found and "position" in found[serial]["matched_on"]
    assert found[serial]["machine"] == machine


def test_like_wildcards_are_matched_literally():
    # SQL's LIKE (ISO/IEC 9075) treats % and _ as wildcards; escaped, they are plain characters.
    assert like_pattern("EY_1%") == "%EY\\_1\\%%"
    assert like_pattern("a\\b") == "%a\\\\b%"


@pytest.mark.parametrize("hostile", ["%", "_", "EY_104", "EY%104", "\\", "\\%", "' OR 1=1 --",
                                     "EY-104'; DROP TABLE pump; --", "<script>alert(1)</script>", "\u0000",
                                     "x" * 5000])
def test_hostile_input_matches_nothing_and_breaks_nothing(client, demo_db, hostile):
    before = sorted(_serials(demo_db))
    response = client.get("/find", query_string={"q": hostile})
    assert response.status_code == 200
    html = response.get_data(as_text=True)
    assert "<script>alert(1)</script>" not in html
    data = client.get("/find.json", query_string={"q": hostile}).get_json()
    assert data["matches"] == [] and data["jump"] is None
    assert sorted(_serials(demo_db)) == before


def test_an_empty_query_lists_nothing(client):
    response = client.get("/find?q=")
    assert response.status_code == 200 and "pump(s) match" not in response.get_data(as_text=True)


def test_serials_in_urls_match_regardless_of_case(client):
    response = client.get("/pumps/ey-104")
    assert response.status_code == 301 and response.headers["Location"].endswith("/pumps/EY-104")
    twin = client.get("/pumps/ey-104.json")
    assert twin.status_code == 301 and twin.headers["Location"].endswith("/pumps/EY-104.json")
    assert client.get("/pumps/EY-104").status_code == 200
    reading = client.get("/pumps/EY-104.json").get_json()["readings"][0]["reading_id"]
    deep = client.get(f"/pumps/ey-104/readings/{reading}")
    assert deep.status_code == 301 and deep.headers["Location"].endswith(f"/pumps/EY-104/readings/{reading}")
    assert client.get("/pumps/no-such-pump").status_code == 404


def test_the_search_box_is_in_every_signed_in_page(client):
    for path in ("/", "/review", "/rounds", "/register", "/pumps/EY-104"):
        html = client.get(path).get_data(as_text=True)
        assert 'role="search"' in html and 'id="find-q"' in html, path


def test_no_search_for_a_stranger(anonymous_client):
    assert 'id="find-q"' not in anonymous_client.get("/login").get_data(as_text=True)
    assert anonymous_client.get("/find?q=EY").status_code in (302, 401)  # signed-in pages only
