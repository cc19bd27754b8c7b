"""``boxwood grid``: bin edges from the command line, grid counts, and how they are shown.

>>> import numpy as np
>>> from boxwood._columns import AxisInfo
>>> axis = AxisInfo("x", np.dtype("float64"), "float")
>>> parse_edges("0, 2.5, 10", axis, "--x-edges")
array([ 0. ,  2.5, 10. ])
>>> equal_bins(4, 0.0, 8.0, axis)
array([0., 2., 4., 6., 8.])

Edges follow ``numpy.histogram2d``: every bin is ``[lo, hi)`` except the last on each axis,
which is ``[lo, hi]``. Times are ISO 8601; on a tz-aware axis an edge without an offset is
read in the axis's own zone.
"""

from __future__ import annotations

import importlib
import re
from typing import Any

import numpy as np

from .._columns import AxisInfo
from ._exits import BadValues, UsageError, extra_missing

#: Text that is a plain number. numpy reads "1" as the year 1 and pandas as one nanosecond,
#: so on a time axis a number is refused rather than quietly read as a time.
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)(e[+-]?\d+)?|[+-]?(inf|nan)", re.IGNORECASE)
#: Text that is a duration: a number with a unit (15min, 2h) or a clock time (01:30:00).
_DURATION = re.compile(r"[+-]?\d+(\.\d*)?\s*[a-z]+|[+-]?\d+(:\d+)+(\.\d+)?", re.IGNORECASE)
_TIME_EXAMPLES = {
    "datetime": "ISO 8601 times such as 2025-06-09 or 2025-06-09T08:30 (a year as 2025-01-01)",
    "timedelta": "durations such as 15min or 01:30:00",
}


def parse_edges(text: str, axis: AxisInfo, flag: str) -> Any:
    """Comma-separated edges as values of the axis's kind, checked to increase."""
    parts = [p.strip() for p in text.split(",")]
    if len(parts) < 2 or not all(parts):
        raise UsageError(f"{flag}: give at least two comma-separated edges, got {text!r}")
    edges = _parse_values(parts, axis, flag)
    ticks = _as_sortable(edges)
    if np.any(np.diff(ticks) < 0):
        raise UsageError(f"{flag}: edges must increase, got {text!r}")
    return edges


def parse_range(text: str, axis: AxisInfo, flag: str) -> tuple[Any, Any]:
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 2 or not all(parts):
        raise UsageError(f"{flag}: give LO,HI, got {text!r}")
    values = _parse_values(parts, axis, flag)
    lo, hi = _scalar(values, 0), _scalar(values, 1)
    if _as_sortable(values)[1] < _as_sortable(values)[0]:
        raise UsageError(f"{flag}: LO must not exceed HI, got {text!r}")
    return lo, hi


def parse_value(text: str, axis: AxisInfo, flag: str) -> Any:
    """One value of the axis's kind (a number, or a time or duration as for edges)."""
    if not text.strip() or "," in text:
        raise UsageError(f"{flag}: give one value, got {text!r}")
    return _scalar(_parse_values([text.strip()], axis, flag), 0)


def _parse_values(parts: list[str], axis: AxisInfo, flag: str) -> Any:
    _refuse_other_kind(parts, axis, flag)
    if axis.kind in ("float", "int"):
        return _numbers(parts, flag)
    if axis.kind == "timedelta":
        pd = _pandas("durations on the command line")
        try:
            return _in_unit(np.array([pd.Timedelta(p).to_timedelta64() for p in parts]), axis.unit)
        except ValueError as exc:
            raise UsageError(f"{flag}: not a duration such as 15min or 01:30:00: {exc}") from None
    if axis.tz is None:
        try:
            return _in_unit(np.array([np.datetime64(p) for p in parts]), axis.unit)
        except ValueError as exc:
            raise UsageError(f"{flag}: not an ISO 8601 time: {exc}") from None
    pd = _pandas("times on a tz-aware axis")
    stamps = []
    for part in parts:
        try:
            stamp = pd.Timestamp(part)
        except ValueError as exc:
            raise UsageError(f"{flag}: not an ISO 8601 time: {exc}") from None
        stamps.append(stamp.tz_localize(axis.tz) if stamp.tz is None else stamp)
    return pd.Series(pd.DatetimeIndex(stamps).tz_convert(axis.tz))


def _refuse_other_kind(parts: list[str], axis: AxisInfo, flag: str) -> None:
    """A number for a time axis, or a time for a numeric one, as the library refuses it."""
    if axis.is_time:
        wrong = [p for p in parts if _PLAIN_NUMBER.fullmatch(p)]
        given, wanted = "a number", _TIME_EXAMPLES[axis.kind]
    else:
        wrong = [p for p in parts if not _PLAIN_NUMBER.fullmatch(p) and _looks_like_time(p)]
        given, wanted = "a time or duration", "numbers"
    if wrong:
        raise BadValues(
            f"{flag}: {wrong[0]!r} is {given}, which does not match axis {axis.name} "
            f"of dtype {axis.dtype}; give {wanted}"
        )


def _looks_like_time(text: str) -> bool:
    if _DURATION.fullmatch(text):
        return True
    try:
        np.datetime64(text)
    except ValueError:
        return False
    return True


def _in_unit(times: np.ndarray, unit: str) -> np.ndarray:
    """Times in the axis's unit when that is exact, else in nanoseconds.

    Edges then print and store like the data (and in a unit Arrow has: seconds or finer).
    """
    kind = times.dtype.kind
    for target in (unit, "ns"):
        converted = times.astype(f"{kind}8[{target}]")
        if np.array_equal(converted, times):
            return converted
    return times


def _numbers(parts: list[str], flag: str) -> np.ndarray:
    values: list[int | float] = []
    for part in parts:
        try:
            values.append(int(part))
        except ValueError:
            try:
                values.append(float(part))
            except ValueError:
                raise UsageError(f"{flag}: {part!r} is not a number") from None
    if any(isinstance(v, float) for v in values):
        return np.array(values, dtype=np.float64)
    try:
        return np.array(values, dtype=np.int64)
    except OverflowError:
        raise UsageError(f"{flag}: an edge does not fit in int64") from None


def _pandas(purpose: str) -> Any:
    try:
        return importlib.import_module("pandas")  # by name: pandas ships no type information
    except ImportError:
        raise extra_missing("pandas", "pandas", purpose) from None


def _as_sortable(values: Any) -> np.ndarray:
    """Numbers or int64 ticks (UTC for tz-aware data) that order like the values."""
    array = naive_numpy(values)
    return array.view(np.int64) if array.dtype.kind in "Mm" else array


def naive_numpy(values: Any) -> np.ndarray:
    """A numpy array; tz-aware pandas times become naive UTC datetime64."""
    if getattr(getattr(values, "dtype", None), "tz", None) is not None:
        values = values.dt.tz_convert("UTC").dt.tz_localize(None)
    return np.asarray(values.to_numpy() if hasattr(values, "to_numpy") else values)


def _scalar(values: Any, i: int) -> Any:
    return values.iloc[i] if hasattr(values, "iloc") else values[i]


def data_range(values: Any) -> tuple[Any, Any]:
    """``(min, max)`` of a coordinate column, in its own kind."""
    array = naive_numpy(values)
    if array.size == 0:
        raise UsageError("there are no points, so no data range to divide into bins")
    order = _as_sortable(array)
    lo, hi = array[int(np.argmin(order))], array[int(np.argmax(order))]
    tz = getattr(getattr(values, "dtype", None), "tz", None)
    if tz is None:
        return lo, hi
    pd = _pandas("times on a tz-aware axis")
    return (pd.Timestamp(lo).tz_localize("UTC"), pd.Timestamp(hi).tz_localize("UTC"))


def index_range(tree: Any, axis: str) -> tuple[Any, Any]:
    """``(min, max)`` of one axis of a tree whose points are not at hand (an index file)."""
    extremes = tree.x_range if axis == "x" else tree.y_range
    if extremes is None:
        raise UsageError("the index holds no points, so no data range to divide into bins")
    return extremes


def equal_bins(count: int, lo: Any, hi: Any, axis: AxisInfo) -> Any:
    """``count + 1`` equal-width edges from ``lo`` to ``hi``, both included exactly.

    A span of zero widens to ``lo - 0.5, hi + 0.5`` on a numeric axis (numpy's rule) and by
    one tick on a time axis, so that the points on it fall inside the grid.
    """
    if not axis.is_time:
        lo, hi = float(lo), float(hi)
        if lo == hi:
            lo, hi = lo - 0.5, hi + 0.5
        return np.linspace(lo, hi, count + 1)
    unit = axis.unit
    naive = [_naive_tick(v, unit) for v in (lo, hi)]
    lo_tick, hi_tick = naive
    if lo_tick == hi_tick:
        lo_tick, hi_tick = lo_tick - 1, hi_tick + 1
    # Python ints: exact even where (hi - lo) * i would overflow int64.
    ticks = [lo_tick + (hi_tick - lo_tick) * i // count for i in range(count + 1)]
    kind = "M" if axis.kind == "datetime" else "m"
    edges = np.array(ticks, dtype=np.int64).view(f"{kind}8[{unit}]")
    if axis.tz is None:
        return edges
    pd = _pandas("times on a tz-aware axis")
    return pd.Series(edges).dt.tz_localize("UTC").dt.tz_convert(axis.tz)


def _naive_tick(value: Any, unit: str) -> int:
    if hasattr(value, "tz") and value.tz is not None:
        value = value.tz_convert("UTC").tz_localize(None)
    if hasattr(value, "to_datetime64"):
        value = value.to_datetime64()
    if hasattr(value, "to_timedelta64"):
        value = value.to_timedelta64()
    kind = "M" if np.asarray(value).dtype.kind == "M" else "m"
    return int(np.asarray(value).astype(f"{kind}8[{unit}]").view(np.int64))


def take(values: Any, positions: np.ndarray) -> Any:
    """Elements at ``positions`` of a numpy array or (by position) a pandas Series."""
    if hasattr(values, "iloc"):
        return values.iloc[positions].reset_index(drop=True)
    return values[positions]


# --------------------------------------------------------------------------------------------
# Showing a grid
# --------------------------------------------------------------------------------------------


def edge_label(value: Any) -> str:
    if isinstance(value, (float, np.floating)):
        return f"{float(value):.6g}"
    text = str(value).replace("T", " ")
    fraction = re.search(r":\d\d\.(\d+)", text)
    if fraction:  # a time of day: trailing zeros of its seconds say nothing
        digits = fraction.group(1).rstrip("0")
        tail = f".{digits}" if digits else ""
        text = text[: fraction.start(1) - 1] + tail + text[fraction.end(1) :]
    return text


def matrix_text(values: np.ndarray, x_edges: Any, y_edges: Any, what: str) -> str:
    """The grid as aligned text: one line per x bin, one column per y bin, with totals."""
    xs = [edge_label(_scalar(x_edges, i)) for i in range(len(x_edges))]
    ys = [edge_label(_scalar(y_edges, j)) for j in range(len(y_edges))]
    cells = [[_cell(v) for v in row] for row in values]
    totals = [_cell(v) for v in values.sum(axis=1)]
    header = ["x from \\ y from", *ys[:-1], "total"]
    body = [[xs[i], *cells[i], totals[i]] for i in range(len(cells))]
    widths = [max(len(r[c]) for r in [header, *body]) for c in range(len(header))]
    lines = [
        "  ".join(c.ljust(w) if k == 0 else c.rjust(w) for k, (c, w) in enumerate(zip(r, widths)))
        for r in [header, *body]
    ]
    lines.append(
        f"{what} per cell; bins [lo, hi), the last on each axis [lo, hi]; "
        f"last edges: x {xs[-1]}, y {ys[-1]}"
    )
    return "\n".join(lines)


def _cell(value: Any) -> str:
    if isinstance(value, (float, np.floating)):
        return f"{float(value):,.6g}"
    return f"{int(value):,}"
