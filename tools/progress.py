"""A one-line progress bar on stderr: units, machines per second, ETA."""
from __future__ import annotations

import sys
import time


def _human(x: float) -> str:
    for unit, div in (("T", 1e12), ("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if x >= div:
            return f"{x / div:.1f}{unit}"
    return f"{x:.0f}"


def _clock(seconds: float) -> str:
    seconds = int(seconds)
    h, rest = divmod(seconds, 3600)
    return f"{h}:{rest // 60:02d}:{rest % 60:02d}" if h else f"{rest // 60}:{rest % 60:02d}"


class Bar:
    """Draws at most ten times a second; silent unless enabled (a terminal, no --quiet)."""

    def __init__(self, label: str, enabled: bool | None = None, stream=None):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.label = label
        self.t0 = time.monotonic()
        self.last = 0.0
        self.drawn = False

    def __call__(self, done, total, weight_done, weight_total, steps, note: str = "") -> None:
        """total None: the end is not known in units (a sampled build under a time budget)."""
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < 0.1 and (total is None or done < total):
            return
        self.last = now
        elapsed = max(now - self.t0, 1e-9)
        width = 24
        if total:
            frac = done / total
            eta = elapsed / frac - elapsed if frac > 0 else 0.0
            fill = int(width * frac)
            where = f"[{'#' * fill}{'.' * (width - fill)}] {done}/{total} units"
            tail = f"ETA {_clock(eta)}"
        else:
            where, tail = f"{done} units", f"{_clock(elapsed)} elapsed"
        line = (f"\r{self.label} {where} {_human(weight_done / elapsed)} machines/s "
                f"{_human(steps / elapsed)} steps/s {tail}" + (f" {note}" if note else "") + " ")
        self.stream.write(line)
        self.stream.flush()
        self.drawn = True

    def close(self) -> None:
        if self.drawn:
            self.stream.write("\n")
            self.stream.flush()
