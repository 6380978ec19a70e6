"""Progress of long runs on a terminal: rows, rate and time left; silent elsewhere."""

from __future__ import annotations

import os
import sys
import time


class Progress:
    """Call with (rows done, characters read); prints at most a few times a second to a terminal."""

    def __init__(self, path: str, stream=None, enabled: bool | None = None, interval: float = 0.5):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.size = os.path.getsize(path) if os.path.exists(path) else 0
        self.start = time.monotonic()
        self.last = 0.0
        self.interval = interval
        self.shown = False

    def __call__(self, rows: int, chars: int) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < self.interval:
            return
        self.last = now
        elapsed = max(now - self.start, 1e-9)
        line = f"  {rows:,} rows  {rows / elapsed:,.0f} rows/s"
        if self.size and chars:
            share = min(chars / self.size, 1.0)
            left = elapsed * (1 - share) / share if share else 0
            line += f"  {share:.0%}  about {int(left) // 60}:{int(left) % 60:02d} left"
        self.stream.write("\r" + line.ljust(70))
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            self.stream.write("\r" + " " * 70 + "\r")
            self.stream.flush()
