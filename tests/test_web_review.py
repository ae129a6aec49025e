"""Weekly review: what changed in a week; printable; JSON and CSV twins."""

import csv
import io
import json
from datetime import date, datetime, timedelta
from pathlib import Path

import pytest
from sqlalchemy import delete, func, select

from fleet.db.models import Machine, Pump, Reading, StatusChange
from fleet.services.pages.review import CSV_COLUMNS, SECTIONS
from fleet.timeutil import utcnow

KEYS = {"week_start", "week_end", "week", "previous_week", "next_week", "lab_late_days", "counts",
        "status_changes", "new_reasons", "limits_crossed", "rounds_missed", "lab_late", "energy_losses", "sections",
        "items",
        # added with the counts that count right: kept apart, so the keys above keep their meaning
        "reason_changes", "still_past_limit", "maintenance", "maintenance_totals", "installations",
        "readings_corrected"}


def _changes_this_week(demo_db) -> int:
    """Status change rows of the last 7 days whose status really changed (a first analysis counts)."""
    since = utcnow() - timedelta(days=7)
    with demo_db.sessions() as session:
        rows = session.execute(select(StatusChange.status, StatusChange.previous_status)
                               .where(StatusChange.at >= since)).all()
    return sum(1 for status, previous in rows if status != previous)


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


# --- counting right: every figure derived again here from the stored rows of the week ---------------------------

def _week_rows(demo_db, start, end):
    """The rows the review counts, read plainly from the tables, with the rules README states."""
    from fleet.db.models import AnalysisResult, AuditRecord, Installation, MaintenanceEvent

    with demo_db.sessions() as s:
        serial = dict(s.execute(select(Pump.id, Pump.serial)).all())
        changes = s.execute(select(StatusChange.pump_id, StatusChange.status, StatusChange.previous_status,
                                   StatusChange.new_reasons).where(StatusChange.at >= start, StatusChange.at < end)
                            ).all()
        events = s.execute(select(MaintenanceEvent.pump_id, MaintenanceEvent.cost, MaintenanceEvent.downtime_h)
                           .where(MaintenanceEvent.date >= start, MaintenanceEvent.date < end)).all()
        stays = s.execute(select(Installation.installed_at, Installation.removed_at)).all()
        corrected = s.scalar(select(func.count()).select_from(AuditRecord).where(
            AuditRecord.action == "update", AuditRecord.table_name == "reading", AuditRecord.at >= start,
            AuditRecord.at < end))
        past_now = {serial[p] for p in s.scalars(select(AnalysisResult.pump_id)
                                                 .where(AnalysisResult.status == "past_limit"))}
    crossed = {serial[p] for p, status, previous, _ in changes if status == "past_limit" and previous != "past_limit"}
    moves = sum(start <= at < end for stay in stays for at in stay if at is not None)
    return {
        "status_change": sum(1 for _, status, previous, _ in changes if status != previous),
        "new_reason": sum(len(new or []) for *_, new in changes),
        "limit_crossed": len(crossed),
        "still_past_limit": len(past_now - crossed),
        "maintenance": len(events),
        "installation": moves,
        "reading_corrected": corrected,
    }, crossed, past_now, events


def test_the_review_counts_what_happened_in_the_week(client, demo_db):
    from fleet.db.models import Installation, MaintenanceEvent, Position

    now = utcnow()
    day = now - timedelta(days=1)
    with demo_db.sessions.begin() as s:
        ids = dict(s.execute(select(Pump.serial, Pump.id)).all())
        # Invented happenings of the week: a reasons-only row of a pump past its limit, a pump that crosses its
        # limit, an overhaul, a filter change and a seal repair, one pump moved, one reading corrected.
        s.add(StatusChange(pump_id=ids["EY-203"], at=day, status="past_limit", previous_status="past_limit",
                           reasons=["invented reason"], new_reasons=["invented reason"]))
        s.add(StatusChange(pump_id=ids["EY-102"], at=day, status="past_limit", previous_status="watch",
                           reasons=["invented crossing"], new_reasons=["invented crossing"]))
        s.add(MaintenanceEvent(pump_id=ids["RS-501"], date=day, kind="overhaul", cost=4200.0, downtime_h=16.0,
                               failure_mode="internal_leakage", note="invented"))
        s.add(MaintenanceEvent(pump_id=ids["RS-502"], date=day, kind="filter_change", cost=80.0, downtime_h=0.5))
        s.add(MaintenanceEvent(pump_id=ids["EY-101"], date=day, kind="seal_repair", cost=None, downtime_h=3.0))
        stay = s.scalar(select(Installation).where(Installation.pump_id == ids["RS-803"],
                                                   Installation.removed_at.is_(None)))
        stay.removed_at, stay.removed_hours = day, 100.0
        spare = s.scalar(select(Position).where(Position.id != stay.position_id).limit(1))
        s.add(Installation(pump_id=ids["RS-803"], position_id=spare.id, installed_at=day + timedelta(hours=2)))
        reading = s.scalar(select(Reading).where(Reading.pump_id == ids["EY-101"]).order_by(Reading.taken_at.desc())
                           .limit(1))
        reading.temp_c = reading.temp_c + 1.0
    data = client.get(f"/review.json?week={now.date().isoformat()}").get_json()
    start, end = datetime.fromisoformat(data["week_start"]), datetime.fromisoformat(data["week_end"])
    expected, crossed, past_now, events = _week_rows(demo_db, start, end)
    assert {k: data["counts"][k] for k in expected} == expected
    # What the rows above make of it, by hand: EY-102 crossed; EY-203's row changed reasons, not status.
    assert {c["pump"] for c in data["limits_crossed"]} == crossed and "EY-102" in crossed
    assert "invented reason" not in json.dumps(data["status_changes"])  # EY-203 may change status on its own
    assert "EY-203" in {c["pump"] for c in data["reason_changes"]}
    assert "invented reason" in {r["reason"] for r in data["new_reasons"] if r["pump"] == "EY-203"}
    assert all(c["status"] != c["previous_status"] for c in data["status_changes"])
    # No pump past its limit is left out: crossed this week or still past it.
    shown = crossed | {p["pump"] for p in data["still_past_limit"]}
    assert shown >= past_now and len(past_now) >= 5
    assert {(e["pump"], e["kind"]) for e in data["maintenance"]} >= {("RS-501", "overhaul"),
                                                                      ("RS-502", "filter_change"),
                                                                      ("EY-101", "seal_repair")}
    totals = data["maintenance_totals"]
    assert totals["events"] == len(events)
    assert sum(totals["cost"].values()) == pytest.approx(sum(c for _, c, _ in events if c is not None))
    assert totals["downtime_h"] == pytest.approx(sum(d for *_, d in events if d is not None))
    assert {(m["pump"], m["what"]) for m in data["installations"]} == {("RS-803", "removed"), ("RS-803", "installed")}
    (fix,) = data["readings_corrected"]
    assert fix["pump"] == "EY-101" and [c["field"] for c in fix["changes"]] == ["oil temperature"]
    assert fix["changes"][0]["after"] == pytest.approx(fix["changes"][0]["before"] + 1.0)
    # The CSV twin holds one row per finding, the page shows every section.
    assert len(data["items"]) == sum(data["counts"].values())
    html = client.get(f"/review?week={now.date().isoformat()}").get_data(as_text=True)
    for label in SECTIONS.values():
        assert label in html
    assert "RS-501" in html and "overhaul" in html and "oil temperature" in html


def test_lab_days_waiting_agree_between_sentence_and_table(client, demo_db):
    with demo_db.sessions() as s:
        machine = s.scalar(select(Machine).where(Machine.name == "press-2"))
    sampled = utcnow() - timedelta(days=17, hours=3)
    assert client.post("/register/sample/new", data={"machine_id": str(machine.id),
                                                     "sampled_at": sampled.strftime("%Y-%m-%dT%H:%M"),
                                                     "lab_ref": "invented-078"}).status_code == 302
    data = client.get("/review.json").get_json()
    (late,) = [s for s in data["lab_late"] if s["lab_ref"] == "invented-078"]
    # 17 days and 3 hours before now: 17 whole days, in the table and in the sentence alike.
    assert late["days_waiting"] == 17
    assert "has waited 17 days for its lab result (late after 14 days)." in late["sentence"]
    html = client.get("/review").get_data(as_text=True)
    assert late["sentence"] in html
    # The analysis of the pumps on press-2 says the same.
    reasons = [r for p in late["pumps"] for c in data["status_changes"] + data["reason_changes"] if c["pump"] == p
               for r in c["reasons"] if "invented" not in r and "has waited" in r]
    assert reasons and all("has waited 17 days" in r for r in reasons)


def test_status_changes_show_no_last_reading_date_as_a_limit_date_nor_a_far_date(client, demo_db):
    """A pump past its limit has no date ahead: its stored limit_date is its last reading's, which the other pages
    never show as its limit date (they show when its trend crossed, under Limits crossed here). A date more than
    10 years ahead is 'beyond 10 years', as on the service list and the plan (fleet.horizon)."""
    today = utcnow().date()
    far, near = (today + timedelta(days=365 * 12)).isoformat(), (today + timedelta(days=60)).isoformat()
    last_reading = (today - timedelta(days=1)).isoformat()
    with demo_db.sessions.begin() as s:
        s.execute(delete(StatusChange))
        pumps = s.scalars(select(Pump.id).order_by(Pump.serial).limit(3)).all()
        now = utcnow().replace(tzinfo=None) - timedelta(hours=1)
        changes = zip(pumps, ("past_limit", "watch", "due_soon"), ("due_soon", "healthy", "watch"),
                      (last_reading, far, near), strict=True)
        for pump_id, status, previous, when in changes:
            s.add(StatusChange(pump_id=pump_id, at=now, status=status, previous_status=previous, reasons=["r"],
                               new_reasons=[], eta_v_ref=0.85, hours_to_limit=100.0, limit_date=when))
    data = client.get("/review.json").get_json()
    assert sorted(c["limit_date"] for c in data["status_changes"]) == sorted([last_reading, far, near])  # kept
    html = client.get("/review").get_data(as_text=True)
    changes = html.split('id="s-status_change"')[1].split("</section>")[0]
    assert last_reading not in changes and far not in changes
    assert "beyond 10 years" in changes and near in changes and 'href="#s-limit_crossed"' in changes


def test_a_new_reason_that_sends_someone_to_the_pump_carries_the_caution(client, demo_db):
    """As on the service list and in `fleet review`: a reason saying 'check the pump now' comes with the caution
    before anyone opens the circuit (fleet.safety), and names the pump with a link to its page."""
    from markupsafe import escape

    from fleet.safety import CHECK_NOW
    from fleet.safety import CHECK_NOW_CAUTION as caution

    caution = str(escape(caution))
    urgent = f"Case drain jumped to 2.2 times the median of this interval's earlier readings: {CHECK_NOW}."
    calm = "Volumetric efficiency at reference 91.7 %; no limit expected within 12 weeks."
    with demo_db.sessions.begin() as s:
        s.execute(delete(StatusChange))
        first, second = s.execute(select(Pump.id, Pump.serial).order_by(Pump.serial).limit(2)).all()
        at = utcnow().replace(tzinfo=None) - timedelta(hours=1)
        for (pump_id, _), reason in ((first, urgent), (second, calm)):
            s.add(StatusChange(pump_id=pump_id, at=at, status="watch", previous_status="watch", reasons=[reason],
                               new_reasons=[reason], eta_v_ref=0.9, hours_to_limit=None, limit_date=None))
    html = client.get("/review").get_data(as_text=True)
    section = html.split('id="s-new_reason"')[1].split("</section>")[0]
    assert section.count(caution) == 1
    urgent_item, calm_item = section.split("<li>")[1:]
    assert caution in urgent_item and f'href="/pumps/{first[1]}#caution"' in urgent_item
    assert caution not in calm_item and f'href="/pumps/{second[1]}"' in calm_item
