"""The engine's status, prior figures, oil condition and leakage energy steps, each replayed on its own inputs.

    PYTHONPATH=. python3 -m benchmarks.engine_steps sqlite:////tmp/copy/fleet.sqlite
    PYTHONPATH=. python3 -m benchmarks.engine_steps sqlite:////tmp/copy/fleet.sqlite --save steps.pkl
    PYTHONPATH=. python3 -m benchmarks.engine_steps sqlite:////tmp/copy/fleet.sqlite --load steps.pkl

Analyses 12 pumps spread over the fleet alone (compute.one_pump_frames, as after a write) and two 400-pump parts
(compute.analyse_part, as in a full analysis), recording what fleet.trend.engine gives each step
(assess_status, apply_priors, oil_columns, leakage_energy) and what the step returns; then calls each step again
on copies of its inputs and prints, per step, the median CPU time of this process (one pump: the median over the
12 pumps of each pump's median of ``--repeat`` calls; a part: of a tenth as many). ``--save`` keeps the recorded
inputs and outputs; ``--load`` replays saved ones instead of recording, and first checks that each step returns
exactly what was saved (run it on new code with inputs saved by old code: an A/B of the same calls, and the new
code's figures checked equal to the old). Only reads the database. For old code without this file:

    python3 -c "import sys, runpy; sys.path.insert(0, '/old/tree'); \
        sys.argv = ['x', 'sqlite:////tmp/copy/fleet.sqlite', '--save', 'steps.pkl']; \
        runpy.run_path('benchmarks/engine_steps.py', run_name='__main__')"
"""

import argparse
import copy
import functools
import pickle
import statistics
import time

import numpy as np
import pandas as pd
from sqlalchemy import select

from fleet.db.models import Pump
from fleet.services.analysis.compute import analyse_part, one_pump_frames, stored_priors
from fleet.timeutil import utcnow
from fleet.trend import engine
from fleet.trend.settings import AnalysisSettings
from fleet.web import create_app

STEPS = ("assess_status", "apply_priors", "oil_columns", "leakage_energy")


def _record(sessions) -> dict:
    now = utcnow()
    recorded = {"now": now, "one": [], "part": []}
    where = ["one"]
    originals = {name: getattr(engine, name) for name in STEPS}

    def wrap(name):
        @functools.wraps(originals[name])
        def step(*args, **kwargs):
            before = copy.deepcopy((args, kwargs))
            result = originals[name](*args, **kwargs)
            recorded[where[0]].append((name, before, copy.deepcopy((args, kwargs)), copy.deepcopy(result)))
            return result
        return step

    for name in STEPS:
        setattr(engine, name, wrap(name))
    try:
        with sessions() as session, session.begin():
            ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))
            priors = stored_priors(session)
            for pump_id in [ids[(37 + 731 * n) % len(ids)] for n in range(12)]:
                f = one_pump_frames(session, pump_id, now)
                engine.analyze_fleet(f.pumps, f.readings, f.events, f.samples, f.flow_points, now=now,
                                     priors=priors)
            where[0] = "part"
            for start in (0, len(ids) // 2):
                analyse_part(session, ids[start:start + 400], now, AnalysisSettings())
    finally:
        for name in STEPS:
            setattr(engine, name, originals[name])
    return recorded


def _same(a, b, where: str) -> None:
    """Exactly equal: frames and series value by value with their dtypes, arrays bit by bit."""
    if isinstance(a, pd.DataFrame):
        pd.testing.assert_frame_equal(a, b, check_exact=True, obj=where)
    elif isinstance(a, pd.Series):
        pd.testing.assert_series_equal(a, b, check_exact=True, obj=where)
    elif isinstance(a, (tuple, list)):
        assert len(a) == len(b), where
        for x, y in zip(a, b, strict=True):
            _same(x, y, where)
    elif isinstance(a, dict):
        assert a.keys() == b.keys(), where
        for key in a:
            _same(a[key], b[key], f"{where}.{key}")
    elif isinstance(a, pd.api.extensions.ExtensionArray):  # a column's array (the engine's columns before framing)
        pd.testing.assert_extension_array_equal(a, b, check_exact=True, obj=where)
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and a.shape == b.shape, where
        assert a.tobytes() == b.tobytes() if a.dtype != object else pd.Series(a).equals(pd.Series(b)), where
    else:
        assert a is b or a == b or (pd.isna(a) and pd.isna(b)), where


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("url", help="the database (only read)")
    parser.add_argument("--repeat", type=int, default=30)
    parser.add_argument("--save", metavar="FILE")
    parser.add_argument("--load", metavar="FILE")
    args = parser.parse_args(argv)
    # The app in either case, so a replay runs with the modules (and pandas' string storage) its recording had.
    sessions = create_app({"DATABASE_URL": args.url, "TESTING": True}).extensions["fleet_db"]
    if args.load:
        with open(args.load, "rb") as file:
            recorded = pickle.load(file)
    else:
        recorded = _record(sessions)
    sessions.kw["bind"].dispose()  # the app's engine: no connection left open for the garbage collector to find
    if args.save:
        with open(args.save, "wb") as file:
            pickle.dump(recorded, file)
    figures = {}
    for where in ("one", "part"):
        times: dict[str, list[float]] = {}
        for k, (name, before, after, result) in enumerate(recorded[where]):
            step = getattr(engine, name)
            if args.load:  # the saved outputs: the code run now must give them exactly
                call_args, call_kwargs = copy.deepcopy(before)
                _same(step(*call_args, **call_kwargs), result, f"{where}[{k}] {name}")
                _same((call_args, call_kwargs), after, f"{where}[{k}] {name} (its inputs after)")
            calls = args.repeat if where == "one" else max(args.repeat // 10, 3)
            copies = [copy.deepcopy(before) for _ in range(calls)]
            cpu = []
            for call_args, call_kwargs in copies:
                start = time.process_time()
                step(*call_args, **call_kwargs)
                cpu.append(time.process_time() - start)
            times.setdefault(name, []).append(statistics.median(cpu))
        figures[where] = {name: statistics.median(values) * 1000 for name, values in times.items()}
        label = "one pump" if where == "one" else "400-pump part"
        print(f"{label}: " + ", ".join(f"{name} {ms:.2f} ms" for name, ms in figures[where].items()))
    if args.load:
        print("every step returned exactly what was saved")
    return figures


if __name__ == "__main__":
    main()
