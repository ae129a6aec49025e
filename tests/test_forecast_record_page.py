"""The forecast record end to end: snapshots kept by the analysis store, intervals' ends, the page and its twins,
and `fleet forecasts`. The demo plant is invented; the constructed cases are checked by calendar arithmetic."""

import csv
import io
import json
from datetime import datetime, timedelta

import pandas as pd
import pytest
from click.testing import CliRunner
from sqlalchemy import delete, func, select

from fleet.cli import main
from fleet.db.models import ForecastSnapshot, MaintenanceEvent, Pump
from fleet.services.analysis import refresh_analysis
from fleet.services.analysis.snapshots import keep_forecasts
from fleet.services.pages.forecasts import ROW_COLUMNS, SUMMARY_COLUMNS, forecast_record_page, score

PAGE_KEYS = {"leads", "lead_days", "summary", "forecasts", "intervals_ended", "snapshots", "pumps_with_snapshots",
             "first_snapshot_at", "outcome_words"}
LOBE = "RS-701"  # invented demo plant: a lobe pump on the lube skid, healthy


def _record(pump_id, **changes) -> dict:
    record = {"pump_id": pump_id, "interval_no": 1, "slip_enough_data": True, "drain_enough_data": False,
              "governing_limit": "eta_v", "hours_to_limit": 4000.0, "hours_to_limit_low": 3000.0,
              "hours_to_limit_high": 5500.0, "limit_date": "2031-03-01", "limit_date_low": "2030-11-01",
              "limit_date_high": "2031-08-01", "crossed_date": None}
    return {**record, **changes}


def _rows(session, pump_id):
    return session.scalars(select(ForecastSnapshot).where(ForecastSnapshot.pump_id == pump_id)
                           .order_by(ForecastSnapshot.made_at)).all()


def test_the_store_keeps_a_forecast_when_it_moves_at_most_once_a_day(demo_db):
    with demo_db.sessions() as session, session.begin():
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == LOBE))
        session.execute(delete(ForecastSnapshot).where(ForecastSnapshot.pump_id == pump_id))
        day = datetime(2030, 1, 10, 8, 0)
        assert keep_forecasts(session, [_record(pump_id)], day) == 1  # the first forecast
        assert keep_forecasts(session, [_record(pump_id, hours_to_limit=3990.0)], day + timedelta(hours=2)) == 0
        moved = _record(pump_id, limit_date="2031-03-05")
        assert keep_forecasts(session, [moved], day + timedelta(hours=6)) == 1  # same day: replaces that day's
        rows = _rows(session, pump_id)
        assert len(rows) == 1 and rows[0].limit_date == "2031-03-05" and rows[0].made_at == day + timedelta(hours=6)
        assert keep_forecasts(session, [moved], day + timedelta(days=1)) == 0  # unchanged next day: nothing
        assert keep_forecasts(session, [_record(pump_id, limit_date_high=None)], day + timedelta(days=2)) == 1
        assert keep_forecasts(session, [_record(pump_id, interval_no=2)], day - timedelta(days=5)) == 0  # older
        past = _record(pump_id, crossed_date="2030-01-01", crossed_date_low="2029-12-20",
                       crossed_date_high="2030-01-09", crossed_limit="case_drain")
        assert keep_forecasts(session, [past], day + timedelta(days=3)) == 1
        rows = _rows(session, pump_id)
        assert len(rows) == 3 and rows[1].limit_date_high is None
        assert (rows[2].past_limit, rows[2].governing_limit, rows[2].limit_date, rows[2].limit_date_low,
                rows[2].limit_date_high) == (True, "case_drain", "2030-01-01", "2029-12-20", "2030-01-09")


def test_an_analysis_of_unchanged_data_keeps_no_new_snapshot(demo_db):
    with demo_db.sessions() as session, session.begin():
        before = session.scalar(select(func.count(ForecastSnapshot.id)))
        refresh_analysis(session)  # the same data the demo's last analysis saw: no forecast moved
        assert session.scalar(select(func.count(ForecastSnapshot.id))) == before
        assert before >= 41 * 12  # the demo's monthly replays kept a history for every pump


def test_a_forecast_six_months_before_an_overhaul_on_its_date_scores_zero_and_holds(demo_db):
    """Made 2030-01-01 for 2030-07-02 (band June to August); the overhaul came on 2030-07-02, 182 days later."""
    with demo_db.sessions() as session, session.begin():
        pump_id = session.scalar(select(Pump.id).where(Pump.serial == LOBE))
        keep_forecasts(session, [_record(pump_id, limit_date="2030-07-02", limit_date_low="2030-06-01",
                                         limit_date_high="2030-08-01")], datetime(2030, 1, 1, 9, 0))
        session.add(MaintenanceEvent(pump_id=pump_id, date=datetime(2030, 7, 2, 9, 0), hours=90_000.0,
                                     kind="overhaul", note="invented overhaul for the test"))
        session.flush()
        data = forecast_record_page(session)
        session.rollback()
    mine = {r["lead"]: r for r in data["forecasts"] if r["pump"] == LOBE}
    six = mine["6 months"]
    assert (six["how"], six["ended_at"], six["forecast_made_at"], six["limit_date"]) == (
        "overhaul", "2030-07-02", "2030-01-01", "2030-07-02")
    assert six["error_days"] == 0 and six["relative_error"] == 0 and six["band_held"] and not six["no_forecast"]
    assert six["lead_days"] == 182
    # 3 months before, the same forecast still stood (nothing moved it): also on the day.
    assert mine["3 months"]["forecast_made_at"] == "2030-01-01" and mine["3 months"]["error_days"] == 0


def test_an_interval_whose_readings_crossed_a_limit_ends_at_the_crossing_not_at_the_later_overhaul():
    snapshots = pd.DataFrame({
        "pump_id": [7, 7, 7],
        "made_at": pd.to_datetime(["2025-01-01", "2025-04-01", "2025-07-10"]),
        "trend": [True, True, True], "past_limit": [False, False, True],
        "limit_date": pd.to_datetime(["2025-06-20", "2025-07-15", "2025-07-01"]),
        "limit_date_low": pd.to_datetime(["2025-05-01", "2025-06-20", "2025-06-25"]),
        "limit_date_high": pd.to_datetime(["2025-08-01", "2025-08-01", "2025-07-05"]),
    })
    resets = pd.DataFrame({"pump_id": [7], "date": pd.to_datetime(["2025-08-15"]), "kind": ["overhaul"]})
    rows, summary, ended = score(snapshots, resets, pd.Series({7: "vane"}))
    assert ended == 1
    rows = rows.set_index("lead")
    # Ended 2025-07-01 (the crossing). 3 months before (2025-04-01) the forecast of that day said 07-15: 14 late.
    assert rows.loc["3 months", "how"] == "limit_crossed"
    assert rows.loc["3 months", "ended_at"] == pd.Timestamp("2025-07-01")
    assert rows.loc["3 months", "error_days"] == 14 and rows.loc["3 months", "band_held"]
    # 6 months before (2024-12-31) no forecast stood yet; 2025-01-01's is a day later and not the one standing.
    assert "6 months" not in rows.index
    assert summary.set_index(["kind", "lead"]).loc[("vane", "3 months"), "outcomes"] == 1


def test_page_and_twins_on_the_demo(client):
    html = client.get("/forecasts")
    assert html.status_code == 200
    text = html.get_data(as_text=True)
    assert 'href="/forecasts"' in text and "Forecast record" in text  # in the main navigation
    assert 'id="forecast-record-chart"' in text and "/assets/plotly.min.js" in text
    data = client.get("/forecasts.json").get_json()
    assert set(data) == PAGE_KEYS
    assert data["leads"] == ["3 months", "6 months", "12 months"]
    assert all(set(row) == set(SUMMARY_COLUMNS) for row in data["summary"])
    assert all(set(row) == set(ROW_COLUMNS) for row in data["forecasts"])
    scored = {r["kind"] for r in data["forecasts"] if r["error_days"] is not None}
    assert len(scored) >= 3  # the invented demo has scored forecasts for several kinds
    # The demo's overhauled pumps crossed their limit before the fitter came: their intervals end at the crossing.
    overhaul = max(e["date"] for e in client.get("/pumps/EY-204.json").get_json()["events"] if e["kind"] == "overhaul")
    ended = {r["ended_at"] for r in data["forecasts"] if r["pump"] == "EY-204"}
    assert len(ended) == 1 and ended.pop() < overhaul
    assert {r["how"] for r in data["forecasts"]} == {"limit_crossed"}
    for row in data["forecasts"]:
        assert row["forecast_made_at"] <= row["standing_at"] < row["ended_at"]
        assert row["lead_days"] == data["lead_days"][row["lead"]]
    for pump in {r["pump"] for r in data["forecasts"]}:
        assert f'href="/pumps/{pump}"' in text
    response = client.get("/forecasts.csv")
    assert response.mimetype == "text/csv" and 'filename="forecast-record.csv"' in response.headers[
        "Content-Disposition"]
    rows = list(csv.reader(io.StringIO(response.get_data(as_text=True))))
    assert rows[0] == list(SUMMARY_COLUMNS) and len(rows) - 1 == len(data["summary"])


def test_summary_agrees_with_its_rows(client):
    data = client.get("/forecasts.json").get_json()
    rows = pd.DataFrame(data["forecasts"])
    for s in data["summary"]:
        mine = rows[(rows["kind"] == s["kind"]) & (rows["lead"] == s["lead"])]
        dated = mine[~mine["no_forecast"].astype(bool)]
        assert s["outcomes"] == len(mine)
        assert s["median_error_days"] == pytest.approx(dated["error_days"].median())
        assert s["band_held"] == pytest.approx(dated["band_held"].astype(bool).mean())


def test_the_command_prints_the_same_record(demo_db, monkeypatch):
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    result = CliRunner().invoke(main, ["forecasts", "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    with demo_db.sessions() as session:
        assert data == json.loads(json.dumps(forecast_record_page(session)))
    text = CliRunner().invoke(main, ["forecasts"])
    assert text.exit_code == 0 and "band held" in text.output
    for s in data["summary"]:
        assert s["kind_label"] in text.output


def test_an_empty_database_has_an_empty_record(db):
    with db.sessions() as session:
        data = forecast_record_page(session)
    assert data["summary"] == [] and data["forecasts"] == [] and data["snapshots"] == 0
