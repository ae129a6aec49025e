"""The landing page (service list) and its JSON and CSV twins, through the Flask test client."""

import csv
import io

from fleet.services.pages.service_list import CSV_COLUMNS

ROW_KEYS = {"pump", "kind", "kind_label", "site", "machine", "position", "rank", "status", "reasons", "eta_v_ref",
            "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit", "hours_to_limit_low", "hours_to_limit_high",
            "limit_date", "governing_limit", "prior_hours_to_overhaul", "energy_cost_per_year", "limit_date_low",
            "limit_date_high", "confidence", "last_reading_at", "cleanliness_code", "currency", "computed_at",
            "crossed_limit", "crossed_date"}


def test_service_list_page_lists_pumps_most_urgent_first(client):
    response = client.get("/")
    assert response.status_code == 200
    page = response.get_data(as_text=True)
    assert "<h1>Service list</h1>" in page
    assert page.index("RS-503") < page.index("EY-302") < page.index("EY-301")  # past, due soon, healthy
    assert "Past limit" in page and "●●●" in page  # words and shape, not colour alone
    assert 'href="/index.json"' in page and 'href="/index.csv"' in page
    assert "/pumps/EY-101" in page


def test_json_twin_has_the_page_data(client):
    for response in (client.get("/index.json"), client.get("/", headers={"Accept": "application/json"})):
        assert response.status_code == 200 and response.is_json
        data = response.get_json()
        assert set(data) == {"pumps", "total", "page", "pages", "query", "counts", "choices"}
        assert data["total"] == 41 and len(data["pumps"]) == 41
        assert set(data["pumps"][0]) == ROW_KEYS
        assert data["pumps"][0]["rank"] == 1 and data["pumps"][0]["status"] == "past_limit"


def test_csv_twin(client):
    response = client.get("/index.csv?status=past_limit")
    assert response.status_code == 200 and response.mimetype == "text/csv"
    rows = list(csv.DictReader(io.StringIO(response.get_data(as_text=True))))
    assert tuple(rows[0]) == CSV_COLUMNS
    assert {r["status"] for r in rows} == {"past_limit"} and len(rows) == 5


def test_filters_sorting_and_paging(client):
    data = client.get("/index.json?site=River%20Shop&kind=axial_piston").get_json()
    assert data["total"] > 0 and {p["site"] for p in data["pumps"]} == {"River Shop"}
    assert {p["kind"] for p in data["pumps"]} == {"axial_piston"}
    paged = client.get("/index.json?page_size=10&page=2&sort=pump").get_json()
    assert paged["pages"] == 5 and len(paged["pumps"]) == 10
    names = [p["pump"] for p in paged["pumps"]]
    assert names == sorted(names)


def test_plotly_is_served_locally(client):
    response = client.get("/assets/plotly.min.js")
    assert response.status_code == 200 and response.mimetype == "text/javascript"
    assert b"plotly" in response.data[:2000].lower()
    response.close()


def test_a_pump_without_a_stored_analysis_is_analysed_when_the_list_is_read(client, demo_db):
    from sqlalchemy import delete, select

    from fleet.db.models import AnalysisResult, Pump

    with demo_db.sessions.begin() as session:  # as if a write's process died before its refresh
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == "EY-101"))
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id == pump_id))
    assert "Not analysed yet" not in client.get("/").get_data(as_text=True)
    row = next(p for p in client.get("/index.json?sort=pump").get_json()["pumps"] if p["pump"] == "EY-101")
    assert set(row) == ROW_KEYS and row["status"] in ("healthy", "watch", "due_soon", "past_limit")
    with demo_db.sessions() as session:
        assert session.get(AnalysisResult, pump_id) is not None


def test_a_pump_past_its_limit_is_listed_with_when_it_crossed(client):
    """The list says when a pump's trend crossed its limit (the engine's crossed_date), not its last reading's date."""
    data = client.get("/index.json?status=past_limit").get_json()
    html = client.get("/?status=past_limit").get_data(as_text=True)
    crossed = [p for p in data["pumps"] if p["crossed_date"]]
    assert crossed
    for pump in crossed:
        assert pump["crossed_date"] < pump["last_reading_at"][:10]
        assert f"crossed around {pump['crossed_date']}" in html
        assert pump["crossed_limit"] in ("eta_v", "case_drain")
    # The limit named beside the crossing is the one crossed first, even where the other has been crossed since
    # and governs the forecast (in the invented demo RS-503 crossed its case drain limit before its efficiency's).
    both = [p for p in crossed if p["crossed_limit"] != p["governing_limit"]]
    assert both
    for pump in both:
        row = html[html.index(f"crossed around {pump['crossed_date']}"):][:200]
        assert ("case drain" if pump["crossed_limit"] == "case_drain" else "η_v") in row


def test_phone_cards_say_what_the_table_says_of_past_and_far_limits(client):
    """The phone's cards once showed a pump past its limit as '0 h' to a 'limit date' that was its last reading's,
    and a trend 200,000 h away as a date in the 2070s. They now say what the table says: when the trend crossed
    (the engine's crossed_date), and 'beyond 10 years' for a date past the horizon (fleet.horizon)."""
    from fleet.horizon import BEYOND_WORDS, is_beyond

    pumps = client.get("/index.json?page_size=500").get_json()["pumps"]
    html = client.get("/?page_size=500").get_data(as_text=True)
    cards = html[html.index('<ol class="pump-cards"'):]
    card = {p["pump"]: cards[cards.index(f'>{p["pump"]}</a>'):].split("</dl>")[0] for p in pumps}
    crossed = [p for p in pumps if p["crossed_date"]]
    far = [p for p in pumps if not p["crossed_date"] and p["hours_to_limit"] is not None
           and is_beyond(p["limit_date"], p["hours_to_limit"])]
    near = [p for p in pumps if not p["crossed_date"] and p["limit_date"] and p not in far]
    assert crossed and far and near  # the invented demo has all three
    for p in crossed:
        shown = card[p["pump"]]
        assert f'crossed around <span class="day">{p["crossed_date"]}</span>' in shown and p["limit_date"] not in shown
    for p in far:
        assert BEYOND_WORDS in card[p["pump"]] and p["limit_date"] not in card[p["pump"]]
    for p in near:
        assert p["limit_date"] in card[p["pump"]] and BEYOND_WORDS not in card[p["pump"]]
