"""Peak resident memory of this process and everything it started (worker pools started through a
fork server are grandchildren, which ``RUSAGE_CHILDREN`` does not see): /proc sampled in a thread."""

from __future__ import annotations

import os
import resource
import threading


def descendants_rss() -> int:
    """Summed resident bytes of every process below this one (Linux /proc)."""
    parent: dict[int, int] = {}
    rss: dict[int, int] = {}
    page = os.sysconf("SC_PAGE_SIZE")
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat") as f:
                fields = f.read().rsplit(")", 1)[1].split()
            parent[int(d)], rss[int(d)] = int(fields[1]), int(fields[21]) * page
        except (OSError, IndexError, ValueError):
            continue
    me, total = os.getpid(), 0
    for pid in parent:
        p = pid
        while p in parent and p not in (0, 1, me):
            p = parent[p]
        if p == me and pid != me:
            total += rss.get(pid, 0)
    return total


class PeakRss:
    """``with PeakRss() as m: ...`` then ``m.self_bytes`` (ru_maxrss) and ``m.descendants_bytes``
    (the largest sum seen over the sampled moments)."""

    def __init__(self, every: float = 0.2):
        self.every, self.descendants_bytes, self.self_bytes = every, 0, 0
        self._stop = threading.Event()

    def _run(self) -> None:
        while not self._stop.wait(self.every):
            self.descendants_bytes = max(self.descendants_bytes, descendants_rss())

    def __enter__(self) -> "PeakRss":
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()
        self.self_bytes = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
