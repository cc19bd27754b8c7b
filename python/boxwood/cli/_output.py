"""What a command writes besides its result: notes and errors on stderr, output checks."""

from __future__ import annotations

import argparse
import sys

from . import _tables


def note(args: argparse.Namespace, message: str) -> None:
    if not args.quiet:
        to_stderr(f"boxwood {args.command}: {message}")


def to_stderr(line: str) -> None:
    """One line on stderr. A reader that has gone (`2>&1 | head`) is nobody's error: the
    exit code still says what happened, and a traceback would be lost in the pipe too."""
    try:
        print(line, file=sys.stderr, flush=True)
    except BrokenPipeError:
        _tables.silence(sys.stderr)


def prepare_output(args: argparse.Namespace, path: str | None) -> None:
    """Refuse a bad output before reading anything: a wrong name or a missing directory."""
    _tables.output_kind(path)
    _tables.check_writable(path)


def counted(n: int, noun: str, plural: str | None = None) -> str:
    """``"1 box"``, ``"2 boxes"``: a count with its noun, singular for exactly one."""
    return f"{n:,} {noun if n == 1 else plural or noun + 's'}"


def shown_path(path: str | None) -> str:
    return "stdout" if path in (None, "-") else str(path)
