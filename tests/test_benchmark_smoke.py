"""The scale benchmark runs end to end at its small size (a smoke test: figures are reported, never timed here)."""

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_small_benchmark_runs_end_to_end_and_reports_every_figure(tmp_path):
    out = tmp_path / "small.json"
    done = subprocess.run([sys.executable, "-m", "benchmarks.run", "--size", "small", "--out", str(out),
                           "--work", str(tmp_path / "work")], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    figures = json.loads(out.read_text())
    # 40 invented pumps x 60 readings, all imported and all analysed.
    assert figures["readings"] == 40 * 60
    assert figures["analysis_pumps"] == 40
    assert sum(figures["analysis_by_status"].values()) == 40
    assert set(figures["analysis_by_status"]) <= {"past_limit", "due_soon", "watch", "healthy"}
    for name in ("import_s", "import_floor_s", "import_ratio", "analysis_s", "load_floor_s", "analysis_ratio",
                 "analysis_peak_mb", "service_list_ms", "pump_page_ms", "reading_visible_ms",
                 "overhaul_refresh_ms", "sample_refresh_ms", "help_ms", "help_floor_ms"):
        assert math.isfinite(figures[name]) and figures[name] > 0, name
    assert figures["load_floor_rows"] == figures["readings"]
    assert set(figures["met"]) == set(figures["targets"])
    # The table printed for the README.
    assert "| readings import |" in done.stdout and "| full analysis |" in done.stdout
    assert "| command line start (`fleet --help`), median of" in done.stdout
