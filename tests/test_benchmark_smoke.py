"""The scale benchmark runs end to end at its small size (a smoke test: figures are reported, never timed here)."""

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy.engine import make_url

from tests.conftest import SERVER_URL, _create_server_database, _drop_server_database

ROOT = Path(__file__).resolve().parents[1]


def _run_small(tmp_path: Path, *options: str) -> tuple[dict, str]:
    out = tmp_path / "small.json"
    done = subprocess.run([sys.executable, "-m", "benchmarks.run", "--size", "small", "--out", str(out),
                           "--work", str(tmp_path / "work"), *options], cwd=ROOT, capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    return json.loads(out.read_text()), done.stdout


@pytest.mark.slow
def test_small_benchmark_runs_end_to_end_and_reports_every_figure(tmp_path):
    figures, stdout = _run_small(tmp_path)
    assert figures["database"] == "sqlite"
    _check_figures(figures, stdout)


@pytest.mark.slow
@pytest.mark.skipif(not SERVER_URL, reason="FLEET_TEST_DATABASE_URL names no PostgreSQL server")
def test_small_benchmark_runs_on_postgresql_too(tmp_path):
    name = f"{make_url(SERVER_URL).database}_bench_{os.getpid()}"
    url = _create_server_database(name)
    try:
        figures, stdout = _run_small(tmp_path, "--database", url, "--workers", "2")
    finally:
        _drop_server_database(name)
    assert figures["database"] == "postgresql" and figures["workers"] == 2
    _check_figures(figures, stdout)


def _check_figures(figures: dict, stdout: str) -> None:
    # 40 invented pumps x 60 readings, all imported and all analysed.
    assert figures["readings"] == 40 * 60
    assert figures["analysis_pumps"] == 40
    assert sum(figures["analysis_by_status"].values()) == 40
    assert set(figures["analysis_by_status"]) <= {"past_limit", "due_soon", "watch", "healthy"}
    for name in ("import_s", "import_floor_s", "import_ratio", "analysis_s", "load_floor_s", "analysis_ratio",
                 "analysis_peak_mb", "service_list_ms", "pump_page_ms", "reading_visible_ms",
                 "refit_reading_visible_ms", "overhaul_refresh_ms", "sample_refresh_ms", "help_ms", "help_floor_ms"):
        assert math.isfinite(figures[name]) and figures[name] > 0, name
    assert figures["load_floor_rows"] == figures["readings"]
    assert set(figures["met"]) == set(figures["targets"])
    # Peak memory is the PSS of all the analysis's processes at once; their RSS, which counts shared pages once
    # per process, is never less (benchmarks/tree_memory.py).
    assert figures["analysis_peak_rss_sum_mb"] >= figures["analysis_peak_mb"] > 0
    assert figures["analysis_own_peak_mb"] > 0
    assert len(figures["load_average_start"]) == len(figures["load_average_end"]) == 3
    # The table printed for the README.
    assert "| readings import |" in stdout and "| full analysis |" in stdout
    assert "| command line start (`fleet --help`), median of" in stdout
