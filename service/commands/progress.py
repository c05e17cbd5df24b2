"""A small progress line on stderr for long imports."""
from __future__ import annotations

import sys
import time


class Progress:
    def __init__(self, label: str, total: int | None, stream=None, every_s: float = 0.5):
        self.label, self.total, self.done = label, total, 0
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.every_s, self._last = every_s, 0.0
        self._start = time.monotonic()

    def advance(self, n: int) -> None:
        self.done += n
        now = time.monotonic()
        if now - self._last >= self.every_s or (self.total and self.done >= self.total):
            self._last = now
            self._show()

    def _show(self) -> None:
        rate = self.done / max(time.monotonic() - self._start, 1e-9)
        if self.total:
            width = 30
            filled = int(width * self.done / self.total)
            text = (f"{self.label} [{'#' * filled}{'.' * (width - filled)}] "
                    f"{self.done}/{self.total} ({100 * self.done / self.total:.0f}%, {rate:.0f}/s)")
        else:
            text = f"{self.label}: {self.done} ({rate:.0f}/s)"
        self.stream.write(("\r" + text) if self.tty else (text + "\n"))
        self.stream.flush()

    def finish(self) -> None:
        self._show()
        if self.tty:
            self.stream.write("\n")
