"""The memory a process and all its descendants use at once, sampled (Linux /proc).

The full analysis forks its workers from a server process that loaded the libraries once, so their pages are
shared; adding each process's resident size (RSS) would count those pages once per process. PSS (proportional
set size, /proc/PID/smaps_rollup) counts a shared page as a share in each process that maps it, so the PSS of
all the processes, summed at one moment, is what they hold together. A thread here samples that sum (and the
RSS sum beside it) every ``every`` seconds and keeps the largest of each: a peak between two samples can be missed.
"""

import os
import threading


def _descendants(root: int) -> list[int]:
    """``root`` and every process below it, from each process's parent in /proc/PID/stat."""
    children: dict[int, list[int]] = {}
    for entry in os.scandir("/proc"):
        if not entry.name.isdigit():
            continue
        try:
            with open(f"/proc/{entry.name}/stat", "rb") as stat:
                text = stat.read()
        except OSError:  # it exited meanwhile
            continue
        parent = int(text[text.rfind(b")") + 2:].split()[1])  # the name in parentheses may hold spaces
        children.setdefault(parent, []).append(int(entry.name))
    found, todo = [], [root]
    while todo:
        pid = todo.pop()
        found.append(pid)
        todo.extend(children.get(pid, []))
    return found


def _pss_rss_kb(pid: int) -> tuple[int, int]:
    try:
        with open(f"/proc/{pid}/smaps_rollup") as rollup:
            fields = dict(line.split(":", 1) for line in rollup if line.startswith(("Pss:", "Rss:")))
    except (OSError, ValueError):  # exited meanwhile
        return 0, 0
    return int(fields.get("Pss", "0 kB").split()[0]), int(fields.get("Rss", "0 kB").split()[0])


class TreeMemory:
    """Samples this process tree's summed PSS and RSS in a background thread, from start() until stop()."""

    def __init__(self, every: float = 0.5):
        self.every = every
        self.peak_pss_mb = self.peak_rss_mb = 0.0
        self.processes_at_peak = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def sample(self) -> None:
        pids = _descendants(os.getpid())
        sizes = [_pss_rss_kb(pid) for pid in pids]
        pss, rss = sum(s[0] for s in sizes) / 1024.0, sum(s[1] for s in sizes) / 1024.0
        if pss > self.peak_pss_mb:
            self.peak_pss_mb, self.processes_at_peak = pss, sum(1 for s in sizes if s[0])
        self.peak_rss_mb = max(self.peak_rss_mb, rss)

    def _run(self) -> None:
        while not self._stop.wait(self.every):
            self.sample()

    def start(self) -> "TreeMemory":
        self.sample()
        self._thread.start()
        return self

    def stop(self) -> None:
        self._stop.set()
        self._thread.join()
        self.sample()
