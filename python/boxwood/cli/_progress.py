"""Progress bars for the command line: tqdm's, on stderr, only on a terminal, only when slow.

>>> import io
>>> from boxwood.cli._progress import Progress
>>> with Progress("count", total=3, unit="boxes", stream=io.StringIO()) as bar:
...     bar.advance(3)
>>> bar.done
3

A bar stays invisible until its work has run for ``delay`` seconds (about one), so quick jobs
print nothing, and it never draws on a stream that is not a terminal (a log file or a pipe
gets no carriage returns): there no tqdm bar is made at all. Work whose size is unknown, such
as a build inside one engine call, runs in a worker thread (:func:`run_with_activity`) while
the bar shows elapsed time.
"""

from __future__ import annotations

import sys
import threading
from typing import IO, Any, Callable, TypeVar

from tqdm import tqdm

T = TypeVar("T")

#: Seconds of work before a bar first appears.
DELAY_SECONDS = 1.0
#: Seconds between redraws: often enough to look alive, rarely enough to cost nothing.
REDRAW_SECONDS = 0.1
#: An activity bar (no total) shows its label and the time so far, then how it ended.
_ACTIVITY_FORMAT = "{desc}: {elapsed}{postfix}"


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
        stream = sys.stderr if stream is None else stream
        self._bar: tqdm[Any] | None = None
        if enabled and _is_terminal(stream):
            self._bar = tqdm(
                total=total,
                desc=label,
                unit=f" {unit}" if unit else " steps",
                unit_scale=True,
                file=stream,
                delay=delay,
                mininterval=REDRAW_SECONDS,
                miniters=0,  # a fixed 0: redraw on any call once the interval has passed
                dynamic_ncols=True,
                leave=True,
                bar_format=None if total is not None else _ACTIVITY_FORMAT,
            )

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        self.close(finished=exc_type is None)

    def advance(self, n: int) -> None:
        self.done += n
        if self._bar is not None:
            self._bar.update(n)

    def tick(self) -> None:
        """Redraw if due: for activity bars, whose work reports no steps."""
        if self._bar is not None:
            self._bar.update(0)

    def close(self, *, finished: bool = True) -> None:
        """Leave the final state on its own line, if anything was drawn at all."""
        bar, self._bar = self._bar, None
        if bar is None:
            return
        if finished and self.total is not None:
            bar.n = self.total
        if not finished:
            bar.set_postfix_str("stopped", refresh=False)
        elif self.total is None:
            bar.set_postfix_str("done", refresh=False)
        bar.close()  # tqdm draws the last state only if the bar was ever shown


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
