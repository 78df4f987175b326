"""Progress over reach x event units on stderr: one rewritten line on a terminal, plain lines otherwise."""
from __future__ import annotations

import sys
import time


class Progress:
    """``step(label, units)`` after each reach; an ETA from the mean time per unit so far.

    On a terminal the line is rewritten in place (carriage return); when stderr is a file or a
    pipe (a log, CI), each step is its own line, so nothing is left half-written.
    """

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total, self.done, self.enabled, self.t0 = max(total, 1), 0, enabled, time.perf_counter()
        self.stream = stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())

    def step(self, label: str, units: int = 1) -> None:
        self.done += units
        if not self.enabled:
            return
        el = time.perf_counter() - self.t0
        eta = el / self.done * (self.total - self.done) if self.done else 0.0
        line = f"[{self.done}/{self.total}] {label:<44.44} {el:7.1f} s elapsed, ETA {eta:6.1f} s"
        if self.tty:
            self.stream.write("\r" + line + ("\n" if self.done >= self.total else ""))
        else:
            self.stream.write(line.rstrip() + "\n")
        self.stream.flush()
