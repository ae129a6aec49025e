"""Start-up of the command line: wall time of `fleet --help` against the floor of any click tool.

    python3 -m benchmarks.startup            # prints the figures; benchmarks.run includes them

Each run is a fresh process on this checkout (`python3 -m fleet --help`, the same program as the `fleet` script),
so the figure holds what a user waits for: the interpreter's start, click, and fleet's command modules. The floor
is the interpreter starting and importing click, nothing else. Medians, after one warm-up run of each.
"""

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
RUNS = 15


def _median_s(argv: list[str], runs: int) -> float:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")]))}
    samples = []
    for number in range(runs + 1):
        started = time.perf_counter()
        subprocess.run(argv, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
        if number:  # the first run warms the disk cache and writes .pyc files
            samples.append(time.perf_counter() - started)
    return statistics.median(samples)


def measure(runs: int = RUNS) -> dict:
    return {
        "help_ms": 1000.0 * _median_s([sys.executable, "-m", "fleet", "--help"], runs),
        "help_floor_ms": 1000.0 * _median_s([sys.executable, "-c", "import click"], runs),
        "help_runs": runs,
    }


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=RUNS)
    figures = measure(parser.parse_args(argv).runs)
    print(f"fleet --help: {figures['help_ms']:.0f} ms (median of {figures['help_runs']}); "
          f"python + click: {figures['help_floor_ms']:.0f} ms")
    return figures


if __name__ == "__main__":
    main()
