"""Progress reporting without printing from the library.

Long-running library functions take a ``progress`` argument that follows :class:`Progress`; the default
:data:`SILENT` does nothing. The CLI passes a :class:`StderrProgress`, which draws rows, rate and time left
on stderr when it is a terminal, and logs a line now and then when it is not (CI logs, cron mail).
"""

from __future__ import annotations

import sys
import time
from typing import Protocol, TextIO


class Progress(Protocol):
    """What a long stage reports its progress to: ``start`` (a label and the total, when known), ``advance``
    by some units of work, ``finish``. The library never prints; the CLI passes :class:`StderrProgress`."""

    def start(self, label: str, total: int | None = None) -> None: ...
    def advance(self, n: int = 1) -> None: ...
    def finish(self) -> None: ...


class _Silent:
    def start(self, label: str, total: int | None = None) -> None:
        pass

    def advance(self, n: int = 1) -> None:
        pass

    def finish(self) -> None:
        pass


#: The progress of a caller that wants none (the library's default).
SILENT: Progress = _Silent()


def _fmt_duration(seconds: float) -> str:
    seconds = int(max(seconds, 0))
    h, rem = divmod(seconds, 3600)
    m, s = divmod(rem, 60)
    return f"{h:d}:{m:02d}:{s:02d}" if h else f"{m:d}:{s:02d}"


class StderrProgress:
    """Rows done, rows per second and time left, redrawn at most ``interval`` seconds apart."""

    def __init__(self, stream: TextIO | None = None, *, enabled: bool = True, interval: float = 0.2,
                 log_interval: float = 10.0) -> None:
        self.stream = stream or sys.stderr
        self.enabled = enabled
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.interval = interval if self.tty else log_interval
        self.label = ""
        self.total: int | None = None
        self.done = 0
        self._t0 = 0.0
        self._last = 0.0

    def start(self, label: str, total: int | None = None) -> None:
        self.label, self.total, self.done = label, total, 0
        self._t0 = self._last = time.monotonic()

    def advance(self, n: int = 1) -> None:
        self.done += n
        now = time.monotonic()
        if self.enabled and now - self._last >= self.interval:
            self._last = now
            self._draw(now, final=False)

    def line(self, now: float | None = None) -> str:
        now = time.monotonic() if now is None else now
        elapsed = max(now - self._t0, 1e-9)
        rate = self.done / elapsed
        parts = [f"{self.label}: {self.done:,}"]
        if self.total:
            pct = 100.0 * self.done / self.total
            parts[0] += f"/{self.total:,} ({pct:.0f}%)"
        parts.append(f"{rate:,.0f}/s")
        if self.total and rate > 0 and self.done < self.total:
            parts.append(f"{_fmt_duration((self.total - self.done) / rate)} left")
        else:
            parts.append(f"{_fmt_duration(elapsed)} elapsed")
        return "  ".join(parts)

    def _draw(self, now: float, *, final: bool) -> None:
        text = self.line(now)
        if self.tty:
            end = "\n" if final else ""
            self.stream.write("\r\x1b[K" + text + end)
        else:
            self.stream.write(text + "\n")
        self.stream.flush()

    def finish(self) -> None:
        if self.enabled:
            self._draw(time.monotonic(), final=True)
