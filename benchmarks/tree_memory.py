"""The memory a process and all its descendants use at once, sampled (Linux /proc) by a watcher process.

The full analysis forks its workers from its own process (or from a server process that loaded the libraries
once), so their pages are shared; adding each process's resident size (RSS) would count those pages once per
process. PSS (proportional set size, /proc/PID/smaps_rollup) counts a shared page as a share in each process that
maps it, so the PSS of all the processes, summed at one moment, is what they hold together. A watcher process
(this file run as a script) samples that sum (and the RSS sum beside it) every ``every`` seconds and keeps the
largest of each: a peak between two samples can be missed. A process, not a thread: the analysis forks its workers
from its own process only while it runs no other thread (fleet.services.analysis.parallel.fork_ready), and the
watcher's own memory and CPU stay out of what it measures.
"""

import json
import os
import select
import subprocess
import sys


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


class Peaks:
    """The largest summed PSS and RSS seen of ``root``'s process tree (without the process sampling it)."""

    def __init__(self, root: int):
        self.root = root
        self.peak_pss_mb = self.peak_rss_mb = 0.0
        self.processes_at_peak = 0

    def sample(self) -> None:
        pids = [pid for pid in _descendants(self.root) if pid != os.getpid()]
        sizes = [_pss_rss_kb(pid) for pid in pids]
        pss, rss = sum(s[0] for s in sizes) / 1024.0, sum(s[1] for s in sizes) / 1024.0
        if pss > self.peak_pss_mb:
            self.peak_pss_mb, self.processes_at_peak = pss, sum(1 for s in sizes if s[0])
        self.peak_rss_mb = max(self.peak_rss_mb, rss)


class TreeMemory:
    """Samples this process tree's summed PSS and RSS from a watcher process, from start() until stop()."""

    def __init__(self, every: float = 0.5):
        self.every = every
        self.peak_pss_mb = self.peak_rss_mb = 0.0
        self.processes_at_peak = 0
        self._watcher: subprocess.Popen | None = None

    def start(self) -> "TreeMemory":
        """Start the watcher, back once it has taken its first sample."""
        self._watcher = subprocess.Popen([sys.executable, __file__, str(os.getpid()), str(self.every)],
                                         stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        if self._watcher.stdout.readline().strip() != "sampling":
            raise RuntimeError("the memory watcher did not start")
        return self

    def stop(self) -> None:
        """Take a last sample and read the peaks the watcher saw."""
        said, _ = self._watcher.communicate("stop\n", timeout=60)
        peaks = json.loads(said)
        self.peak_pss_mb, self.peak_rss_mb = peaks["pss_mb"], peaks["rss_mb"]
        self.processes_at_peak = peaks["processes"]


def _watch(root: int, every: float) -> None:
    """Sample ``root``'s tree every ``every`` seconds until a line (or the end) comes on standard input; then
    write the peaks as JSON."""
    peaks = Peaks(root)
    peaks.sample()
    print("sampling", flush=True)
    while not select.select([sys.stdin], [], [], every)[0]:
        peaks.sample()
    peaks.sample()
    print(json.dumps({"pss_mb": peaks.peak_pss_mb, "rss_mb": peaks.peak_rss_mb,
                      "processes": peaks.processes_at_peak}), flush=True)


if __name__ == "__main__":
    _watch(int(sys.argv[1]), float(sys.argv[2]))
