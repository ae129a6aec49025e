"""The check before every page that no stored analysis is stale (refresh.any_stale: four totals over indexes)
against the pump-by-pump look it stands in for (refresh.stale_pumps), on the invented demo plant: after real writes,
and over random states of the stored and current data versions."""

import random

from sqlalchemy import delete, insert, select

from fleet.db.models import AnalysisResult, Pump, PumpDataVersion
from fleet.services.analysis import any_stale, bring_up_to_date, stale_pumps
from fleet.services.writes.policy import bump_versions  # what every write runs for the pumps it touches


def _agree(session) -> bool:
    stale = stale_pumps(session)
    assert any_stale(session) == bool(stale), stale
    return bool(stale)


def test_the_totals_agree_with_the_pump_by_pump_look_after_writes(demo_db):
    with demo_db.sessions.begin() as session:
        assert not _agree(session)  # the demo plant is analysed as built
        first = session.scalar(select(Pump.id).order_by(Pump.id))
        bump_versions(session, [first])  # a write to one pump
        assert _agree(session)
    bring_up_to_date(demo_db.sessions)
    with demo_db.sessions.begin() as session:
        assert not _agree(session)
        session.execute(delete(AnalysisResult).where(AnalysisResult.pump_id == first))  # an analysis missing
        assert _agree(session)
    bring_up_to_date(demo_db.sessions)
    with demo_db.sessions.begin() as session:
        assert not _agree(session)
        session.add(Pump(serial="NEW-1", kind="external_gear", displacement_cc=10.0, rated_speed_rpm=1450,
                         rated_pressure_bar=200.0))  # registered since the last analysis
        session.flush()
        assert _agree(session)


def test_the_totals_agree_with_the_pump_by_pump_look_over_random_versions(demo_db):
    # Each pump: a version row or none (version 0), a stored analysis or none, its stored version at most the
    # pump's (what compute.data_versions and the store keep true). Half the states are all caught up.
    rng = random.Random(2026)
    with demo_db.sessions.begin() as session:
        pumps = list(session.scalars(select(Pump.id).order_by(Pump.id)))
        kept = {row.pump_id: row for row in session.execute(select(AnalysisResult.__table__))}
        caught_up = stale = 0
        for _ in range(40):
            session.execute(delete(PumpDataVersion))
            session.execute(delete(AnalysisResult))
            behind = rng.random() < 0.5
            for pump_id in pumps:
                version = rng.choice([None, 0, 1, 2, 5])
                if version is not None:
                    session.execute(insert(PumpDataVersion).values(pump_id=pump_id, version=version))
                analysed = not behind or rng.random() < 0.9
                if analysed:
                    current = version or 0
                    stored = current if not behind else rng.randint(max(current - 2, 0), current)
                    session.execute(insert(AnalysisResult.__table__).values(
                        {**kept[pump_id]._asdict(), "data_version": stored}))
            if _agree(session):
                stale += 1
            else:
                caught_up += 1
        assert caught_up >= 10 and stale >= 10
        session.rollback()
