"""A small progress bar on stderr (no dependency)."""

from __future__ import annotations

import sys
import time


class Progress:
    """Progress over ``total`` steps, drawn on stderr.

    On a terminal the bar redraws in place; otherwise a line is written at
    each tenth of the way (and at the end), so logs stay readable.  ``Progress(total, enabled=False)`` is silent.
    """

    def __init__(self, total, label="", enabled=True, stream=None):
        self.total = max(int(total), 1)
        self.label = label
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.done = 0
        self.start = time.perf_counter()
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self._tenth = -1

    def update(self, n=1, note=""):
        self.done = min(self.done + n, self.total)
        if not self.enabled:
            return
        frac = self.done / self.total
        if not self.tty:
            tenth = int(frac * 10)
            if tenth == self._tenth and self.done < self.total:
                return
            self._tenth = tenth
        elapsed = time.perf_counter() - self.start
        eta = elapsed / frac - elapsed if frac > 0 else 0.0
        width = 24
        bar = "#" * int(round(frac * width)) + "." * (width - int(round(frac * width)))
        text = (f"{self.label} [{bar}] {self.done}/{self.total} "
                f"{elapsed:5.1f}s elapsed, ~{eta:4.1f}s left {note}")
        if self.tty:
            self.stream.write("\r" + text[:120].ljust(120))
            if self.done == self.total:
                self.stream.write("\n")
        else:
            self.stream.write(text.rstrip() + "\n")
        self.stream.flush()
