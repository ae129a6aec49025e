"""CSV import and export: units, whole-or-nothing, row-numbered problems, round trips."""

import numpy as np
import pandas as pd
import pint
import pytest
from click.testing import CliRunner
from sqlalchemy import func, select

from fleet.cli import main
from fleet.db.models import FlowTestPoint, Installation, MaintenanceEvent, OilSample, Pump, Reading
from fleet.io.parse import ImportRejected
from fleet.services.transfer.exporting import export_table
from fleet.services.transfer.importing import import_file, import_table
from tests.conftest import DATA

ureg = pint.UnitRegistry()

SI_READINGS = pd.DataFrame({
    "pump": ["T-101", "T-101", "T-102", "T-103"],
    "taken_at": ["2024-03-01 08:00", "2024-04-01 08:30", "2024-03-01 09:00", "2024-03-01T10:15:00"],
    "hours": [1000.0, 1500.0, 900.0, 700.0],
    "outlet_pressure": [230.0, 240.0, 180.0, 150.0],
    "speed": [1490.0, 1495.0, 1480.0, 1440.0],
    "outlet_flow": [63.1, 62.8, 21.5, 52.0],
    "case_drain_flow": [1.1, 1.2, np.nan, np.nan],
    "oil_temp": [48.0, 55.5, 51.0, 44.0],
})


def _text(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.astype(object).where(frame.notna(), "").astype(str)


def _import_pumps(db):
    with db.sessions.begin() as session:
        return import_file(session, "pumps", DATA / "pumps_small.csv")


def test_pumps_import_builds_the_register(db):
    result = _import_pumps(db)
    assert (result.created, result.updated) == (3, 0)
    with db.sessions() as session:
        pump = session.scalar(select(Pump).where(Pump.serial == "T-102"))
        assert pump.kind == "external_gear" and pump.eta_v_limit == 0.82 and pump.case_drain is False
        assert pump.max_flow == pytest.approx(24.0)  # derived: 16 cm3/rev x 1500 rpm / 1000
        assert pump.installations[0].position.machine.oil.viscosity_40 == 46
    # Importing the same file again updates, it does not duplicate.
    again = _import_pumps(db)
    assert (again.created, again.updated) == (0, 3)


def test_us_unit_readings_store_the_pint_conversion(db):
    _import_pumps(db)
    us = SI_READINGS.copy()
    # Convert with pint (the reference library) to the US units a site might use, and tag the headers.
    us["outlet_pressure"] = ureg.Quantity(SI_READINGS["outlet_pressure"].to_numpy(), "bar").to("psi").magnitude
    us["outlet_flow"] = ureg.Quantity(SI_READINGS["outlet_flow"].to_numpy(), "L/min").to("gal/min").magnitude
    us["case_drain_flow"] = ureg.Quantity(SI_READINGS["case_drain_flow"].to_numpy(), "L/min").to("gal/min").magnitude
    us["oil_temp"] = ureg.Quantity(SI_READINGS["oil_temp"].to_numpy(), ureg.degC).to(ureg.degF).magnitude
    us = us.rename(columns={"outlet_pressure": "outlet_pressure [psi]", "outlet_flow": "outlet_flow [gal/min]",
                            "case_drain_flow": "case_drain_flow [gpm]", "oil_temp": "oil_temp [degF]"})
    with db.sessions.begin() as session:
        import_table(session, "readings", _text(us))
    with db.sessions() as session:
        stored = pd.DataFrame(session.execute(
            select(Reading.pressure_bar, Reading.flow_lpm, Reading.drain_lpm, Reading.temp_c).order_by(Reading.id)
        ).all())
    assert np.allclose(stored["pressure_bar"], SI_READINGS["outlet_pressure"], rtol=1e-12)
    assert np.allclose(stored["flow_lpm"], SI_READINGS["outlet_flow"], rtol=1e-12)
    assert np.allclose(stored["drain_lpm"], SI_READINGS["case_drain_flow"], rtol=1e-12, equal_nan=True)
    assert np.allclose(stored["temp_c"], SI_READINGS["oil_temp"], rtol=1e-12)


def test_a_file_with_bad_rows_writes_nothing_and_names_each_row(db):
    _import_pumps(db)
    bad = _text(SI_READINGS).rename(columns={"case_drain_flow": "case_drain_flow [bar]"})
    bad.loc[1, "outlet_flow"] = "-3"  # row 3: a negative flow
    bad.loc[2, "taken_at"] = "last tuesday"  # row 4: a date that cannot be parsed
    bad.loc[3, "pump"] = "NO-SUCH-PUMP"  # row 5: an unknown pump
    with db.sessions.begin() as session, pytest.raises(ImportRejected) as info:
        import_table(session, "readings", bad)
    found = {(p.row, p.column) for p in info.value.problems}
    assert found == {(1, "case_drain_flow [bar]"), (3, "outlet_flow"), (4, "taken_at"), (5, "pump")}
    report = info.value.report()
    assert "row 1, column 'case_drain_flow [bar]': unit 'bar' is not a unit of flow" in report
    assert "row 3, column 'outlet_flow': -3 is below the lowest allowed value (0 L/min)" in report
    assert "row 4, column 'taken_at': 'last tuesday' is not a date" in report
    assert "row 5, column 'pump': no pump 'NO-SUCH-PUMP' in the register" in report
    with db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == 0


def test_cli_import_reports_every_bad_row_and_exits_non_zero(db, cli_env, tmp_path):
    runner = CliRunner()
    assert runner.invoke(main, ["import", "pumps", str(DATA / "pumps_small.csv"), "--no-analysis"]).exit_code == 0
    bad = _text(SI_READINGS)
    bad.loc[0, "speed"] = "fast"
    bad.loc[2, "oil_temp"] = ""
    path = tmp_path / "bad.csv"
    bad.to_csv(path, index=False)
    result = runner.invoke(main, ["import", "readings", str(path), "--no-analysis"])
    assert result.exit_code == 1
    assert "nothing was imported" in result.stderr
    assert "row 2, column 'speed': 'fast' is not a number" in result.stderr
    assert "row 4, column 'oil_temp': a value is required" in result.stderr
    with db.sessions() as session:
        assert session.scalar(select(func.count()).select_from(Reading)) == 0


def test_missing_required_column_and_duplicate_reading(db):
    _import_pumps(db)
    with db.sessions.begin() as session, pytest.raises(ImportRejected, match="problem") as info:
        import_table(session, "readings", _text(SI_READINGS.drop(columns=["hours"])))
    assert [str(p) for p in info.value.problems] == ["row 1, column 'hours': required column is missing"]
    with db.sessions.begin() as session:
        import_table(session, "readings", _text(SI_READINGS))
    with db.sessions.begin() as session, pytest.raises(ImportRejected) as info:
        import_table(session, "readings", _text(SI_READINGS.iloc[:1]))
    assert "is already stored" in info.value.report()


def _load_everything(db):
    _import_pumps(db)
    with db.sessions.begin() as session:
        import_table(session, "readings", _text(SI_READINGS))
        import_table(session, "flowtests", pd.DataFrame({
            "pump": ["T-101", "T-101"], "taken_at": ["2024-04-01 08:30"] * 2,
            "outlet_pressure [psi]": ["1500", "3000"], "outlet_flow": ["63.9", "63.2"]}))
        import_table(session, "installations", pd.DataFrame({
            "pump": ["T-102"], "site": ["Test Works (invented)"], "machine": ["Power unit 2"],
            "position": ["spare"], "installed_at": ["2024-03-15"], "hours": ["1100"]}))
        import_table(session, "samples", pd.DataFrame({
            "machine": ["Press 1", "Press 1", "Power unit 2"],
            "sampled_at": ["2024-02-01", "2024-03-20", "2024-03-01"],
            "reported_at": ["2024-02-09", "", "2024-03-10"],
            "iso4406": ["18/16/13", "", ""],
            # ISO 4406 worked example: 3000/500/7 particles per mL -> 19/16/10
            "count_4 [1/mL]": ["", "", "3000"], "count_6 [1/mL]": ["", "", "500"], "count_14 [1/mL]": ["", "", "7"],
            "water [ppm]": ["120", "", "300"]}))
        import_table(session, "events", pd.DataFrame({
            "pump": ["T-101", "T-103"], "date": ["2024-02-15", "2024-03-05"], "hours": ["1200", "720"],
            "kind": ["overhaul", "filter change"], "cost": ["4200", "80"], "failure_mode": ["internal_leakage", ""],
            "note": ["invented: scored port plate", ""]}))


def test_samples_get_codes_from_counts_and_installations_keep_history(db):
    _load_everything(db)
    with db.sessions() as session:
        sample = session.scalar(select(OilSample).where(OilSample.code_14 == 10))
        assert (sample.code_4, sample.code_6, sample.code_14) == (19, 16, 10)
        waiting = session.scalar(select(OilSample).where(OilSample.reported_at.is_(None)))
        assert waiting.code_6 is None
        stays = session.scalars(select(Installation).join(Pump).where(Pump.serial == "T-102")
                                .order_by(Installation.installed_at)).all()
        # The move closed the stay in 'pilot' at the move's time and hour meter; 'spare' is open.
        assert [(s.position.name, s.removed_at is None) for s in stays] == [("pilot", False), ("spare", True)]
        assert (str(stays[0].removed_at), stays[0].removed_hours) == ("2024-03-15 00:00:00", 1100.0)
        assert session.scalar(select(func.count()).select_from(FlowTestPoint)) == 2
        assert session.scalar(select(MaintenanceEvent.kind).where(MaintenanceEvent.cost == 80)) == "filter_change"


def test_export_import_round_trips(db, empty_database_url, tmp_path):
    from fleet.db import migrate
    from fleet.db.engine import make_engine, make_session_factory
    from fleet.io.columns import LOAD_ORDER

    _load_everything(db)
    files = {}
    with db.sessions() as session:
        for kind in LOAD_ORDER:
            files[kind] = tmp_path / f"{kind}.csv"
            export_table(session, kind).to_csv(files[kind], index=False)
    assert "outlet_pressure [bar]" in files["readings"].read_text().splitlines()[0]
    if db.url == empty_database_url:  # one server database: round-trip into a second SQLite file instead
        empty_database_url = f"sqlite:///{tmp_path / 'second.sqlite'}"
    engine = make_engine(empty_database_url)
    migrate.upgrade(engine)
    second = make_session_factory(engine)
    with second.begin() as session:
        for kind in LOAD_ORDER:
            import_file(session, kind, files[kind])
    with second() as session:
        for kind in LOAD_ORDER:
            again = tmp_path / f"{kind}-again.csv"
            export_table(session, kind).to_csv(again, index=False)
            assert again.read_text() == files[kind].read_text(), kind
    engine.dispose()
