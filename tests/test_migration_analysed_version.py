"""Migration 0014 indexes the stored analyses' data versions (the stale check before every page sums them). Going
back, the older code would read this version's kept fits (without their unweighed members) as broken, so the
downgrade moves every pump's data version on: every stored analysis is then stale, kept until the older code
computes it afresh. The demo plant is invented."""

from alembic import command
from sqlalchemy import func, inspect, select

from fleet.db import migrate
from fleet.db.models import AnalysisResult, Pump
from fleet.services.analysis import any_stale, stale_pumps


def test_the_index_is_there_and_a_downgrade_leaves_every_analysis_stale_and_kept(demo_db):
    indexes = {i["name"] for i in inspect(demo_db.engine).get_indexes("analysis_result")}
    assert "ix_analysis_result_data_version" in indexes
    with demo_db.sessions() as session:
        pumps = set(session.scalars(select(Pump.id)))
        stored = session.scalar(select(func.count()).select_from(AnalysisResult))
        assert not any_stale(session) and stored == len(pumps) > 20
    with demo_db.engine.begin() as connection:
        command.downgrade(migrate.alembic_config(connection), "0013")
    assert "ix_analysis_result_data_version" not in {
        i["name"] for i in inspect(demo_db.engine).get_indexes("analysis_result")}
    with demo_db.sessions() as session:
        assert stale_pumps(session) == pumps  # the older code's own check finds every pump stale
        assert session.scalar(select(func.count()).select_from(AnalysisResult)) == stored  # and nothing lost
    migrate.upgrade(demo_db.engine)
    with demo_db.sessions() as session:
        assert any_stale(session) and stale_pumps(session) == pumps
