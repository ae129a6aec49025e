"""The steps of a new reading's analysis around the engine's fits, and a part of the full analysis, CPU-timed.

    PYTHONPATH=. python3 -m benchmarks.post_steps sqlite:////tmp/copy/fleet.sqlite steps
    PYTHONPATH=. python3 -m benchmarks.post_steps sqlite:////tmp/copy/fleet.sqlite part

``steps``: one_pump_frames, stored_priors, place_readings and interval_lives on every 250th pump (40 of the
10,000-pump benchmark database), each the median of 5 repeats, in CPU milliseconds per pump. ``part``: the full
analysis's first 400-pump part (compute.analyse_part), the CPU seconds of 3 repeats after a warm-up. Read only.
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
    parser.add_argument("what", choices=("steps", "part"))
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


if __name__ == "__main__":
    main()
