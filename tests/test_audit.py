"""Audit trail: edits and deletions keep the previous values, who and when; an engineer restores a deletion."""

import pytest
from sqlalchemy import func, select

from fleet.db import audit
from fleet.db.models import AnalysisResult, AuditRecord, FlowTestPoint, MaintenanceEvent, OilSample, Pump, Reading
from fleet.services.pages.trash import TRASH_COLUMNS
from fleet.timeutil import utcnow


def _records(session, action=None):
    query = select(AuditRecord).order_by(AuditRecord.id)
    if action:
        query = query.where(AuditRecord.action == action)
    return list(session.scalars(query))


def _reading_with_points(session) -> Reading:
    point_reading = session.scalar(select(FlowTestPoint.reading_id).limit(1))
    return session.get(Reading, point_reading)


def test_an_edit_keeps_the_previous_values_who_and_when(demo_db):
    with audit.acting_as("web:alice"), demo_db.sessions.begin() as session:
        reading = session.scalar(select(Reading).order_by(Reading.id).limit(1))
        old_temp, old_taken_at, reading_id = reading.temp_c, reading.taken_at, reading.id
        reading.temp_c = old_temp + 7.5
        reading.note = "gauge re-read"
    with demo_db.sessions() as session:
        (record,) = _records(session, "update")
        assert (record.table_name, record.row_id, record.actor) == ("reading", reading_id, "web:alice")
        assert record.before["temp_c"] == old_temp and record.after["temp_c"] == old_temp + 7.5
        assert record.before["taken_at"] == old_taken_at.isoformat()  # JSON-ready
        assert record.after["note"] == "gauge re-read"
        assert abs((record.at - utcnow()).total_seconds()) < 60


def test_setting_a_value_to_what_it_was_writes_no_record(demo_db):
    with demo_db.sessions.begin() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "EY-101"))
        pump.rated_speed_rpm = pump.rated_speed_rpm
    with demo_db.sessions() as session:
        assert _records(session) == []


def test_an_expired_row_edited_without_loading_still_records_its_old_value(demo_db):
    with demo_db.sessions.begin() as session:
        event = session.scalar(select(MaintenanceEvent).order_by(MaintenanceEvent.id).limit(1))
        old_cost = event.cost
        session.expire(event)  # the next set happens before any load
        event.cost = 12345.0
    with demo_db.sessions() as session:
        (record,) = _records(session, "update")
        assert record.before["cost"] == old_cost and record.after["cost"] == 12345.0


def test_the_command_line_acts_as_its_os_user_by_default():
    assert audit.current_actor().startswith("cli:")
    with audit.acting_as("web:bob"):
        assert audit.current_actor() == "web:bob"
    assert audit.current_actor().startswith("cli:")


def test_deleting_a_reading_keeps_it_and_its_flow_points_and_restore_brings_back_the_same_ids(demo_db):
    with demo_db.sessions() as session:
        reading = _reading_with_points(session)
        reading_id, pump_id = reading.id, reading.pump_id
        before_columns = audit.row_values(reading)
        point_ids = sorted(p.id for p in reading.flow_points)
        counts = (session.scalar(select(func.count()).select_from(Reading)),
                  session.scalar(select(func.count()).select_from(FlowTestPoint)))
    assert point_ids, "the demo holds multi-point flow tests"
    with audit.acting_as("web:erin"), demo_db.sessions.begin() as session:
        session.delete(session.get(Reading, reading_id))
    with demo_db.sessions() as session:
        (record,) = _records(session)
        assert (record.action, record.table_name, record.row_id, record.actor) == \
            ("delete", "reading", reading_id, "web:erin")
        assert sorted(p["id"] for p in record.before["flow_points"]) == point_ids
        assert session.get(Reading, reading_id) is None
        assert [r.id for r in audit.deleted_records(session)] == [record.id]
    with audit.acting_as("web:erin"), demo_db.sessions.begin() as session:
        audit.restore(session, record.id)
    with demo_db.sessions() as session:
        restored = session.get(Reading, reading_id)
        assert restored is not None and restored.pump_id == pump_id
        assert audit.row_values(restored) == before_columns
        assert sorted(p.id for p in restored.flow_points) == point_ids
        assert (session.scalar(select(func.count()).select_from(Reading)),
                session.scalar(select(func.count()).select_from(FlowTestPoint))) == counts
        assert audit.deleted_records(session) == []
        first = session.get(AuditRecord, record.id)
        assert first.restored_by == "web:erin" and first.restored_at is not None
        assert [r.action for r in _records(session)] == ["delete", "restore"]


def test_a_record_restores_once_only(demo_db):
    with demo_db.sessions.begin() as session:
        sample = session.scalar(select(OilSample).order_by(OilSample.id).limit(1))
        session.delete(sample)
    with demo_db.sessions.begin() as session:
        record_id = _records(session, "delete")[0].id
        audit.restore(session, record_id)
    with demo_db.sessions() as session, pytest.raises(audit.RestoreRefused, match="already restored"):
        audit.restore(session, record_id)


def test_restore_is_refused_when_the_place_was_taken_again(demo_db):
    with demo_db.sessions.begin() as session:
        event = session.scalar(select(MaintenanceEvent).order_by(MaintenanceEvent.id).limit(1))
        values = audit.row_values(event)
        session.delete(event)
    with demo_db.sessions.begin() as session:  # someone enters the same row again, with the same id
        session.add(MaintenanceEvent(**audit.column_values(MaintenanceEvent, values)))
    with demo_db.sessions() as session:
        record_id = _records(session, "delete")[0].id
        with pytest.raises(audit.RestoreRefused, match="cannot go back"):
            audit.restore(session, record_id)
        session.rollback()
        assert session.get(AuditRecord, record_id).restored_at is None


def test_the_audit_record_and_the_change_share_one_transaction(demo_db):
    with demo_db.sessions() as session:
        reading = session.scalar(select(Reading).order_by(Reading.id).limit(1))
        reading_id = reading.id
        session.delete(reading)
        session.flush()
        assert len(_records(session)) == 1
        session.rollback()
    with demo_db.sessions() as session:
        assert _records(session) == []
        assert session.get(Reading, reading_id) is not None


def test_an_analysis_refresh_is_not_audited(demo_db):
    from fleet.services.analysis import refresh_analysis

    with demo_db.sessions.begin() as session:
        refresh_analysis(session)
        assert session.scalar(select(func.count()).select_from(AnalysisResult)) > 0
    with demo_db.sessions() as session:
        assert _records(session) == []


# --- through the dashboard ---------------------------------------------------------------------------------

def _a_reading_of(demo_db, serial: str) -> int:
    with demo_db.sessions() as session:
        return session.scalar(select(Reading.id).join(Pump, Pump.id == Reading.pump_id)
                              .where(Pump.serial == serial).order_by(Reading.taken_at.desc()).limit(1))


def test_an_engineer_deletes_a_reading_sees_it_in_the_trash_and_restores_it(client, demo_db):
    reading_id = _a_reading_of(demo_db, "EY-101")  # invented demo pump
    response = client.post(f"/pumps/EY-101/readings/{reading_id}/delete")
    assert response.status_code == 302 and response.headers["Location"].endswith("/pumps/EY-101")
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id) is None
        (record,) = _records(session, "delete")
        assert record.actor == "test-engineer"
    trash = client.get("/trash.json").get_json()["deleted"]
    assert [(row["what"], row["row_id"], row["deleted_by"]) for row in trash] == \
        [("reading", reading_id, "test-engineer")]
    html = client.get("/trash").get_data(as_text=True)
    assert f"reading #{reading_id}" in html and "pump EY-101, taken" in html
    assert 'href="/trash"' in html  # the menu shows Trash to an engineer
    assert client.get("/trash.csv").get_data(as_text=True).splitlines()[0] == ",".join(TRASH_COLUMNS)

    with demo_db.sessions() as session:
        analysed_before = session.get(AnalysisResult, record.before["pump_id"]).computed_at
    assert client.post(f"/trash/{record.id}/restore").status_code == 302
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id) is not None
        assert session.get(AnalysisResult, record.before["pump_id"]).computed_at > analysed_before
    assert client.get("/trash.json").get_json()["deleted"] == []
    again = client.post(f"/trash/{record.id}/restore", headers={"Accept": "application/json"})
    assert again.status_code == 409 and "already restored" in again.get_json()["problems"][0]["reason"]


def test_events_and_samples_are_deleted_through_their_pump(client, demo_db):
    with demo_db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "EY-101"))
        event_id = session.scalar(select(MaintenanceEvent.id).where(MaintenanceEvent.pump_id == pump.id).limit(1))
        machine_ids = {i.position.machine_id for i in pump.installations}
        sample_id = session.scalar(select(OilSample.id).where(OilSample.machine_id.in_(machine_ids)).limit(1))
        other_sample = session.scalar(select(OilSample.id).where(OilSample.machine_id.not_in(machine_ids)).limit(1))
    assert client.post(f"/pumps/EY-101/events/{event_id}/delete").status_code == 302
    assert client.post(f"/pumps/EY-101/samples/{sample_id}/delete").status_code == 302
    assert client.post(f"/pumps/EY-101/samples/{other_sample}/delete").status_code == 404  # not its machine
    assert client.post("/pumps/EY-101/readings/999999/delete").status_code == 404
    with demo_db.sessions() as session:
        assert session.get(MaintenanceEvent, event_id) is None and session.get(OilSample, sample_id) is None
        assert {(r.table_name, r.row_id) for r in _records(session, "delete")} == \
            {("maintenance_event", event_id), ("oil_sample", sample_id)}


@pytest.mark.parametrize("role", ["viewer", "technician"])
def test_deleting_and_restoring_need_an_engineer(anonymous_client, login, demo_db, role):
    reading_id = _a_reading_of(demo_db, "EY-104")
    with demo_db.sessions.begin() as session:
        session.delete(session.scalar(select(OilSample).limit(1)))
    with demo_db.sessions() as session:
        record_id = _records(session, "delete")[0].id
    # without signing in: nothing happens
    assert anonymous_client.post(f"/pumps/EY-104/readings/{reading_id}/delete").status_code in (401, 403)
    client = login(anonymous_client, role)
    assert client.post(f"/pumps/EY-104/readings/{reading_id}/delete").status_code == 403
    assert client.post(f"/trash/{record_id}/restore").status_code == 403
    assert client.get("/trash").status_code == 403
    assert 'href="/trash"' not in client.get("/").get_data(as_text=True)
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id) is not None
        assert session.get(AuditRecord, record_id).restored_at is None


def test_a_delete_without_the_csrf_token_is_refused(client, demo_db):
    reading_id = _a_reading_of(demo_db, "EY-104")
    client.environ_base.pop("HTTP_X_CSRFTOKEN")
    client.application.config["WTF_CSRF_ENABLED"] = True
    assert client.post(f"/pumps/EY-104/readings/{reading_id}/delete").status_code == 403
    with demo_db.sessions() as session:
        assert session.get(Reading, reading_id) is not None
