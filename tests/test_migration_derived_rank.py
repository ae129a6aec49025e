"""Migration 0013 drops the stored rank and prior figures, which are then derived when read: a database upgraded
from 0012 shows the same ranks and prior figures as it stored, and a downgrade gives the ranks (and the kinds' B10)
back from the keys. The demo plant is invented."""

import math

from alembic import command
from sqlalchemy import MetaData, insert, select

from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.services.analysis import analysis_records


def _stored_at_0012(demo_db, engine) -> dict[str, dict]:
    """The demo plant copied into ``engine`` at revision 0012, its rank and prior columns filled with what the
    demo's records show; returns those records by serial."""
    with demo_db.sessions() as session:
        shown = {r["pump"]: r for r in analysis_records(session)}
    source = MetaData()
    source.reflect(demo_db.engine)
    migrate.upgrade(engine, "0012")
    old = MetaData()
    old.reflect(engine)
    old.remove(old.tables["alembic_version"])
    with demo_db.engine.connect() as reader, engine.begin() as writer:
        serial_of = dict(reader.execute(select(source.tables["pump"].c.id, source.tables["pump"].c.serial)).all())
        for table in old.sorted_tables:  # parents before children
            columns = [c.name for c in table.columns if c.name in source.tables[table.name].c]
            rows = [dict(zip(columns, row, strict=True)) for row in
                    reader.execute(select(*[source.tables[table.name].c[c] for c in columns]))]
            if table.name == "analysis_result":
                for row in rows:
                    record = shown[serial_of[row["pump_id"]]]
                    row.update({k: record[k] for k in ("rank", "prior_hours_to_overhaul", "prior_b10_hours")})
            if rows:
                writer.execute(insert(table), rows)
    return shown


def _close(a, b) -> bool:
    return a is None and b is None or a is not None and b is not None and math.isclose(a, b, rel_tol=1e-12)


def test_upgrade_keeps_every_rank_and_prior_figure_and_downgrade_gives_them_back(demo_db, empty_database_url):
    engine = make_engine(empty_database_url)
    shown = _stored_at_0012(demo_db, engine)
    assert any(r["prior_hours_to_overhaul"] is not None for r in shown.values())
    migrate.upgrade(engine)
    with make_session_factory(engine)() as session:
        after = {r["pump"]: r for r in analysis_records(session)}
    assert {p: r["rank"] for p, r in after.items()} == {p: r["rank"] for p, r in shown.items()}
    for field in ("prior_hours_to_overhaul", "prior_b10_hours"):
        assert all(_close(after[p][field], shown[p][field]) for p in shown), field
    with engine.begin() as connection:
        command.downgrade(migrate.alembic_config(connection), "0012")
    back = MetaData()
    back.reflect(engine)
    result, pump = back.tables["analysis_result"], back.tables["pump"]
    with engine.connect() as connection:
        rows = connection.execute(select(pump.c.serial, result.c.rank, result.c.prior_b10_hours)
                                  .join(pump, pump.c.id == result.c.pump_id)).all()
    assert {serial: rank for serial, rank, _ in rows} == {p: r["rank"] for p, r in shown.items()}
    assert all(_close(b10, shown[serial]["prior_b10_hours"]) for serial, _, b10 in rows)
    engine.dispose()
