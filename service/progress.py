"""Progress for a person waiting: a redrawn bar on a terminal, plain periodic lines elsewhere.

On a terminal the bar is redrawn in place (at most 5 times a second) with the elapsed time and
an ETA from the mean rate so far. When the stream is not a terminal (a log file, CI), a bar's
carriage returns would pile up as hundreds of lines, so one plain line is written every
``interval_s`` seconds (default 10, env ``GAITSCAPE_PROGRESS_INTERVAL_S``) and one at the end.
"""

from __future__ import annotations

import os
import sys
import time
from typing import TextIO

__all__ = ["Progress", "format_duration"]


def format_duration(seconds: float) -> str:
    """'42 s', '3 min 05 s', '1 h 02 min'."""
    s = max(0, round(seconds))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {(s % 3600) // 60:02d} min"


class Progress:
    """One task's progress (``total=None``: amount unknown, elapsed time only)."""

    def __init__(
        self,
        desc: str,
        *,
        total: float | None,
        unit: str = "",
        enabled: bool = True,
        stream: TextIO | None = None,
        interval_s: float | None = None,
    ) -> None:
        self.desc, self.total, self.unit, self.enabled = desc, total, unit, enabled
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        env = os.environ.get("GAITSCAPE_PROGRESS_INTERVAL_S")
        default = 0.2 if self.tty else float(env) if env else 10.0
        self.interval_s = interval_s if interval_s is not None else default
        self.n = 0.0
        self.start = time.monotonic()
        self._last = -1e9
        self._closed = False
        self._width = 0

    def update(self, n: float, total: float | None = None) -> None:
        """Set the amount done (and the total, when it grew)."""
        self.n = float(n)
        if total is not None:
            self.total = float(total)
        self._maybe_draw()

    def advance(self, step: float = 1.0) -> None:
        self.update(self.n + step)

    def tick(self) -> None:
        """Keep an indeterminate task's elapsed time fresh."""
        self._maybe_draw()

    def eta_s(self) -> float | None:
        """Seconds left at the mean rate so far; None before any progress or without a total."""
        elapsed = time.monotonic() - self.start
        if not self.total or self.n <= 0 or elapsed <= 0:
            return None
        return max(self.total - self.n, 0.0) * elapsed / self.n

    def text(self) -> str:
        elapsed = format_duration(time.monotonic() - self.start)
        if not self.total:
            return f"{self.desc}: elapsed {elapsed}"
        pct = 100.0 * min(self.n / self.total, 1.0)

        def num(v: float) -> str:  # whole counts as integers, sizes such as 0.4 MiB with a decimal
            return f"{v:.0f}" if float(v).is_integer() else f"{v:.1f}"

        done = num(self.n)
        eta = self.eta_s()
        tail = "" if eta is None else f", ETA {format_duration(eta)}"
        return (
            f"{self.desc}: {done}/{num(self.total)} {self.unit} ({pct:.0f} %), "
            f"elapsed {elapsed}{tail}"
        )

    def _maybe_draw(self, final: bool = False) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if not final and now - self._last < self.interval_s:
            return
        self._last = now
        if self.tty:
            line = self._bar() + " " + self.text()
            pad = max(self._width - len(line), 0)
            self._width = len(line)
            self.stream.write("\r" + line + " " * pad + ("\n" if final else ""))
        else:
            self.stream.write(self.text() + "\n")
        self.stream.flush()

    def _bar(self, width: int = 24) -> str:
        if not self.total:
            return ""
        filled = round(width * min(self.n / self.total, 1.0))
        return "[" + "#" * filled + "." * (width - filled) + "]"

    def close(self) -> None:
        if not self._closed:
            self._closed = True
            self._maybe_draw(final=True)

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
