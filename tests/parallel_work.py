"""Work for the worker pool's tests (fleet.services.analysis.parallel), importable by a worker process."""

import time
from pathlib import Path


def released_by_the_caller(session, number: int, folder: str) -> int:
    """Part 0 is done at once; each later part waits (up to 60 s) until the caller has taken the part before it
    (the caller leaves a file ``taken-<n>`` in ``folder`` for each part it takes)."""
    if number:
        waited = time.monotonic()
        while not (Path(folder) / f"taken-{number - 1}").exists():
            if time.monotonic() - waited > 60:
                raise TimeoutError(f"part {number - 1} was not given to the caller while part {number} waited")
            time.sleep(0.02)
    return number


def number_process_and_parent(session, number: int) -> tuple[int, int, int]:
    """The number given, the process that took it and that process's parent."""
    import os

    return number, os.getpid(), os.getppid()
