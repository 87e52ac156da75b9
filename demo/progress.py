"""Plain-text progress on stderr: one line, rewritten in place on a terminal, a few lines otherwise."""

from __future__ import annotations

import sys
import time
from typing import TextIO

WIDTH = 30


class Progress:
    def __init__(self, label: str, total: int, stream: TextIO = sys.stderr) -> None:
        self.label = label
        self.total = max(total, 1)
        self.done = 0
        self.stream = stream
        self.started = time.monotonic()
        self._tty = stream.isatty()
        self._last_tenth = -1

    def advance(self, n: int) -> None:
        self.done = min(self.done + n, self.total)
        fraction = self.done / self.total
        tenth = int(fraction * 10)
        if not self._tty and tenth == self._last_tenth and self.done < self.total:
            return  # in a log file, one line per tenth is enough
        self._last_tenth = tenth
        bar = "#" * int(fraction * WIDTH)
        rate = self.done / max(time.monotonic() - self.started, 1e-6)
        line = (f"{self.label:<12} [{bar:<{WIDTH}}] {fraction:4.0%} "
                f"{self.done:,}/{self.total:,} ({rate:,.0f}/s)")
        self.stream.write(("\r" + line) if self._tty else line + "\n")
        if self._tty and self.done == self.total:
            self.stream.write("\n")
        self.stream.flush()
