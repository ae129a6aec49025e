"""benchmarks.engine_steps: the steps replayed on their recorded inputs return what the engine's own run returned
(the check its A/B between old and new code rests on)."""

from benchmarks import engine_steps


def test_replayed_steps_return_what_the_engine_run_returned(demo_db, tmp_path, capsys):
    saved = tmp_path / "steps.pkl"
    engine_steps.main([demo_db.url, "--save", str(saved), "--repeat", "3"])
    figures = engine_steps.main([demo_db.url, "--load", str(saved), "--repeat", "3"])
    # Reference: the outputs recorded from analyze_fleet's own calls, compared exactly by --load.
    assert "every step returned exactly what was saved" in capsys.readouterr().out
    assert set(figures["one"]) == set(engine_steps.STEPS) == set(figures["part"])
    assert all(ms > 0 for where in figures.values() for ms in where.values())
