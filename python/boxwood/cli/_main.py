"""``boxwood``'s entry point: parse, run one command, turn its error into an exit code."""

from __future__ import annotations

import sys
from collections.abc import Sequence

from .._boxwood import IndexFileError
from .._memory import OVERRIDE
from . import _exits, _tables
from ._exits import CommandError
from ._output import to_stderr
from ._parser import build_parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit code (the console script exits with it)."""
    parser = build_parser()
    arguments = list(sys.argv[1:] if argv is None else argv)
    try:
        args, extra = parser.parse_known_args(arguments)
        if extra and args.command != "demo":
            parser.error(f"unrecognized arguments: {' '.join(extra)}")
    except SystemExit as exit_:  # argparse's usage errors (2) and --help (0)
        return _exit_code(exit_)
    try:
        if args.command == "demo":
            return _run_demo(extra)
        return args.run(args)
    except CommandError as exc:
        _error(args.command, str(exc))
        return exc.code
    except IndexFileError as exc:  # a part of an index file checked at its first use
        _error(args.command, str(exc))  # the message starts with the file's path
        return _exits.BAD_FILE
    except BrokenPipeError:  # a print to stdout (describe, grid), such as `| head -1`
        _tables.silence(sys.stdout)
        _error(args.command, "stdout was closed before the whole result was written")
        return _exits.CANNOT_WRITE
    except MemoryError as exc:  # also the library's refusal of a build that cannot fit
        reason = str(exc).replace("layout='compact'", "--layout compact")
        reason = reason.replace(OVERRIDE, "--no-memory-check")
        _error(args.command, f"not enough memory: {reason}" if reason else "not enough memory")
        return _exits.OUT_OF_MEMORY
    except KeyboardInterrupt:
        _error(args.command, "interrupted")
        return _exits.INTERRUPTED


def _exit_code(exit_: SystemExit) -> int:
    code = exit_.code
    return code if isinstance(code, int) else (0 if code is None else _exits.USAGE)


def _error(command: str, message: str) -> None:
    # One line, so that a scheduler's log shows the whole reason in one place.
    to_stderr(f"boxwood {command}: error: {' '.join(message.split())}")


def _run_demo(argv: list[str]) -> int:
    from .. import demo

    try:
        return demo.main(argv, prog="boxwood demo")
    except SystemExit as exit_:  # the demo's own argparse: --help (0) and usage errors (2)
        return _exit_code(exit_)
