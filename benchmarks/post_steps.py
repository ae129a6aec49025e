"""The steps of a new reading's analysis around the engine's fits, and a part of the full analysis, CPU-timed.

    PYTHONPATH=. python3 -m benchmarks.post_steps sqlite:////tmp/copy/fleet.sqlite steps
    PYTHONPATH=. python3 -m benchmarks.post_steps sqlite:////tmp/copy/fleet.sqlite part
    PYTHONPATH=. python3 -m benchmarks.post_steps sqlite:////tmp/copy/fleet.sqlite engine

``steps``: one_pump_frames, stored_priors, place_readings and interval_lives on every 250th pump (40 of the
10,000-pump benchmark database), each the median of 5 repeats, in CPU milliseconds per pump. ``part``: the full
analysis's first 400-pump part (compute.analyse_part), the CPU seconds of 3 repeats after a warm-up. ``engine``:
a write's analysis of one pump after its frames are read (the engine, then the interval trends kept), on every
97th pump from the sixth (100 of the 10,000), each pump's least CPU of 4 repeats after a warm-up, and the median
over the pumps: a repeat swayed by the machine's other jobs drops out. ``engine`` holds text as the web process
does (fleet.io.parse: Python strings; pandas' default, Arrow, costs a pump about half as much again). Read only.
Run old and new code in turns (PYTHONPATH): the machine's other jobs sway any one run.
"""

import argparse
import statistics
import time
from datetime import datetime

from sqlalchemy import create_engine, select
from sqlalchemy.orm import Session

from fleet.db.models import Pump
from fleet.services.analysis import compute
from fleet.trend.engine import analyze_fleet, place_readings
from fleet.trend.interval_trends import interval_trends
from fleet.trend.intervals import interval_lives
from fleet.trend.settings import AnalysisSettings

NOW = datetime(2026, 12, 4, 3, 0)  # a fixed moment, so both checkouts analyse the same data


def _cpu(work, repeats: int) -> list[float]:
    spent = []
    for _ in range(repeats):
        start = time.process_time()
        work()
        spent.append(time.process_time() - start)
    return spent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("url", help="the database (read only)")
    parser.add_argument("what", choices=("steps", "part", "engine"))
    args = parser.parse_args()
    settings = AnalysisSettings()
    with Session(create_engine(args.url)) as session:
        ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))
        if args.what == "part":
            compute.analyse_part(session, ids[:400], NOW, settings)
            spent = _cpu(lambda: compute.analyse_part(session, ids[:400], NOW, settings), 3)
            print(f"analyse_part of 400 pumps: CPU {' '.join(f'{s:.2f}' for s in spent)} s, "
                  f"median {statistics.median(spent):.2f} s")
            return
        if args.what == "engine":
            _engine(session, ids[5::97][:100])
            return
        pick = ids[7::250]
        priors = compute.stored_priors(session)
        frames = [compute.one_pump_frames(session, i, NOW) for i in pick]
        runs = [analyze_fleet(f.pumps, f.readings, f.events, f.samples, f.flow_points, now=NOW, priors=priors)
                for f in frames]
        steps = {
            "one_pump_frames": lambda: [compute.one_pump_frames(session, i, NOW) for i in pick],
            "stored_priors": lambda: [compute.stored_priors(session) for _ in pick],
            "place_readings": lambda: [place_readings(f.pumps, f.readings, f.events, f.flow_points, settings)
                                       for f in frames],
            "interval_lives": lambda: [interval_lives(run.intervals) for run in runs],
        }
        figures = {name: 1000.0 * statistics.median(_cpu(work, 5)) / len(pick) for name, work in steps.items()}
        print(", ".join(f"{name} {ms:.2f}" for name, ms in figures.items()), "(ms CPU per pump)")


def _engine(session: Session, pick: list[int]) -> None:
    import fleet.io.parse  # noqa: F401 (the web process's text storage: Python strings, set on import)

    priors = compute.stored_priors(session)
    frames = [compute.one_pump_frames(session, i, NOW) for i in pick]

    def analysed(f):
        run = analyze_fleet(f.pumps, f.readings, f.events, f.samples, f.flow_points, now=NOW, priors=priors)
        interval_trends(run.fit_columns(), run.intervals, run.settings.confidence)

    for f in frames:  # warm-up: caches, the first call's imports
        analysed(f)
    least = [min(_cpu(lambda f=f: analysed(f), 4)) for f in frames]
    print(f"one pump's engine and kept trends: median over {len(pick)} pumps of each one's least CPU of 4 repeats "
          f"{1000.0 * statistics.median(least):.2f} ms")


if __name__ == "__main__":
    main()
