"""Progress bars on stderr for the library's ``progress(done, total, what)`` callback.

On a terminal each kind of work (``what``: realizations, nodes, pairs, ...) gets
one bar redrawn in place, at most ten times a second.  When stderr is not a
terminal (a log file, a queue), each piece of work that took a second or more
gets one plain line when it finishes.  With ``--quiet`` nothing is shown.
"""
from __future__ import annotations

import sys
import time


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class ProgressReporter:
    """A callable ``(done, total, what)`` drawing bars or plain lines on a stream.

    Parameters
    ----------
    stream : text stream, default sys.stderr
    quiet : bool
        Show nothing.
    interactive : bool or None
        Draw bars in place; None decides by ``stream.isatty()``.
    width : int
        Width of the bar in characters.
    """

    def __init__(self, stream=None, *, quiet: bool = False, interactive: bool | None = None, width: int = 28):
        self.stream = stream if stream is not None else sys.stderr
        self.quiet = quiet
        if interactive is None:
            isatty = getattr(self.stream, "isatty", None)
            interactive = bool(isatty and isatty())
        self.interactive = interactive
        self.width = width
        self._what = None
        self._start = 0.0
        self._first = 0
        self._last_draw = 0.0
        self._open_line = False

    def __call__(self, done: int, total: int, what: str) -> None:
        if self.quiet:
            return
        now = time.monotonic()
        if what != self._what:
            self._close_line()
            self._what, self._start, self._last_draw, self._first = what, now, 0.0, done
        finished = total > 0 and done >= total
        if self.interactive:
            if finished or now - self._last_draw >= 0.1:
                self._draw(done, total, now)
                self._last_draw = now
            if finished:
                self._close_line()
                self._what = None
        elif finished:
            # one plain line per long piece of work; quick steps stay silent in logs
            if now - self._start >= 1.0:
                self.stream.write(f"{what}: {total} done ({now - self._start:.1f} s)\n")
                self.stream.flush()
            self._what = None

    def note(self, text: str) -> None:
        """A one-line message between bars (shown unless quiet)."""
        if self.quiet:
            return
        self._close_line()
        self.stream.write(text + "\n")
        self.stream.flush()

    def _draw(self, done: int, total: int, now: float) -> None:
        elapsed = now - self._start
        if total > 0:
            frac = min(max(done / total, 0.0), 1.0)
            filled = int(round(frac * self.width))
            bar = "#" * filled + "." * (self.width - filled)
            # the rate since the first report: work done before it took unknown time
            rate = (done - self._first) / elapsed if elapsed > 0 else 0.0
            eta = f" eta {_clock((total - done) / rate)}" if rate > 0 and done < total else ""
            text = f"{self._what:<16} [{bar}] {done}/{total} {_clock(elapsed)}{eta}"
        else:
            text = f"{self._what:<16} {done} {_clock(elapsed)}"
        self.stream.write("\r" + text + "\x1b[K")
        self.stream.flush()
        self._open_line = True

    def _close_line(self) -> None:
        if self._open_line:
            self.stream.write("\n")
            self.stream.flush()
            self._open_line = False

    def close(self) -> None:
        self._close_line()
