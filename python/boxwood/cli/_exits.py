"""Exit codes of the ``boxwood`` command and the errors that carry them.

Each user error is one exception class with one exit code, so that a scheduler can tell a
missing column from a damaged file without reading the message. The message itself is one
line naming the file and, where there is one, the column.

>>> from boxwood.cli._exits import ColumnMissing
>>> ColumnMissing("trips.csv: no column 'start'").code
4
"""

from __future__ import annotations

OK = 0
#: An internal error: a bug in boxwood, never the input's fault.
INTERNAL = 1
#: Bad arguments (argparse's own code for usage errors).
USAGE = 2
#: An input file is missing, empty, unreadable, damaged or not of the kind its name says.
BAD_FILE = 3
#: A named column is not in the file.
MISSING_COLUMN = 4
#: A column has a type boxwood cannot use, or a value it cannot take (NaN, null, overflow).
BAD_VALUES = 5
#: The output cannot be written (no such directory, no permission).
CANNOT_WRITE = 6
#: An optional extra (pyarrow, matplotlib, pandas) is not installed.
MISSING_EXTRA = 7
#: Not enough memory, such as a build that the machine's free memory cannot hold.
OUT_OF_MEMORY = 8
#: A growing tree's folder is open for writing by another writer (one at a time): try later.
LOCKED = 9
#: Stopped by Ctrl-C (128 + SIGINT, the shell convention).
INTERRUPTED = 130

#: (code, meaning) in the order the command line help and README list them.
TABLE = (
    (OK, "success"),
    (INTERNAL, "internal error (a bug in boxwood; please report it)"),
    (USAGE, "usage error: bad or conflicting arguments"),
    (BAD_FILE, "an input file is missing, empty, unreadable or damaged"),
    (MISSING_COLUMN, "a named column is not in the input file"),
    (BAD_VALUES, "wrong column type or bad values (NaN, empty cell, overflow)"),
    (CANNOT_WRITE, "the output cannot be written (missing directory, no permission)"),
    (MISSING_EXTRA, "an optional dependency is missing (the message names the extra)"),
    (OUT_OF_MEMORY, "not enough memory (a build larger than the free memory)"),
    (LOCKED, "a growing folder is open for writing by another writer (try again later)"),
    (INTERRUPTED, "interrupted (Ctrl-C)"),
)


class CommandError(Exception):
    """A user error of the command line: printed as one line, exits with ``code``."""

    code = INTERNAL


class UsageError(CommandError):
    code = USAGE


class FileUnreadable(CommandError):
    code = BAD_FILE


class ColumnMissing(CommandError):
    code = MISSING_COLUMN


class BadValues(CommandError):
    code = BAD_VALUES


class CannotWrite(CommandError):
    code = CANNOT_WRITE


class ExtraMissing(CommandError):
    code = MISSING_EXTRA


class Locked(CommandError):
    code = LOCKED


def extra_missing(module: str, extra: str, purpose: str) -> ExtraMissing:
    """The error for an absent optional dependency, naming what to install."""
    return ExtraMissing(f"{purpose} needs {module}: pip install 'boxwood[{extra}]'")
