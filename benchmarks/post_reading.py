"""A new reading posted to POST /api/readings, through to its pump's stored analysis, timed in-process.

    python3 -m benchmarks.post_reading sqlite:////tmp/copy/fleet.sqlite --posts 10
    python3 -m benchmarks.post_reading sqlite:////tmp/copy/fleet.sqlite --posts 10 --few-hours
    python3 -m benchmarks.post_reading sqlite:////tmp/copy/fleet.sqlite --posts 150 --few-hours --offset 7

Run it on a copy of a benchmark database (``python3 -m benchmarks.run --size full --work DIR``): it stores one
invented reading on each of ``--posts`` + 1 pumps spread over the fleet (the first post warms up and is not
counted), a day after the pump's last reading (or now, if that is sooner). By default each reading is the
benchmark's (benchmarks.run: 60,000 h, 150 bar, 1,500 rpm, 40 L/min, 48 degC), which moves most pumps far in the
service list and moves their kind's fleet life figures; ``--few-hours`` posts the next reading of a round instead
(benchmarks.run._round_body: the last reading's values, the hour meter moved on at the pump's own rate), as the
full benchmark's "new reading" does. Prints
the median and the largest wall time, the median CPU time of this process (less swayed by other jobs on the
machine than the wall time) and the load average.
"""

import argparse
import os
import statistics
import time

import pandas as pd
from sqlalchemy import func, select

from benchmarks.run import _round_body, _sign_in


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("url", help="the database (a copy: readings are added to it)")
    parser.add_argument("--posts", type=int, default=10)
    parser.add_argument("--few-hours", action="store_true", help="a round's reading, not the benchmark's")
    parser.add_argument("--offset", type=int, default=None,
                        help="the first pump's place (default: from the clock, so each run takes other pumps); "
                             "the same offset on fresh copies posts to the same pumps, for comparing two versions")
    args = parser.parse_args(argv)

    from fleet.db.models import Pump, Reading
    from fleet.timeutil import utcnow
    from fleet.web import create_app

    app = create_app({"DATABASE_URL": args.url, "TESTING": True})
    client = app.test_client()
    headers = _sign_in(app, client)
    sessions = app.extensions["fleet_db"]
    with sessions() as session:
        total = session.scalar(select(func.count(Pump.id)))
        step = max(total // (args.posts + 1), 1)
        offset = int(time.time()) % step if args.offset is None else args.offset % step  # default: other pumps
        serials = [session.scalar(select(Pump.serial).order_by(Pump.id).offset(offset + n * step).limit(1))
                   for n in range(args.posts + 1)]
    walls, cpus = [], []
    for number, serial in enumerate(serials):
        with sessions() as session:
            last_at = session.scalar(select(func.max(Reading.taken_at)).join(Pump).where(Pump.serial == serial))
            soon = pd.Timestamp(utcnow()).floor("min") - pd.Timedelta(minutes=1)
            at = min(pd.Timestamp(last_at) + pd.Timedelta(days=1), soon)
            body = (_round_body(session, serial, at) if args.few_hours else
                    {"pump": serial, "taken_at": at.strftime("%Y-%m-%d %H:%M"), "hours": 60_000.0 + number,
                     "outlet_pressure": 150.0, "speed": 1500, "outlet_flow": 40.0, "oil_temp": 48.0})
        wall, cpu = time.perf_counter(), time.process_time()
        response = client.post("/api/readings", json=body, headers=headers)
        if response.status_code != 201:
            raise RuntimeError(f"POST /api/readings answered {response.status_code}: {response.get_data(True)}")
        walls.append(1000.0 * (time.perf_counter() - wall))
        cpus.append(1000.0 * (time.process_time() - cpu))
    walls, cpus = walls[1:], cpus[1:]  # the first post compiles statements and fills caches
    figures = {"posts": len(walls), "wall_median_ms": statistics.median(walls), "wall_max_ms": max(walls),
               "cpu_median_ms": statistics.median(cpus), "load_average": os.getloadavg()}
    print(f"{figures['posts']} posts: median {figures['wall_median_ms']:.0f} ms (max {figures['wall_max_ms']:.0f}), "
          f"CPU median {figures['cpu_median_ms']:.0f} ms, load average "
          f"{' '.join(f'{x:.2f}' for x in figures['load_average'])}")
    return figures


if __name__ == "__main__":
    main()
