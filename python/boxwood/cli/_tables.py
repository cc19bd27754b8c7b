"""Parquet and CSV files for the command line, read and written through pyarrow.

>>> from boxwood.cli._tables import file_kind
>>> file_kind("trips.parquet"), file_kind("boxes.csv.gz"), file_kind("trips.boxwood")
('parquet', 'csv', 'index')
>>> import tempfile; file_kind(tempfile.gettempdir())  # a directory: a growing tree's folder
'folder'

Only the columns a command needs are read. CSV cells in ISO 8601 (``2025-06-14 08:15:00``,
``2025-06-14T08:15:00Z``, ``2025-06-14``) become timestamps or dates, as pyarrow infers them.
Every failure is one of the :mod:`boxwood.cli._exits` errors, with a one-line message naming the
file and the column. Outputs are written to a temporary file beside the target and renamed
into place at the end, so a failed run never leaves half a file behind.
"""

from __future__ import annotations

import importlib
import os
import re
import sys
import tempfile
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._cells import offset_hint
from ._exits import BadValues, CannotWrite, ColumnMissing, FileUnreadable, UsageError, extra_missing

INDEX_SUFFIX = ".boxwood"
_PARQUET_SUFFIXES = (".parquet", ".pq")
# pyarrow's CSV reader decompresses these by the file name.
_COMPRESSION_SUFFIXES = (".gz", ".bz2", ".zst", ".lz4")
_SHOWN_COLUMNS = 12
#: Bytes of a CSV file looked at before pyarrow parses it: enough to tell binary from text.
_SNIFF_BYTES = 4096
#: What a file named .csv may be instead, by its first bytes.
_NOT_CSV = (
    (b"PAR1", f"looks like a Parquet file, not CSV; name it {_PARQUET_SUFFIXES[0]}"),
    (b"\x8bBOXWOOD", f"looks like an index file, not CSV; name it {INDEX_SUFFIX}"),
    (b"\x1f\x8b", "looks gzip-compressed, not plain CSV; name it .csv.gz"),
    (b"\x28\xb5\x2f\xfd", "looks zstd-compressed, not plain CSV; name it .csv.zst"),
    (b"PK\x03\x04", "looks like a ZIP archive (an .xlsx workbook is one), not CSV"),
    (b"\xff\xfe", "is UTF-16 text, not readable CSV; save it as UTF-8"),
    (b"\xfe\xff", "is UTF-16 text, not readable CSV; save it as UTF-8"),
)
_ROW_NUMBER = re.compile(r": Row #(\d+): ")
_ROW_TEXT = re.compile(r"(Expected \d+ columns, got \d+: )(.*)$")
_SHOWN_CHARACTERS = 60

COORDINATE_TYPES = "int8 to int64, uint8 to uint32, float32, float64, timestamp, date and duration"
WEIGHT_TYPES = "int8 to int64, uint8 to uint32, float32 and float64"


def pyarrow() -> Any:
    """The pyarrow module with its csv and parquet parts, or the error naming the extra."""
    try:
        # By name: pyarrow ships no type information, and stays optional.
        for part in ("pyarrow.compute", "pyarrow.csv", "pyarrow.parquet"):
            importlib.import_module(part)
    except ImportError:
        raise extra_missing("pyarrow", "parquet", "reading Parquet and CSV files") from None
    return importlib.import_module("pyarrow")


# --------------------------------------------------------------------------------------------
# File kinds
# --------------------------------------------------------------------------------------------


def file_kind(path: str) -> str:
    """``"parquet"``, ``"csv"`` or ``"index"``, from the file name; ``"folder"`` for a
    directory (a growing tree's folder)."""
    if os.path.isdir(path):
        return "folder"
    name = os.path.basename(path).lower()
    if name.endswith(INDEX_SUFFIX):
        return "index"
    if name.endswith(_PARQUET_SUFFIXES):
        return "parquet"
    for suffix in _COMPRESSION_SUFFIXES:
        if name.endswith(suffix):
            name = name[: -len(suffix)]
    if name.endswith(".csv"):
        return "csv"
    raise UsageError(
        f"{path}: cannot tell the file type from its name; use .parquet, .csv (or .csv.gz) "
        f"or {INDEX_SUFFIX}, or a growing tree's folder (boxwood append makes one)"
    )


def table_kind(path: str) -> str:
    """``"parquet"`` or ``"csv"``; an index file where a table is needed is a usage error."""
    kind = file_kind(path)
    if kind == "index":
        raise UsageError(f"{path}: an index file, where a Parquet or CSV file is needed")
    if kind == "folder":
        raise UsageError(f"{path}: a directory, where a Parquet or CSV file is needed")
    return kind


def check_readable(path: str) -> None:
    """Refuse a missing, empty or non-regular file before pyarrow sees it."""
    if not os.path.exists(path):
        raise FileUnreadable(f"{path}: no such file")
    if os.path.isdir(path):
        raise FileUnreadable(f"{path}: a directory, not a file")
    if not os.access(path, os.R_OK):
        raise FileUnreadable(f"{path}: permission denied")
    if os.path.getsize(path) == 0:
        raise FileUnreadable(f"{path}: the file is empty")


# --------------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------------


def column_names(path: str) -> list[str]:
    """The file's column names, read from the Parquet schema or the CSV header."""
    pa = pyarrow()
    kind = table_kind(path)
    check_readable(path)
    if kind == "csv":
        refuse_binary_csv(path)
    try:
        if kind == "parquet":
            return list(pa.parquet.read_schema(path).names)
        with pa.csv.open_csv(path) as reader:
            return list(reader.schema.names)
    except (OSError, pa.ArrowException) as exc:
        raise _csv_failure(path, exc) if kind == "csv" else _unreadable(path, exc) from None


def require_columns(path: str, available: list[str], wanted: list[str]) -> None:
    for name in wanted:
        if name not in available:
            shown = ", ".join(available[:_SHOWN_COLUMNS])
            more = f", ... ({len(available)} in all)" if len(available) > _SHOWN_COLUMNS else ""
            raise ColumnMissing(f"{path}: no column {name!r} (columns: {shown}{more})")


def read_table(path: str, columns: list[str] | None = None, *, as_text: bool = False) -> Any:
    """A pyarrow Table of the named columns (all when ``columns`` is None).

    ``as_text``: a CSV file's cells as their text (every column a string column, empty
    cells empty strings), to be parsed cell by cell; a Parquet file is read as it is.
    """
    pa = pyarrow()
    wanted = None if columns is None else list(dict.fromkeys(columns))
    available = column_names(path)
    if wanted is not None:
        require_columns(path, available, wanted)
    if table_kind(path) == "parquet":
        try:
            return pa.parquet.read_table(path, columns=wanted)
        except (OSError, pa.ArrowException) as exc:
            raise _unreadable(path, exc) from None
    options = pa.csv.ConvertOptions(include_columns=wanted)
    if as_text:
        names = available if wanted is None else wanted
        options.column_types = {name: pa.string() for name in names}
    try:
        return pa.csv.read_csv(path, convert_options=options)
    except (OSError, pa.ArrowException) as exc:
        raise _csv_failure(path, exc, options) from None


def refuse_binary_csv(path: str) -> None:
    """Refuse a file named .csv that is not text, before pyarrow echoes its bytes.

    Only binary content is refused (a known format, or a NUL byte): text in an encoding
    other than UTF-8 may still be read, when its odd bytes are in columns not read.
    """
    pa = pyarrow()
    try:
        with pa.input_stream(path) as stream:  # decompressed by the name, as read_csv does
            head = stream.read(_SNIFF_BYTES)
    except (OSError, pa.ArrowException) as exc:
        raise _unreadable(path, exc) from None
    for magic, what in _NOT_CSV:
        if head.startswith(magic):
            raise FileUnreadable(f"{path}: {what}")
    nul = head.find(b"\0")
    if nul >= 0:
        raise FileUnreadable(
            f"{path}: not readable CSV: it holds binary data (a NUL byte at byte {nul}), and "
            "CSV is UTF-8 text"
        )


def _csv_failure(path: str, exc: BaseException, options: Any = None) -> FileUnreadable:
    """pyarrow's CSV error with the row it failed on (0-based, as in the other messages).

    pyarrow names the row only when it parses in one thread, so on a parse error without
    one the file is parsed again that way: slower, but only on the way out.
    """
    message = _first_line(exc)
    if message.startswith("CSV parse error") and _ROW_NUMBER.search(message) is None:
        pa = pyarrow()
        try:
            pa.csv.read_csv(
                path,
                read_options=pa.csv.ReadOptions(use_threads=False),
                convert_options=options,
            )
        except (OSError, pa.ArrowException) as again:
            if _ROW_NUMBER.search(_first_line(again)):
                message = _first_line(again)
    record = _ROW_NUMBER.search(message)
    if record is not None:  # pyarrow counts records from 1, the header being record 1
        row = f" at row {int(record.group(1)) - 2} (0-based): "
        message = message[: record.start()] + row + message[record.end() :]
    return FileUnreadable(f"{path}: {_printable(_shorten_row(message))}")


def _unreadable(path: str, exc: BaseException) -> FileUnreadable:
    return FileUnreadable(f"{path}: {_printable(_first_line(exc))}")


def _printable(message: str) -> str:
    """The message with control and undecodable characters escaped, so that bytes of a
    binary file reach the terminal as ``\\x..`` text."""
    if message.isprintable() and "\ufffd" not in message:
        return message
    return "".join(c if c.isprintable() and c != "\ufffd" else ascii(c)[1:-1] for c in message)


def _shorten_row(message: str) -> str:
    """pyarrow shows the whole row it failed on; a short line of it says enough."""
    found = _ROW_TEXT.search(message)
    if found is None or len(found.group(2)) <= _SHOWN_CHARACTERS:
        return message
    return message[: found.start(2)] + found.group(2)[:_SHOWN_CHARACTERS] + " ..."


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0]


# --------------------------------------------------------------------------------------------
# Columns to engine input
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ColumnRole:
    """What a column is for, to check its type and word the messages."""

    #: "coordinate", "weight" or "bound"
    kind: str
    #: How to say what a missing value means, e.g. "pass --on-missing drop to skip such rows".
    missing_advice: str


def check_type(path: str, table: Any, name: str, role: ColumnRole) -> None:
    """Refuse a column whose type the engine cannot take, with a hint where one helps."""
    pa = pyarrow()
    t = table.schema.field(name).type
    numeric = (pa.types.is_integer(t) and t != pa.uint64()) or t in (pa.float32(), pa.float64())
    timelike = pa.types.is_timestamp(t) or pa.types.is_date(t) or pa.types.is_duration(t)
    if numeric or pa.types.is_null(t) or (role.kind != "weight" and timelike):
        return
    supported = WEIGHT_TYPES if role.kind == "weight" else COORDINATE_TYPES
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        raise BadValues(f"{path}: column {name!r} {_text_column_hint(table.column(name))}")
    hint = ""
    if t == pa.uint64():
        hint = "; cast it to int64 if the values fit, or to float64"
    elif pa.types.is_decimal(t):
        hint = "; cast it to float64 or int64"
    raise BadValues(
        f"{path}: column {name!r} has type {t}, which cannot be a {role.kind}; "
        f"supported are {supported}{hint}"
    )


def _text_column_hint(column: Any) -> str:
    """Why a text column is text: times with and without a UTC offset mixed, or the first
    cell that is not a number."""
    mixed = offset_hint(column.to_pylist())
    if mixed is not None:
        return mixed
    row = 0
    for chunk in column.chunks:
        for value in chunk.to_pylist():
            if value is not None and not _is_number(value):
                if row == 0:
                    return (
                        f"holds text (first value {value!r}); numbers must be plain decimals "
                        "and times ISO 8601, such as 2025-06-14 08:15:00"
                    )
                return f"holds text: row {row} (0-based) is {value!r} where a number is expected"
            row += 1
    return "holds text where numbers are expected"


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def missing_mask(table: Any, names: list[str]) -> np.ndarray:
    """True for each row with a null, NaN or NaT in any of the named columns."""
    pa = pyarrow()
    mask = np.zeros(table.num_rows, dtype=bool)
    for name in dict.fromkeys(names):
        column = table.column(name)
        if column.null_count:
            mask |= column.is_null().to_numpy()
        if pa.types.is_floating(column.type):
            mask |= pa.compute.is_nan(column).fill_null(False).to_numpy()
    return mask


def first_missing(table: Any, names: list[str]) -> tuple[str, int] | None:
    """The first column (in ``names`` order) and row holding a missing value, if any."""
    for name in dict.fromkeys(names):
        bad = np.flatnonzero(missing_mask(table, [name]))
        if bad.size:
            return name, int(bad[0])
    return None


def refuse_missing(path: str, table: Any, names: list[str], advice: str) -> None:
    found = first_missing(table, names)
    if found is not None:
        name, row = found
        raise BadValues(
            f"{path}: column {name!r} has a missing value (empty, null, NaN or NaT) at row "
            f"{row} (0-based); {advice}"
        )


def engine_values(table: Any, name: str) -> Any:
    """A column with no missing values as the engine's input.

    numpy for numbers, dates, durations and naive timestamps; a tz-aware pandas Series for
    timestamps with a time zone, so the tree keeps the zone and compares instants.
    """
    pa = pyarrow()
    column = table.column(name)
    if pa.types.is_null(column.type):
        return np.zeros(table.num_rows, dtype=np.float64)
    if pa.types.is_timestamp(column.type) and column.type.tz is not None:
        try:
            importlib.import_module("pandas")  # pyarrow's to_pandas needs it
        except ImportError:
            raise extra_missing("pandas", "pandas", f"the time zone of column {name!r}") from None
        return column.to_pandas()
    return column.to_numpy()


def time_zone(table: Any, name: str) -> str | None:
    t = table.schema.field(name).type
    return getattr(t, "tz", None) if pyarrow().types.is_timestamp(t) else None


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def output_kind(path: str | None) -> str:
    """``"parquet"`` or ``"csv"`` for a file; ``"stdout"`` (CSV) when there is no path."""
    if path is None or path == "-":
        return "stdout"
    kind = file_kind(path)
    if kind in ("index", "folder") or (kind == "csv" and not path.lower().endswith(".csv")):
        raise UsageError(f"{path}: results are written as .parquet or .csv")
    return kind


def check_writable(path: str | None) -> None:
    """Refuse an output path that cannot be written, before any work is done."""
    if path is None or path == "-":
        return
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise CannotWrite(f"{path}: the directory {parent} does not exist")
    if os.path.isdir(path):
        raise CannotWrite(f"{path}: a directory is in the way")
    if not os.access(parent, os.W_OK):
        raise CannotWrite(f"{path}: no permission to write in {parent}")


class TableWriter:
    """Writes a table in pieces to Parquet, CSV or stdout; the file appears only when complete.

    >>> import pyarrow as pa, tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "out.csv")
    >>> table = pa.table({"count": [1, 2]})
    >>> with TableWriter(path, table.schema) as out:
    ...     out.write(table)
    >>> open(path).read().split()
    ['"count"', '1', '2']
    """

    def __init__(self, path: str | None, schema: Any) -> None:
        self._pa = pyarrow()
        self._kind = output_kind(path)
        self._path = path
        self._temp: str | None = None
        if self._kind == "stdout":
            self._writer = self._pa.csv.CSVWriter(sys.stdout.buffer, schema)
            return
        assert path is not None
        check_writable(path)
        directory = os.path.dirname(os.path.abspath(path))
        try:
            fd, self._temp = tempfile.mkstemp(
                dir=directory, prefix=f".{os.path.basename(path)}.", suffix=".partial"
            )
            os.close(fd)
            if self._kind == "parquet":
                self._writer = self._pa.parquet.ParquetWriter(self._temp, schema)
            else:
                self._writer = self._pa.csv.CSVWriter(self._temp, schema)
        except (OSError, self._pa.ArrowException) as exc:
            self._discard()
            raise CannotWrite(f"{path}: {_first_line(exc)}") from None

    def __enter__(self) -> TableWriter:
        return self

    def __exit__(self, exc_type: Any, exc: Any, tb: Any) -> None:
        if exc_type is None:
            self.close()
        else:
            self._discard()

    def write(self, table: Any) -> None:
        try:
            self._writer.write_table(table)
        except (OSError, self._pa.ArrowException) as exc:
            self._discard()
            raise self._failure(exc) from None

    def close(self) -> None:
        try:
            self._writer.close()
            if self._temp is not None:
                assert self._path is not None
                _set_default_permissions(self._temp)
                os.replace(self._temp, self._path)
                self._temp = None
            else:
                sys.stdout.flush()
        except (OSError, self._pa.ArrowException) as exc:
            self._discard()
            raise self._failure(exc) from None

    def _failure(self, exc: BaseException) -> CannotWrite:
        if self._temp is None and self._kind == "stdout" and isinstance(exc, BrokenPipeError):
            # Such as `boxwood count ... | head`: the reader stopped, nothing is wrong here.
            silence(sys.stdout)
            return CannotWrite("stdout was closed before the whole result was written")
        return CannotWrite(f"{self._path or 'stdout'}: {_first_line(exc)}")

    def _discard(self) -> None:
        if self._temp is not None:
            try:
                os.remove(self._temp)
            except OSError:
                pass
            self._temp = None


def silence(stream: Any) -> None:
    """Point stdout or stderr at /dev/null, so the interpreter's final flush meets no broken
    pipe (and prints no "Exception ignored" note)."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):  # no file descriptor: nothing to flush
        pass


def write_table(path: str | None, table: Any) -> None:
    with TableWriter(path, table.schema) as out:
        out.write(table)


def _set_default_permissions(path: str) -> None:
    """mkstemp makes files private (0600); a result file gets the usual 0666 less umask."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(path, 0o666 & ~umask)
