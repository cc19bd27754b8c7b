"""Progress bars for the command line: one line on stderr, only on a terminal, only when slow.

>>> import io
>>> from boxwood.cli._progress import Progress
>>> with Progress("count", total=3, unit="boxes", stream=io.StringIO()) as bar:
...     bar.advance(3)
>>> bar.done
3

A bar stays invisible until its work has run for ``delay`` seconds (about one), so quick jobs
print nothing, and it never draws on a stream that is not a terminal (a log file or a pipe
gets no carriage returns). Work whose size is unknown, such as a build inside one engine
call, runs in a worker thread (:func:`run_with_activity`) while the bar shows elapsed time.
"""

from __future__ import annotations

import shutil
import sys
import threading
import time
from typing import IO, Any, Callable, TypeVar

T = TypeVar("T")

#: Seconds of work before a bar first appears.
DELAY_SECONDS = 1.0
#: Seconds between redraws: often enough to look alive, rarely enough to cost nothing.
REDRAW_SECONDS = 0.1
_BAR_WIDTH = 30
_ACTIVITY_WIDTH = 6


class Progress:
    """A one-line progress bar; ``total=None`` draws an activity bar with elapsed time.

    ``enabled=False`` (the ``--quiet`` flag) or a stream that is not a terminal turns drawing
    off entirely; counting still happens, so callers need not care.
    """

    def __init__(
        self,
        label: str,
        total: int | None = None,
        *,
        unit: str = "",
        enabled: bool = True,
        stream: IO[str] | None = None,
        delay: float = DELAY_SECONDS,
    ) -> None:
        self.label = label
        self.total = total
        self.unit = unit
        self.done = 0
        self._stream = sys.stderr if stream is None else stream
        self._draws = enabled and _is_terminal(self._stream)
        self._delay = delay
        self._start = time.perf_counter()
        self._last_draw = -float("inf")
        self._drawn = False
        self._frames = 0
        self._stopped = False

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        self.close(finished=exc_type is None)

    def advance(self, n: int) -> None:
        self.done += n
        self._maybe_draw()

    def tick(self) -> None:
        """Redraw if due: for activity bars, whose work reports no steps."""
        self._maybe_draw()

    def close(self, *, finished: bool = True) -> None:
        """Leave the final state on its own line, if anything was drawn at all."""
        if not self._drawn:
            return
        if finished and self.total is not None:
            self.done = self.total
        self._stopped = not finished
        self._draw(final=True)
        self._stream.write("\n")
        self._stream.flush()

    # ------------------------------------------------------------ drawing

    def _maybe_draw(self) -> None:
        if not self._draws:
            return
        now = time.perf_counter()
        if now - self._start < self._delay or now - self._last_draw < REDRAW_SECONDS:
            return
        self._last_draw = now
        self._draw(final=False)

    def _draw(self, *, final: bool) -> None:
        elapsed = time.perf_counter() - self._start
        if self.total is None:
            text = self._activity_line(elapsed, final)
        else:
            text = self._bar_line(elapsed)
        width = shutil.get_terminal_size((80, 24)).columns
        # \r returns to the line start and \x1b[K clears what a longer earlier line left.
        self._stream.write("\r" + text[: max(width - 1, 1)] + "\x1b[K")
        self._stream.flush()
        self._drawn = True
        self._frames += 1

    def _bar_line(self, elapsed: float) -> str:
        total = max(self.total or 0, 1)
        fraction = min(self.done / total, 1.0)
        filled = int(round(fraction * _BAR_WIDTH))
        bar = "#" * filled + "." * (_BAR_WIDTH - filled)
        unit = f" {self.unit}" if self.unit else ""
        stopped = "  stopped" if self._stopped else ""
        return (
            f"{self.label}  [{bar}] {fraction:4.0%}  {self.done:,}/{self.total:,}{unit}  "
            f"{elapsed:.1f} s{stopped}"
        )

    def _activity_line(self, elapsed: float, final: bool) -> str:
        if final:
            return f"{self.label}  {'stopped' if self._stopped else 'done'} after {elapsed:.1f} s"
        span = _BAR_WIDTH - _ACTIVITY_WIDTH
        step = self._frames % (2 * span)
        offset = step if step < span else 2 * span - step  # bounce back and forth
        bar = " " * offset + "=" * _ACTIVITY_WIDTH + " " * (span - offset)
        return f"{self.label}  [{bar}]  {elapsed:.1f} s"


def run_with_activity(progress: Progress, work: Callable[[], T]) -> T:
    """Run ``work()`` in a worker thread, redrawing ``progress`` until it returns.

    The engine releases the GIL while it builds, so the bar keeps moving. Exceptions from
    ``work`` are raised here, in the caller's thread.
    """
    outcome: dict[str, Any] = {}

    def target() -> None:
        try:
            outcome["value"] = work()
        except BaseException as exc:  # re-raised in the caller's thread below
            outcome["error"] = exc

    # A daemon thread, so that Ctrl-C in the main thread can end the process.
    worker = threading.Thread(target=target, name=f"boxwood {progress.label}", daemon=True)
    worker.start()
    while worker.is_alive():
        worker.join(REDRAW_SECONDS)
        progress.tick()
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]


def _is_terminal(stream: IO[str]) -> bool:
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty and isatty())
    except ValueError:  # a closed stream
        return False
