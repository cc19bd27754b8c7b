"""Bound cells of a CSV boxes file, parsed one by one against the axis they bound.

pyarrow types a CSV column as a whole: one ``inf`` among integers makes the column float64
and rounds ``1152921504606846977`` to ``1152921504606846976``, and one ``-inf`` among
timestamps makes it text. So the bound columns of a CSV file are read as text and every
cell is parsed on its own, for the axis it bounds: an integer stays an exact int64,
``inf``/``-inf`` leaves that side open, a time keeps its nanoseconds and its UTC offset. A
cell that is not what its axis needs fails naming its row, its column and its text.

>>> bound_column(["1152921504606846977", "inf", "-3"], "x_lo", "int", (0, 10))
array([1152921504606846977,                  11,                  -3])
"""

from __future__ import annotations

import importlib
import math
import re
from typing import Any

import numpy as np

_INT = re.compile(r"\s*[+-]?\d+\s*")
_I64_MIN, _I64_MAX = -(2**63), 2**63 - 1
#: A time's UTC offset at its end: Z, +hh:mm, +hhmm or +hh.
_OFFSET = re.compile(r"(?<=\d)(Z|[+-]\d\d(?::?\d\d)?)$", re.I)
_SHOWN = 60
#: What a time cell starts with: a year and a month (numpy alone would read "17" as a year).
_DATE = re.compile(r"\s*[+-]?\d{4,}-\d\d")


class CellError(ValueError):
    """A cell that is not what its axis needs; the message names the column, row and text."""


def _fail(name: str, row: int, text: str, wanted: str) -> CellError:
    shown = text if len(text) <= _SHOWN else text[:_SHOWN] + " ..."
    return CellError(f"column {name!r} row {row} (0-based) is {shown!r}, where {wanted}")


def _infinity(text: str) -> float | None:
    try:
        v = float(text)
    except ValueError:
        return None
    return v if math.isinf(v) else None


def _number(text: str) -> int | float | None:
    """An integer cell as an exact int, any other number as a float; None if not one."""
    if _INT.fullmatch(text):
        return int(text)
    try:
        v = float(text)
    except ValueError:
        return None
    return None if math.isnan(v) else v


def _numbers(cells: list[str], name: str) -> list[int | float]:
    out = []
    for row, text in enumerate(cells):
        v = _number(text)
        if v is None:
            raise _fail(name, row, text, "a number (or -inf/inf for an open side) is expected")
        out.append(v)
    return out


def _open_ints(values: list[int | float], data_range: tuple[Any, Any] | None) -> list:
    """On an integer axis, ±inf as the integer just beyond the points (so the column stays
    int64 and no integer is rounded through float): below the smallest for -inf, above the
    largest for +inf, which every comparison treats as the open side does. Left as ±inf
    where the points reach the end of int64."""
    lo, hi = (0, 0) if data_range is None else (int(data_range[0]), int(data_range[1]))
    below = lo - 1 if lo > _I64_MIN else -math.inf
    above = hi + 1 if hi < _I64_MAX else math.inf
    return [
        (above if v > 0 else below) if isinstance(v, float) and math.isinf(v) else v for v in values
    ]


def _as_array(values: list) -> np.ndarray:
    """int64 when every value is an int64 integer, float64 when every value is a float (or
    an integer a float64 holds exactly), else an object array of the exact values."""
    if all(isinstance(v, int) and _I64_MIN <= v <= _I64_MAX for v in values):
        return np.array(values, dtype=np.int64)
    if all(isinstance(v, float) or abs(v) <= 2**53 for v in values):
        return np.array(values, dtype=np.float64)
    return np.array(values, dtype=object)


def _split_offset(text: str) -> tuple[str, int | None]:
    """A time without its UTC offset, and the offset in minutes (None when there is none)."""
    text = text.strip()
    found = _OFFSET.search(text) if ":" in text else None
    if found is None:
        return text, None
    mark = found.group(1)
    if mark.upper() == "Z":
        return text[: found.start()], 0
    digits = mark[1:].replace(":", "")
    minutes = int(digits[:2]) * 60 + (int(digits[2:]) if len(digits) > 2 else 0)
    return text[: found.start()], -minutes if mark[0] == "-" else minutes


def _time(text: str) -> tuple[np.datetime64, bool] | None:
    """A time as UTC nanoseconds when it carries an offset, and whether it did."""
    if not _DATE.match(text):
        return None
    base, offset = _split_offset(text)
    try:
        stamp = np.datetime64(base.replace(" ", "T", 1), "ns")
    except ValueError:
        return None
    if np.isnat(stamp):
        return None
    if offset is None:
        return stamp, False
    return stamp - np.timedelta64(offset, "m"), True


def time_cell(text: str) -> np.datetime64 | None:
    """One ISO 8601 time as nanoseconds (UTC when it has an offset or Z), or None."""
    parsed = _time(text.strip())
    return None if parsed is None else parsed[0]


def _times(cells: list[str], name: str) -> np.ndarray:
    values: list[Any] = []
    first: dict[bool, int] = {}
    for row, text in enumerate(cells):
        inf = _infinity(text)
        if inf is not None:
            values.append(inf)
            continue
        parsed = _time(text)
        if parsed is None:
            wanted = "a time (ISO 8601) or -inf/inf for an open side is expected"
            raise _fail(name, row, text, wanted)
        stamp, has_offset = parsed
        first.setdefault(has_offset, row)
        if len(first) == 2:
            raise _fail(name, row, text, _mixed_offsets(has_offset, first[not has_offset]))
        values.append(stamp)
    if first.get(True) is not None:
        return _utc(values)
    if all(isinstance(v, np.datetime64) for v in values):
        return np.array(values, dtype="datetime64[ns]")
    return np.array(values, dtype=object)


def _mixed_offsets(has_offset: bool, other: int) -> str:
    if has_offset:
        this, that = "a UTC offset", f"row {other} has none"
    else:
        this, that = "no UTC offset", f"row {other} has one"
    return f"this time has {this} but {that}; give every time an offset (such as Z), or none"


def _utc(values: list[Any]) -> np.ndarray:
    """UTC instants as tz-aware pandas Timestamps (±inf kept), as a tz-aware axis takes them."""
    pd = importlib.import_module("pandas")  # as a tz-aware column needs it

    return np.array(
        [v if isinstance(v, float) else pd.Timestamp(v).tz_localize("UTC") for v in values],
        dtype=object,
    )


def bound_column(
    cells: list[str], name: str, kind: str, data_range: tuple[Any, Any] | None
) -> np.ndarray:
    """The cells of one bound column as the exact values an axis of `kind` (``"float"``,
    ``"int"``, ``"datetime"``; the tree's) takes, and its points' range (int axes)."""
    if kind == "datetime":
        return _times(cells, name)
    values = _numbers(cells, name)
    if kind == "int":
        values = _open_ints(values, data_range)
    return _as_array(values)


def offset_hint(cells: list[Any]) -> str | None:
    """Why a column of times reads as text when some carry a UTC offset and others do not:
    the message naming the first cell that differs, else None."""
    first: dict[bool, int] = {}
    for row, text in enumerate(cells):
        if not text:
            continue
        parsed = _time(text)
        if parsed is None:
            return None
        first.setdefault(parsed[1], row)
        if len(first) == 2:
            has = parsed[1]
            return (
                f"mixes times with and without a UTC offset: row {row} (0-based) is {text!r}; "
                + _mixed_offsets(has, first[not has])
            )
    return None
