"""One pump's frames for its analysis after a write (fleet.services.analysis.compute.one_pump_frames), CPU-timed.

    PYTHONPATH=. python3 -m benchmarks.one_pump_frames sqlite:////tmp/copy/fleet.sqlite
    PYTHONPATH=. python3 -m benchmarks.one_pump_frames sqlite:////tmp/copy/fleet.sqlite --profile cumulative

Loads every 250th pump of the database (40 of a 10,000-pump benchmark database, the first a warm-up not counted),
as known now, in one read-only transaction, and prints the median CPU time of this process per pump; with
``--profile`` it prints cProfile's top 40 instead, sorted by the key given. Run it with old and new code in turns
(PYTHONPATH) for an A/B: the machine's other jobs sway any one run. For old code without this file:

    python3 -c "import sys, runpy; sys.path.insert(0, '/old/tree'); \
        sys.argv = ['x', 'sqlite:////tmp/copy/fleet.sqlite']; \
        runpy.run_path('benchmarks/one_pump_frames.py', run_name='__main__')"
"""

import argparse
import cProfile
import pstats
import statistics
import time

from sqlalchemy import select

from fleet.db.models import Pump
from fleet.services.analysis.compute import one_pump_frames
from fleet.timeutil import utcnow
from fleet.web import create_app


def main(argv: list[str] | None = None) -> float | None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("url", help="the database (only read)")
    parser.add_argument("--profile", metavar="SORT", help="print a cProfile sorted by SORT instead of timing")
    args = parser.parse_args(argv)
    sessions = create_app({"DATABASE_URL": args.url, "TESTING": True}).extensions["fleet_db"]
    with sessions() as session:
        ids = list(session.scalars(select(Pump.id).order_by(Pump.id)))[::250][:41]
    now = utcnow()
    with sessions() as session, session.begin():
        one_pump_frames(session, ids[0], now)  # warm-up: imports, statement caches
        if args.profile:
            profile = cProfile.Profile()
            profile.enable()
            for pump_id in ids[1:]:
                one_pump_frames(session, pump_id, now)
            profile.disable()
            pstats.Stats(profile).sort_stats(args.profile).print_stats(40)
            return None
        times = []
        for pump_id in ids[1:]:
            start = time.process_time()
            one_pump_frames(session, pump_id, now)
            times.append(1000 * (time.process_time() - start))
    median = statistics.median(times)
    print(f"one_pump_frames over {len(times)} pumps: CPU median {median:.2f} ms (max {max(times):.2f})")
    return median


if __name__ == "__main__":
    main()
