"""Weekly review: what changed in a week; printable; JSON and CSV twins."""

import csv
import io
from datetime import date, timedelta
from pathlib import Path

from sqlalchemy import delete, func, select

from fleet.db.models import Machine, Pump, Reading, StatusChange
from fleet.services.pages.review import CSV_COLUMNS, SECTIONS
from fleet.timeutil import utcnow

KEYS = {"week_start", "week_end", "week", "previous_week", "next_week", "lab_late_days", "counts",
        "status_changes", "new_reasons", "limits_crossed", "rounds_missed", "lab_late", "energy_losses", "sections",
        "items"}


def _changes_this_week(demo_db) -> int:
    since = utcnow() - timedelta(days=7)
    with demo_db.sessions() as session:
        return session.scalar(select(func.count()).select_from(StatusChange).where(StatusChange.at >= since))


def test_review_page_sections_and_twins(client, demo_db):
    page = client.get("/review")
    assert page.status_code == 200
    html = page.get_data(as_text=True)
    for label in SECTIONS.values():
        assert label in html
    assert 'href="/review.json"' in html and 'href="/review.csv"' in html
    assert "planning.css" in html

    data = client.get("/review.json").get_json()
    assert set(data) == KEYS
    assert set(data["counts"]) == set(SECTIONS)
    assert client.get("/review", headers={"Accept": "application/json"}).get_json()["counts"] == data["counts"]
    # The demo replays weekly analyses as it is built: this week holds the changes of the last replayed week.
    assert data["counts"]["status_change"] == _changes_this_week(demo_db) > 0
    assert {c["direction"] for c in data["status_changes"]} <= {"first", "worse", "better", "same"}
    change = data["status_changes"][0]
    assert set(change) == {"pump", "site", "machine", "at", "status", "previous_status", "direction", "reasons",
                           "new_reasons", "eta_v_ref", "hours_to_limit", "limit_date"}
    # Energy losses: the ten largest, largest first.
    costs = [e["energy_cost_per_year"] for e in data["energy_losses"]]
    assert len(costs) == 10 and costs == sorted(costs, reverse=True)

    twin = client.get("/review.csv")
    assert twin.mimetype == "text/csv"
    text = twin.get_data(as_text=True)
    assert text.splitlines()[0] == ",".join(CSV_COLUMNS)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == len(data["items"]) == sum(data["counts"].values())
    assert {r["section"] for r in rows} <= set(SECTIONS)


def test_a_limit_change_shows_as_new_reasons_and_limits_crossed(client, demo_db):
    with demo_db.sessions.begin() as s:
        s.execute(delete(StatusChange))  # start the week clean, so only this change is reported
    values = {f["name"]: f["value"] for f in
              client.get("/register/limits/axial_piston/edit.json").get_json()["fields"]}
    assert client.post("/register/limits/axial_piston/edit", data={**values, "eta_v_limit": "0.97"}
                       ).status_code == 302
    data = client.get("/review.json").get_json()
    crossed = {c["pump"] for c in data["limits_crossed"]}
    with demo_db.sessions() as s:
        pistons = set(s.scalars(select(Pump.serial).where(Pump.kind == "axial_piston", Pump.eta_v_limit.is_(None))))
    assert crossed and crossed <= pistons
    assert all(c["previous_status"] != "past_limit" and c["direction"] == "worse" for c in data["limits_crossed"])
    assert {r["pump"] for r in data["new_reasons"]} >= crossed
    html = client.get("/review").get_data(as_text=True)
    some = sorted(crossed)[0]
    assert some in html
    reason = next(r["reason"] for r in data["new_reasons"] if r["pump"] == some)
    assert reason.replace("'", "&#39;") in html


def test_rounds_missed_follow_the_reading_interval(client, demo_db):
    with demo_db.sessions.begin() as s:
        pump = s.scalar(select(Pump).where(Pump.serial == "EY-101"))
        cut = utcnow() - timedelta(days=30)
        s.execute(delete(Reading).where(Reading.pump_id == pump.id, Reading.taken_at >= cut))
        last = s.scalar(select(func.max(Reading.taken_at)).where(Reading.pump_id == pump.id))
    data = client.get("/review.json").get_json()
    missed = {m["pump"]: m for m in data["rounds_missed"]}
    assert "EY-101" in missed
    # Due 14 days (the piston kind's default interval) after the last reading before the week.
    assert missed["EY-101"]["due_at"] == (last + timedelta(days=14)).isoformat(timespec="minutes")
    assert missed["EY-101"]["reading_interval_days"] == 14
    # A week in which the pump was read is not a missed round.
    week = (last + timedelta(days=1)).date()
    earlier = client.get(f"/review.json?week={week.isoformat()}").get_json()
    assert "EY-101" not in {m["pump"] for m in earlier["rounds_missed"]}


def test_a_sample_unreported_after_14_days_is_late(client, demo_db):
    with demo_db.sessions() as s:
        machine = s.scalar(select(Machine).where(Machine.name == "press-2"))
    sampled = (utcnow() - timedelta(days=20)).strftime("%Y-%m-%dT%H:%M")
    assert client.post("/register/sample/new", data={"machine_id": str(machine.id), "sampled_at": sampled,
                                                     "lab_ref": "invented-077"}).status_code == 302
    data = client.get("/review.json").get_json()
    late = [s for s in data["lab_late"] if s["lab_ref"] == "invented-077"]
    assert len(late) == 1 and 19.9 < late[0]["days_waiting"] < 20.1
    assert late[0]["machine"] == "press-2" and late[0]["pumps"]
    assert "invented-077" in client.get("/review").get_data(as_text=True)


def test_a_chosen_week_and_a_bad_week(client):
    old = client.get("/review.json?week=2020-01-05").get_json()
    assert old["week"] == "2020-01-05"
    assert old["week_start"] == "2019-12-30T00:00" and old["week_end"] == "2020-01-06T00:00"
    assert old["previous_week"] == "2019-12-29" and old["next_week"] == "2020-01-12"
    assert old["counts"]["status_change"] == 0
    page = client.get("/review?week=2020-01-05")
    assert page.status_code == 200 and "No status changed this week." in page.get_data(as_text=True)
    assert 'href="/review.csv?week=2020-01-05"' in page.get_data(as_text=True)
    assert client.get("/review.csv?week=2020-01-05").headers["Content-Disposition"].endswith(
        'filename="weekly-review-2020-01-05.csv"')
    assert client.get("/review?week=last-tuesday").status_code == 400
    assert date.fromisoformat(client.get("/review.json").get_json()["previous_week"]) < date.today()


def test_print_stylesheet_hides_navigation_and_forms():
    css = (Path(__file__).resolve().parents[1] / "fleet" / "web" / "static" / "planning.css").read_text()
    print_rules = css[css.index("@media print"):]
    for selector in (".masthead", ".no-print", ".foot", "form.record", "button"):
        assert selector in print_rules.split("display: none")[0]
