"""A progress line on stderr: sets done, sets per second, time left."""

from __future__ import annotations

import sys
import time


class Progress:
    """Call with the number of sets just finished; prints at most a few times a second."""

    def __init__(self, total: int, label: str = "sets", stream=None, enabled: bool = True):
        self.total, self.label = total, label
        self.stream = stream or sys.stderr
        self.enabled = enabled
        self.done = 0
        self.started = time.monotonic()
        self.skipped = 0
        self._last = 0.0
        self._width = 0

    def __call__(self, finished: int, resumed: bool = False) -> None:
        if resumed:
            self.skipped += finished  # found finished on resume: not part of the speed
        self.done += finished
        now = time.monotonic()
        if self.enabled and (now - self._last > 0.25 or self.done >= self.total):
            self._last = now
            self._print(now)

    def _print(self, now: float) -> None:
        elapsed = max(now - self.started, 1e-9)
        computed = self.done - self.skipped
        rate = computed / elapsed
        left = (self.total - self.done) / rate if rate > 0 else float("inf")
        width = 30
        filled = int(width * self.done / max(self.total, 1))
        bar = "#" * filled + "-" * (width - filled)
        eta = f"{left:5.0f}s left" if left != float("inf") else "  ...     "
        resumed = f"  ({self.skipped} from checkpoints)" if self.skipped else ""
        line = f"[{bar}] {self.done}/{self.total} {self.label}  {rate:8.0f} {self.label}/s  {eta}{resumed}"
        self.stream.write("\r" + line.ljust(self._width))   # blank out a longer previous line
        self._width = len(line)
        if self.done >= self.total:
            self.stream.write("\n")
        self.stream.flush()
