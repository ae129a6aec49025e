"""Migration 0012 fills the new columns of analyses stored before it from their JSON detail, and leaves their
service order keys empty for the next store to re-rank. The demo plant is invented."""

from sqlalchemy import MetaData, insert, select, update

from fleet.db import migrate
from fleet.db.engine import make_engine


def test_stored_analyses_get_their_prior_columns_from_detail(demo_db, empty_database_url):
    source = MetaData()
    source.reflect(demo_db.engine)
    engine = make_engine(empty_database_url)
    migrate.upgrade(engine, "0011")
    old = MetaData()
    old.reflect(engine)
    old.remove(old.tables["alembic_version"])
    with demo_db.engine.connect() as reader, engine.begin() as writer:
        for table in old.sorted_tables:  # parents before children
            # The rank column, dropped by 0013, is not read here: any whole number will do.
            columns = [c.name for c in table.columns if c.name in source.tables[table.name].c]
            rows = reader.execute(select(*[source.tables[table.name].c[c] for c in columns])).all()
            extra = {"rank": 0} if table.name == "analysis_result" else {}
            if rows:
                writer.execute(insert(table), [{**dict(zip(columns, row, strict=True)), **extra} for row in rows])
        result = old.tables["analysis_result"]
        pump_id, detail = writer.execute(select(result.c.pump_id, result.c.detail).limit(1)).one()
        writer.execute(update(result).where(result.c.pump_id == pump_id).values(detail={
            **detail, "prior_b10_hours": 9100.5, "age_hours": 4321.0, "hours_per_day": 16.0,
            "planning_horizon_weeks": 12}))
        other = writer.scalar(select(result.c.pump_id).where(result.c.pump_id != pump_id).limit(1))
        writer.execute(update(result).where(result.c.pump_id == other).values(detail={
            **detail, "hours_per_day": None, "planning_horizon_weeks": 8}))
    migrate.upgrade(engine, "0012")
    new = MetaData()
    new.reflect(engine)
    result = new.tables["analysis_result"]
    with engine.connect() as connection:
        row = connection.execute(select(result).where(result.c.pump_id == pump_id)).one()
        assert (row.prior_b10_hours, row.age_hours) == (9100.5, 4321.0)
        assert row.planning_horizon_hours == 12 * 7 * 16.0  # weeks x days x hours per day
        assert row.order_key is None
        # No hour-meter history: continuous running, 24 h a day (fleet.trend.status.FALLBACK_HOURS_PER_DAY).
        fallback = connection.scalar(select(result.c.planning_horizon_hours).where(result.c.pump_id == other))
        assert fallback == 8 * 7 * 24.0
    engine.dispose()
