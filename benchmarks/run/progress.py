"""Progress of a run on stderr: a bar redrawn in place on a terminal, plain lines otherwise
(a log file or a CI job gets one line per flush, nothing that needs a terminal to read)."""

from __future__ import annotations

import sys
import time


def _fmt_duration(s: float) -> str:
    if s != s or s == float("inf"):
        return "?"
    s = int(round(s))
    if s < 60:
        return f"{s}s"
    if s < 3600:
        return f"{s // 60}m{s % 60:02d}s"
    return f"{s // 3600}h{(s % 3600) // 60:02d}m"


def _fmt_rate(r: float) -> str:
    for unit, scale in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if r >= scale:
            return f"{r / scale:.3g}{unit}"
    return f"{r:.3g}"


class Progress:
    """Reports samples done out of n, steps per second and the time left."""

    BAR = 24
    REDRAW_S = 0.2  # terminal redraw interval

    def __init__(
        self, label: str, n_samples: int, stream=None, tty: bool | None = None, quiet: bool = False
    ):
        self.label = label
        self.n = n_samples
        self.stream = stream if stream is not None else sys.stderr
        self.tty = self.stream.isatty() if tty is None else tty
        self.quiet = quiet
        self._t_start = time.perf_counter()
        self._last_draw = 0.0
        self._k0 = None
        self._steps0 = 0

    def begin(self, k: int, steps: int) -> None:
        """The run starts (or resumes) at sample k with `steps` steps already done."""
        self._t_start = time.perf_counter()
        self._k0 = k
        self._steps0 = steps
        if not self.quiet and not self.tty:
            what = "resuming at" if k > 0 else "starting,"
            self.stream.write(f"{self.label}: {what} sample {k}/{self.n}\n")
            self.stream.flush()

    def _line(self, k: int, steps: int) -> tuple[str, float]:
        el = time.perf_counter() - self._t_start
        done = k - (self._k0 or 0)
        rate = (steps - self._steps0) / el if el > 0 else 0.0
        left = (self.n - k) * el / done if done > 0 else float("nan")
        return f"{_fmt_rate(rate)} steps/s, {_fmt_duration(left)} left", el

    def update(self, k: int, steps: int) -> None:
        """Called after each sample; redraws the bar at most every REDRAW_S."""
        if self.quiet or not self.tty:
            return
        now = time.perf_counter()
        if now - self._last_draw < self.REDRAW_S and k < self.n:
            return
        self._last_draw = now
        frac = k / self.n if self.n else 1.0
        fill = int(self.BAR * frac)
        info, _ = self._line(k, steps)
        self.stream.write(
            f"\r{self.label} [{'#' * fill}{'.' * (self.BAR - fill)}] {100 * frac:5.1f}% {info}"
            "\x1b[K"
        )
        self.stream.flush()

    def flushed(self, k: int, steps: int) -> None:
        """Called after each flush to the file: the plain-line report."""
        if self.quiet or self.tty:
            return
        info, _ = self._line(k, steps)
        self.stream.write(f"{self.label}: flushed sample {k}/{self.n}, {steps} steps, {info}\n")
        self.stream.flush()

    def end(self, status: str) -> None:
        if self.quiet:
            return
        el = time.perf_counter() - self._t_start
        if self.tty:
            self.stream.write("\r\x1b[K")
        self.stream.write(f"{self.label}: {status} after {_fmt_duration(el)}\n")
        self.stream.flush()
