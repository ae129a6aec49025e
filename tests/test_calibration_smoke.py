"""The calibration benchmark runs end to end at its small size (a smoke test: its figures are reported by
`python3 -m benchmarks.calibration`, never asserted against targets here)."""

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_small_calibration_runs_and_reports_every_law(tmp_path):
    out = tmp_path / "calibration.json"
    done = subprocess.run([sys.executable, "-m", "benchmarks.calibration", "--size", "small", "--workers", "1",
                           "--known-law", "--out", str(out)], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    figures = json.loads(out.read_text())
    assert figures["pumps"] == 2 * 60
    laws = ("exponential", "linear", "accelerating", "run_in", "overall")
    for law in laws:
        row = figures[law]
        assert row["pumps"] > 0, law
        assert 0.0 <= row["coverage"] <= 1.0 and math.isfinite(row["median_rel_error"]), law
        assert set(figures["met"][law]) == {"coverage", "median_rel_error"}
    assert figures["overall"]["pumps"] == sum(figures[law]["pumps"] for law in laws[:-1])
    # --known-law: the same pumps fitted with their true law alone, reported beside the averaged figures.
    floor = figures["known_law"]
    for law in laws:
        assert 0.0 <= floor[law]["coverage"] <= 1.0 and math.isfinite(floor[law]["median_rel_error"]), law
    assert "true law alone: median error" in done.stdout
    # The table printed for the README.
    assert "| wear law | pumps |" in done.stdout and "| run-in |" in done.stdout


def test_known_law_run_fits_every_pump_with_its_true_law_only():
    from benchmarks.calibration import ENGINE_LAW, run_fleet

    rows = run_fleet(5, 40, known_law=True)
    named = rows.dropna(subset=["wear_law"])
    assert len(named) > 30
    assert (named["wear_law"] == named["law"].map(ENGINE_LAW)).all()
    assert set(named["law"]) == set(ENGINE_LAW)
