"""The `fleet` command as a user runs it: init, demo, import, analyze (table and JSON contract), export, serve."""

import datetime as dt
import json
import os
import re
import socket
import subprocess
import sys
import time
import urllib.request

import pandas as pd
import pint
import pytest
from click.testing import CliRunner

from fleet.cli import main
from fleet.db import migrate
from fleet.db.engine import make_engine, make_session_factory
from fleet.io.columns import LOAD_ORDER
from fleet.services.analysis import analysis_records, refresh_analysis
from fleet.services.transfer.exporting import export_table
from fleet.services.transfer.importing import import_table
from seed_demo import _as_text, build_demo
from seed_demo.plant import generate

CONTRACT = ("pump", "status", "reasons", "eta_v_ref", "eta_v_decline_per_1000h", "drain_pct_ref", "hours_to_limit",
            "hours_to_limit_low", "hours_to_limit_high", "limit_date", "governing_limit", "prior_hours_to_overhaul",
            "energy_cost_per_year")
FIXED_END = dt.date(2026, 6, 30)
ureg = pint.UnitRegistry()


def test_init_creates_then_reports_current(empty_database_url):
    runner = CliRunner()
    first = runner.invoke(main, ["--database", empty_database_url, "init"])
    assert first.exit_code == 0, first.output
    assert "database created at revision" in first.output and "default limits for 7 pump kinds" in first.output
    again = runner.invoke(main, ["--database", empty_database_url, "init"])
    assert "already current" in again.output


def test_commands_refuse_an_uninitialised_database(empty_database_url):
    result = CliRunner().invoke(main, ["--database", empty_database_url, "analyze"])
    assert result.exit_code != 0 and "run 'fleet init' first" in result.output


def test_analyze_json_contract_on_the_demo_plant(demo_db):
    result = CliRunner().invoke(main, ["--database", demo_db.url, "analyze", "--json"])
    assert result.exit_code == 0, result.output
    records = json.loads(result.stdout)
    assert len(records) == 41
    for record in records:
        assert set(CONTRACT) <= set(record), record["pump"]
        assert record["status"] in ("past_limit", "due_soon", "watch", "healthy")
        assert record["reasons"] and all(isinstance(r, str) and r for r in record["reasons"])  # never without reason
        if record["eta_v_ref"] is not None:
            assert 0.0 < record["eta_v_ref"] < 1.0  # a fraction, not percent
        if record["hours_to_limit"] is not None and record["hours_to_limit_low"] is not None:
            assert record["hours_to_limit_low"] <= record["hours_to_limit"]
            assert record["hours_to_limit_high"] is None or record["hours_to_limit"] <= record["hours_to_limit_high"]
        if record["hours_to_limit"] is None:
            assert record["hours_to_limit_low"] is None and record["hours_to_limit_high"] is None
    statuses = [r["status"] for r in records]
    assert statuses.count("past_limit") >= 2  # the invented plant has pumps past their limits
    order = ["past_limit", "due_soon", "watch", "healthy"]
    assert [order.index(s) for s in statuses] == sorted(order.index(s) for s in statuses)  # most urgent first


def test_analyze_table_lists_pumps_most_urgent_first(demo_db):
    result = CliRunner().invoke(main, ["--database", demo_db.url, "analyze", "--stored"])
    assert result.exit_code == 0
    lines = [line for line in result.stdout.splitlines() if re.match(r"^ *\d+  \S", line)]
    assert len(lines) == 41 and "Past limit" in lines[0]
    assert "41 pump(s)" in result.stdout


def test_demo_command_builds_without_serving(empty_database_url):
    result = CliRunner().invoke(main, ["--database", empty_database_url, "demo", "--no-serve"])
    assert result.exit_code == 0, result.output
    assert "readings: 3" in result.output and "invented demo plant built" in result.output
    again = CliRunner().invoke(main, ["--database", empty_database_url, "demo", "--no-serve"])
    assert "already holds data" in again.output


def _build(url: str) -> dict[str, str]:
    engine = make_engine(url)
    migrate.upgrade(engine)
    with make_session_factory(engine).begin() as session:
        build_demo(session, seed=7, end=FIXED_END, echo=lambda _line: None)
    with make_session_factory(engine)() as session:
        texts = {kind: export_table(session, kind).to_csv(index=False) for kind in LOAD_ORDER}
    engine.dispose()
    return texts


def test_the_demo_builds_twice_to_identical_data(tmp_path):
    first = _build(f"sqlite:///{tmp_path / 'a.sqlite'}")
    second = _build(f"sqlite:///{tmp_path / 'b.sqlite'}")
    assert first == second
    assert first["readings"].count("\n") > 2500


def _to_us(tables: dict[str, pd.DataFrame]) -> dict[str, pd.DataFrame]:
    """The same plant in US units, converted by pint (the reference library), with tagged headers."""
    def convert(frame, column, unit_from, unit_to, header):
        values = pd.to_numeric(frame[column], errors="coerce").to_numpy(float)
        frame[column] = ureg.Quantity(values, unit_from).to(unit_to).magnitude
        return frame.rename(columns={column: header})

    us = {kind: table.copy() for kind, table in tables.items()}
    p = us["pumps"]
    p = convert(p, "displacement [cm3/rev]", "cm**3", "inch**3", "displacement [in3/rev]")
    p = convert(p, "rated_pressure [bar]", "bar", "psi", "rated_pressure [psi]")
    p = convert(p, "reference_temp [degC]", ureg.degC, ureg.degF, "reference_temp [degF]")
    us["pumps"] = p
    r = us["readings"]
    r = convert(r, "outlet_pressure [bar]", "bar", "psi", "outlet_pressure [psi]")
    r = convert(r, "outlet_flow [L/min]", "L/min", "gal/min", "outlet_flow [gal/min]")
    r = convert(r, "case_drain_flow [L/min]", "L/min", "gal/min", "case_drain_flow [gpm]")
    r = convert(r, "oil_temp [degC]", ureg.degC, ureg.degF, "oil_temp [degF]")
    us["readings"] = r
    us["flowtests"] = convert(convert(us["flowtests"], "outlet_pressure [bar]", "bar", "psi", "outlet_pressure [psi]"),
                              "outlet_flow [L/min]", "L/min", "gal/min", "outlet_flow [gal/min]")
    return us


def _analyse_tables(url: str, tables: dict[str, pd.DataFrame]) -> list[dict]:
    engine = make_engine(url)
    migrate.upgrade(engine)
    now = dt.datetime(2026, 7, 1)
    with make_session_factory(engine).begin() as session:
        for kind in LOAD_ORDER:
            import_table(session, kind, _as_text(tables[kind]), now=now)
        refresh_analysis(session, now=now)
        records = analysis_records(session)
    engine.dispose()
    return records


def test_us_unit_files_give_the_same_answers_as_si_files(tmp_path):
    tables = generate(seed=11, end=FIXED_END)
    headers = {k: list(v.columns) for k, v in tables.items()}
    assert "outlet_flow [L/min]" in headers["readings"]  # the generator writes SI with tagged headers
    si = _analyse_tables(f"sqlite:///{tmp_path / 'si.sqlite'}", tables)
    us = _analyse_tables(f"sqlite:///{tmp_path / 'us.sqlite'}", _to_us(tables))
    assert [r["pump"] for r in si] == [r["pump"] for r in us]
    for a, b in zip(si, us, strict=True):
        assert a["status"] == b["status"], a["pump"]
        for field in CONTRACT[3:]:
            if isinstance(a[field], float):
                assert b[field] == pytest.approx(a[field], rel=1e-6, abs=1e-9), (a["pump"], field)
            else:
                assert a[field] == b[field], (a["pump"], field)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_fleet_serve_shows_the_demo_pumps(demo_db):
    port = _free_port()
    env = {**os.environ, "FLEET_DATABASE_URL": demo_db.url}
    with demo_db.sessions.begin() as session:  # pages need a signed-in user: read as a viewer's API token
        from fleet.services.users import create_token

        token = create_token(session, "test-viewer", "serve test (invented)").secret
    server = subprocess.Popen([sys.executable, "-m", "fleet.cli", "serve", "--port", str(port)], env=env,
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        body = None
        for _ in range(600):  # up to 60 s for the server to start (imports, stale analyses) and listen
            try:
                request = urllib.request.Request(f"http://127.0.0.1:{port}/",
                                                 headers={"Authorization": f"Bearer {token}"})
                with urllib.request.urlopen(request, timeout=2) as response:
                    body = response.read().decode()
                break
            except OSError:
                time.sleep(0.1)
        assert body is not None, "the server did not answer"
        assert "Service list" in body and "EY-101" in body and "RS-503" in body
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/assets/plotly.min.js", timeout=5) as response:
            assert response.headers["Content-Type"].startswith("text/javascript")
            assert len(response.read()) > 1_000_000  # plotly served from the installed package, not a CDN
    finally:
        server.terminate()
        server.wait(timeout=10)


def test_analyze_json_names_the_wear_law_of_every_pump(demo_db, monkeypatch):
    """Issue 11: `fleet analyze --json` adds wear_law and wear_law_weights (weights of the laws, summing to 1)."""
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    result = CliRunner().invoke(main, ["analyze", "--json", "--stored"])
    assert result.exit_code == 0, result.output
    records = json.loads(result.output)
    assert len(records) == 41
    for record in records:
        assert "wear_law" in record and "wear_law_weights" in record
        if record["wear_law"] is not None:
            weights = record["wear_law_weights"]
            assert set(weights) == {"exponential", "linear", "power", "run_in"}
            assert sum(weights.values()) == pytest.approx(1.0) and max(weights, key=weights.get) == record["wear_law"]
    assert sum(r["wear_law"] is not None for r in records) >= 35  # the invented demo's pumps nearly all have a trend
