"""A full analysis run in worker processes gives the figures of the same run in one process.

The reference is the project's own in-process run (the figures themselves are checked against outside sources in
the tests of fleet/trend). The demo plant's 41 pumps are cut into parts of 7 here so that several parts really go
to the workers; SQLite, or PostgreSQL when FLEET_TEST_DATABASE_URL is set (each worker opens its own engine).
"""

import datetime as dt
import json
import os
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

import pytest
from click.testing import CliRunner

from fleet.cli import main
from fleet.services.analysis import analyse_results, analysis_records, reanalyse, spool
from fleet.services.analysis import compute as compute_module
from fleet.services.analysis.parallel import WORKERS_ENV, shareable, worker_count
from fleet.trend.settings import AnalysisSettings
from tests.frame_compare import plain as _plain
from tests.frame_compare import same_frames
from tests.parallel_work import number_process_and_parent, released_by_the_caller

NOW = dt.datetime(2026, 12, 1, 12)
PART = 7  # 41 demo pumps: six parts of 6 or 7 (compute.part_ids)


def test_parts_in_two_workers_give_the_figures_of_one_process(demo_db):
    with demo_db.sessions() as session:
        one_pass = analyse_results(session, None, NOW)  # the whole demo in one part
        serial = analyse_results(session, None, NOW, chunk_pumps=PART)
        peaks: dict[int, float] = {}
        pooled = analyse_results(session, None, NOW, chunk_pumps=PART, workers=2, url=demo_db.url,
                                 worker_peaks_mb=peaks)
    assert len(one_pass[0]) == 41
    for name, expected, got in zip(("results", "lives", "trends"), serial, pooled, strict=True):
        assert len(expected) > 0, name
        same_frames(expected, got, f"workers {name}")
    for name, expected, got in zip(("results", "lives", "trends"), one_pass, serial, strict=True):
        same_frames(expected, got, f"parts {name}")
    # The work really ran in other processes (two, each taking parts until none was left), and each said how
    # much memory it took.
    assert 1 <= len(peaks) <= 2 and all(peak > 0 for peak in peaks.values())
    assert os.getpid() not in peaks


def test_compute_of_a_private_in_memory_database_stays_in_process():
    assert not shareable("sqlite://")
    assert not shareable("sqlite:///:memory:")
    assert not shareable("sqlite:///file:x?mode=memory&uri=true")
    assert shareable("sqlite:////tmp/fleet.sqlite")
    assert shareable("postgresql+psycopg://u@127.0.0.1:5432/fleet")


def test_fleet_analyze_with_workers_stores_what_one_process_stores(demo_db, monkeypatch):
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    monkeypatch.setattr(compute_module, "CHUNK_PUMPS", PART)
    monkeypatch.setattr(compute_module, "utcnow", lambda: NOW)  # both runs analyse as of the same moment
    monkeypatch.setattr(spool, "utcnow", lambda: NOW)
    reanalyse(demo_db.sessions, now=NOW, workers=1)
    with demo_db.sessions() as session:
        serial = analysis_records(session)
    done = CliRunner().invoke(main, ["analyze", "--json", "--workers", "2"])
    assert done.exit_code == 0, done.output
    with demo_db.sessions() as session:
        pooled = analysis_records(session)
        with spool.spool_folder() as folder:  # the same path, to see the workers did run
            spooled = spool.spool_fleet(session, folder, workers=2)
            assert len(spooled.parts) == 6 and all(path.exists() for path in spooled.parts)
    assert 1 <= len(spooled.worker_peaks_mb) <= 2  # the parts went to the two workers
    assert len(pooled) == len(serial) == 41
    assert [_plain(record) for record in pooled] == [_plain(record) for record in serial]


def test_the_number_of_workers_is_checked(demo_db, monkeypatch):
    monkeypatch.setenv("FLEET_DATABASE_URL", demo_db.url)
    done = CliRunner().invoke(main, ["analyze", "--workers", "0"])
    assert done.exit_code == 2 and "--workers" in done.output and "0" in done.output
    monkeypatch.setenv(WORKERS_ENV, "two")
    done = CliRunner().invoke(main, ["analyze"])
    assert done.exit_code == 2 and WORKERS_ENV in done.output
    with pytest.raises(ValueError, match=f"{WORKERS_ENV}='two'"):
        worker_count()
    monkeypatch.setenv(WORKERS_ENV, "3")
    assert worker_count() == 3 and worker_count(1) == 1
    monkeypatch.delenv(WORKERS_ENV)
    assert worker_count() >= 1
    with pytest.raises(ValueError, match="1 or more"):
        worker_count(0)


def test_a_part_failing_in_a_worker_fails_the_run_and_nothing_is_returned(tmp_path):
    from fleet.services.analysis.parallel import parts_in_workers

    missing = f"sqlite:///{tmp_path / 'no such folder' / 'fleet.sqlite'}"
    with pytest.raises(Exception, match="unable to open database file"):
        parts_in_workers(missing, [[1, 2], [3, 4], [5]], NOW, AnalysisSettings(), 2)


def test_each_part_is_given_back_as_soon_as_it_is_done_while_the_workers_go_on(demo_db, tmp_path):
    # Each part after the first waits until the caller has taken the one before: had the pool given the parts back
    # only when all were done, the second would wait in vain and the run fail.
    from fleet.services.analysis.parallel import _each

    taken = []
    for number in _each(released_by_the_caller, demo_db.url, [(n, str(tmp_path)) for n in range(4)], 2, None):
        taken.append(number)
        (tmp_path / f"taken-{number}").touch()
    assert taken == [0, 1, 2, 3]


def test_parts_cut_even_and_a_multiple_of_the_workers():
    # Common practice, no source: every pump once and in order, no part above the size, sizes within one of each
    # other, and with workers the number of parts a multiple of theirs (the workers run out of parts together).
    for pumps, size, workers in [(10_000, 400, 2), (10_000, 400, 1), (41, 7, 2), (41, 7, 3), (10_001, 400, 1),
                                 (3, 7, 2), (8, 7, 2), (2, 1, 4), (1, 1, 2), (0, 5, 2)]:
        ids = list(range(100, 100 + pumps))
        parts = compute_module.part_ids(ids, size, workers)
        assert [pump for part in parts for pump in part] == ids
        sizes = [len(part) for part in parts]
        assert all(0 < n <= size for n in sizes) and max(sizes, default=0) - min(sizes, default=0) <= 1
        fewest = -(-pumps // size)
        if workers > 1 and fewest > 1:
            assert len(parts) % workers == 0 or len(parts) == pumps
        else:
            assert len(parts) == fewest
    assert len(compute_module.part_ids(list(range(10_000)), 400, 2)) == 26  # 25 parts of 400 before


def test_workers_are_forked_from_this_process_only_when_no_other_thread_runs(demo_db):
    # Common practice, no source: a lock another thread holds at a fork stays held in the child, so with a second
    # thread running the workers come from the fork server (or fresh interpreters), whose parent is not this one.
    from fleet.services.analysis.parallel import _each, fork_ready

    release = threading.Event()
    other = threading.Thread(target=release.wait, daemon=True)
    other.start()
    try:
        assert not fork_ready()
        answers = list(_each(number_process_and_parent, demo_db.url, [(n,) for n in range(4)], 2, None, fork=True))
    finally:
        release.set()
        other.join()
    assert [number for number, _, _ in answers] == [0, 1, 2, 3]
    assert all(pid != os.getpid() and parent != os.getpid() for _, pid, parent in answers)


def test_a_full_analysis_in_a_process_of_one_thread_forks_its_workers_and_stores_what_one_process_stores(
        demo_db, monkeypatch):
    # The run goes in a fresh Python process, as `fleet analyze` runs (this test process may hold other threads);
    # the one-process run here is the reference.
    monkeypatch.setattr(compute_module, "CHUNK_PUMPS", PART)
    reanalyse(demo_db.sessions, now=NOW, workers=1)
    with demo_db.sessions() as session:
        serial = analysis_records(session)
    script = textwrap.dedent(f"""
        import json, os
        from fleet.db.engine import make_engine, make_session_factory
        from fleet.services.analysis import compute, parallel, refresh
        from tests.parallel_work import number_process_and_parent

        compute.CHUNK_PUMPS = {PART}
        parents = {{parent for _, _, parent in parallel._each(number_process_and_parent, {demo_db.url!r},
                                                             [(n,) for n in range(4)], 2, None, fork=True)}}
        engine = make_engine({demo_db.url!r})
        marks = {{}}
        summary = refresh.fleet_afresh(make_session_factory(engine), now={NOW!r}, workers=2, marks=marks)
        print(json.dumps({{"forked": marks["forked"], "workers": len(marks["worker_peaks_mb"]),
                          "parents_are_me": parents == {{os.getpid()}}, "pumps": summary.pumps}}))
    """)
    done = subprocess.run([sys.executable, "-c", "import datetime\n" + script], capture_output=True, text=True,
                          cwd=Path(__file__).parent.parent, timeout=300)
    assert done.returncode == 0, done.stderr
    said = json.loads(done.stdout.strip().splitlines()[-1])
    assert said == {"forked": True, "workers": 2, "parents_are_me": True, "pumps": 41}
    with demo_db.sessions() as session:
        pooled = analysis_records(session)
    assert [_plain(record) for record in pooled] == [_plain(record) for record in serial]


def test_the_fork_server_preloads_the_dialect_of_the_database_it_serves():
    # SQLAlchemy's own dialect lookup (make_url(...).get_dialect()) is the reference; PostgreSQL's package loads
    # every driver's dialect, which a SQLite run does not need.
    import importlib

    from sqlalchemy.engine import make_url

    from fleet.services.analysis.parallel import PRELOAD, _preload

    for url in ("sqlite:////tmp/fleet.sqlite", "postgresql+psycopg://u@127.0.0.1:5432/fleet"):
        modules = _preload(url)
        assert modules[:-1] == list(PRELOAD) and modules[-1] == make_url(url).get_dialect().__module__
        importlib.import_module(modules[-1])
    assert not any("postgresql" in module for module in _preload("sqlite:////tmp/fleet.sqlite"))
