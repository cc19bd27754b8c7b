"""Box bounds: from the caller's values to numbers the engine compares exactly.

Numeric bounds go to the engine as they are (``float`` or ``int``) and the engine rounds
them into the axis's domain. Time bounds are converted here to the axis's own tick unit;
when a bound falls between two ticks it is rounded *inward or outward as the comparison
needs* (``direction``): a closed lower edge or an open upper edge rounds up to the next
tick, a closed upper edge or an open lower edge rounds down. That keeps every comparison
exactly what it would be on the original values.
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Sequence
from fractions import Fraction
from typing import Any, Literal, Union

import numpy as np

from ._columns import AxisInfo, _to_numpy, tz_of

Inclusive = Literal["both", "neither", "left", "right"]
#: One bound: a number, a numpy scalar, or a date, time or duration (or an ISO string).
Scalar = Union[int, float, np.generic, _dt.date, _dt.timedelta, str]
#: A box's four bounds in the engine's numbers.
EngineBounds = tuple[Union[int, float], Union[int, float], Union[int, float], Union[int, float]]
BoundArrays = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]

UP = "up"
DOWN = "down"
NAMES = ("x_lo", "x_hi", "y_lo", "y_hi")

_I64_MIN = -(2**63)
_I64_MAX = 2**63 - 1

_INCLUSIVE = ("both", "neither", "left", "right")

# Fixed-length numpy time units, in attoseconds. Years and months are calendar units and are
# first converted to days by numpy itself.
_ATTOSECONDS = {
    "W": 7 * 86_400 * 10**18,
    "D": 86_400 * 10**18,
    "h": 3_600 * 10**18,
    "m": 60 * 10**18,
    "s": 10**18,
    "ms": 10**15,
    "us": 10**12,
    "ns": 10**9,
    "ps": 10**6,
    "fs": 10**3,
    "as": 1,
}


def check_inclusive(inclusive: Any) -> None:
    if inclusive not in _INCLUSIVE:
        raise ValueError(
            f"inclusive must be 'both', 'neither', 'left' or 'right', got {inclusive!r}"
        )


def directions(inclusive: str) -> tuple[str, str]:
    """Rounding directions for the lower and upper bounds."""
    lo_closed = inclusive in ("both", "left")
    hi_closed = inclusive in ("both", "right")
    return (UP if lo_closed else DOWN), (DOWN if hi_closed else UP)


def is_scalar(value: Any) -> bool:
    return np.ndim(value) == 0 and not isinstance(value, np.ndarray)


# ---------------------------------------------------------------- numeric axes


def _float_between(v: int, direction: str) -> float:
    """The float next to an integer too large for int64, on the side `direction` says."""
    try:
        f = float(v)
    except OverflowError:
        f = math.inf if v > 0 else -math.inf
    if math.isinf(f):
        if direction == UP:
            return f if v > 0 else -np.finfo(np.float64).max
        return np.finfo(np.float64).max if v > 0 else f
    exact = int(f)
    if exact == v:
        return f
    if direction == UP:
        return f if exact > v else math.nextafter(f, math.inf)
    return f if exact < v else math.nextafter(f, -math.inf)


def _numeric_scalar(value: Any, axis: AxisInfo, name: str, direction: str) -> float | int:
    if isinstance(value, (bool, np.bool_)):
        raise TypeError(f"{name} must be a number, got a bool")
    if isinstance(value, (int, np.integer)):
        v = int(value)
        if _I64_MIN <= v <= _I64_MAX:
            return v
        if axis.kind == "float":
            return _float_between(v, direction)
        return math.inf if v > 0 else -math.inf  # beyond every int64: saturates exactly
    if isinstance(value, (float, np.floating)):
        return float(value)
    raise TypeError(
        f"{name} must be a number for the {axis.dtype} axis {axis.name}, got {type(value).__name__}"
    )


def _numeric_array(arr: np.ndarray, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    kind = arr.dtype.kind
    if kind == "f":
        return arr.astype(np.float64, copy=False)
    if kind in "iu":
        if arr.dtype == np.uint64 and arr.size and arr.max() > _I64_MAX:
            return _object_array(arr.astype(object), axis, name, direction)
        return arr.astype(np.int64, copy=False)
    if kind == "O":
        return _object_array(arr, axis, name, direction)
    raise TypeError(
        f"{name} must hold numbers for the {axis.dtype} axis {axis.name}, got dtype {arr.dtype}"
    )


def _whole(v: float | int, direction: str) -> float | int:
    """On an integer axis, a finite float bound as the whole number that admits the same
    points (rounded as `direction` says), so a mixture with integers beyond 2**53 stays
    exact in one int64 column; a float beyond int64 (or infinite) is left as it is."""
    if isinstance(v, int) or not math.isfinite(v):
        return v
    whole = math.ceil(v) if direction == UP else math.floor(v)
    return whole if _I64_MIN <= whole <= _I64_MAX else v


def _object_array(arr: np.ndarray, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    """Element by element; only for arrays numpy could not type (big Python ints, mixtures)."""
    values = [_numeric_scalar(v, axis, name, direction) for v in arr.ravel()]
    if axis.kind == "int":
        values = [_whole(v, direction) for v in values]
    if all(isinstance(v, int) for v in values):
        return np.array(values, dtype=np.int64).reshape(arr.shape)
    if all(isinstance(v, float) or abs(v) <= 2**53 for v in values):
        return np.array(values, dtype=np.float64).reshape(arr.shape)
    raise TypeError(
        f"{name} mixes floats with integers beyond 2**53; pass an int64 or a float64 array"
    )


# ---------------------------------------------------------------- time axes


def _time_scalar_type_error(value: Any, axis: AxisInfo, name: str) -> TypeError:
    wanted = "datetime64 values, pandas Timestamps, datetime objects or ISO strings"
    if axis.kind == "timedelta":
        wanted = "timedelta64 values, pandas Timedeltas or datetime.timedelta objects"
    return TypeError(
        f"{name} must be {wanted} (or ±inf) for the {axis.dtype} axis {axis.name}, "
        f"got {type(value).__name__}"
    )


def _parse_iso(value: str) -> Any:
    """An ISO string as a datetime when Python can read it (keeping any UTC offset)."""
    try:
        return _dt.datetime.fromisoformat(value)
    except ValueError:
        return value  # numpy reads more forms (such as '2025-01'); it sees no offsets


def check_time_zone(axis: AxisInfo, name: str, bound_tz: str | None) -> None:
    """tz-aware and naive times do not compare (the pandas rule): refuse the mixture."""
    if axis.tz is None and bound_tz is not None:
        raise TypeError(
            f"{name} is tz-aware ({bound_tz}) but axis {axis.name} holds naive datetimes; "
            "pass naive bounds, or build the tree from tz-aware data"
        )
    if axis.tz is not None and bound_tz is None:
        raise TypeError(
            f"axis {axis.name} is tz-aware ({axis.tz}) but {name} is naive; pass tz-aware "
            "bounds such as pandas.Timestamp(..., tz=...): they are compared as instants"
        )


def _as_numpy_time(value: Any, axis: AxisInfo, name: str) -> np.generic:
    """One time bound as a numpy datetime64/timedelta64 scalar."""
    plain = isinstance(value, (int, float, np.integer, np.floating))
    if plain and not isinstance(value, (bool, np.bool_, np.timedelta64)):
        # A number is not a time, whatever the axis's zone: say so, not that it is naive.
        raise _time_scalar_type_error(value, axis, name)
    if axis.kind == "datetime":
        if isinstance(value, str):
            value = _parse_iso(value)
        check_time_zone(axis, name, tz_of(value))
        if getattr(value, "tzinfo", None) is not None:
            value = value.astimezone(_dt.timezone.utc).replace(tzinfo=None)
        if hasattr(value, "to_datetime64"):
            return value.to_datetime64()
        if isinstance(value, (np.datetime64, _dt.datetime, _dt.date, str)):
            try:
                return np.datetime64(value)
            except ValueError as exc:
                raise ValueError(f"{name} is not a date or time: {exc}") from None
    else:
        if hasattr(value, "to_timedelta64"):
            return value.to_timedelta64()
        if isinstance(value, (np.timedelta64, _dt.timedelta)):
            return np.timedelta64(value)
    raise _time_scalar_type_error(value, axis, name)


def _time_scalar(value: Any, axis: AxisInfo, name: str, direction: str) -> float | int:
    if isinstance(value, (float, np.floating)) and math.isinf(value):
        return float(value)
    t = _as_numpy_time(value, axis, name)
    return int(_time_array(np.asarray(t).reshape(1), axis, name, direction)[0])


def _time_array(arr: np.ndarray, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    kind = arr.dtype.kind
    want = "M" if axis.kind == "datetime" else "m"
    if kind == "f":
        if np.all(np.isinf(arr)):
            return arr.astype(np.float64, copy=False)
        raise TypeError(f"{name} holds plain numbers; the {axis.dtype} axis needs time values")
    if kind == "O":
        return _object_time_array(arr, axis, name, direction)
    if kind in "US" and want == "M":
        try:
            arr = arr.astype("datetime64")
        except ValueError as exc:
            raise ValueError(f"{name} holds a string that is not a date or time: {exc}") from None
        kind = "M"
    if kind != want:
        hint = " (pass datetime64 values)" if want == "M" else " (pass timedelta64 values)"
        raise TypeError(
            f"{name} has dtype {arr.dtype}, which does not match axis {axis.dtype}{hint}"
        )
    ticks = arr.view(np.int64)
    bad = np.flatnonzero(ticks == _I64_MIN)
    if bad.size:
        raise ValueError(f"{name} contains NaT at position {int(bad[0])}")
    return _convert_ticks(arr, axis, direction)


def _object_time_array(arr: np.ndarray, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    values = [_time_scalar(v, axis, name, direction) for v in arr.ravel()]
    # ±inf mixed with ticks: the extreme ticks stand in for them, exactly, because no point
    # can hold either (the smallest is NaT, the largest is refused when building).
    ticks = [(_I64_MAX if v > 0 else _I64_MIN) if isinstance(v, float) else v for v in values]
    return np.array(ticks, dtype=np.int64).reshape(arr.shape)


def _convert_ticks(arr: np.ndarray, axis: AxisInfo, direction: str) -> np.ndarray:
    """Time values as int64 ticks of the axis's unit, rounded in `direction` when inexact."""
    if arr.dtype == axis.dtype:
        return arr.view(np.int64)
    from_unit, from_count = np.datetime_data(arr.dtype)
    if from_unit in ("Y", "M"):
        # Calendar units become days exactly (numpy knows the calendar).
        arr = arr.astype(_with_unit(arr.dtype, "D"))
        from_unit, from_count = "D", 1
    to_unit, to_count = np.datetime_data(axis.dtype)
    if to_unit in ("Y", "M"):
        return _convert_to_calendar_unit(arr, axis, direction)
    ratio = Fraction(_ATTOSECONDS[from_unit] * from_count, _ATTOSECONDS[to_unit] * to_count)
    ticks = arr.view(np.int64)
    if ratio.denominator == 1:
        r = ratio.numerator
        limit = _I64_MAX // r
        out = ticks * np.int64(r) if r < 2**63 else np.zeros_like(ticks)
        # Beyond int64 after scaling: saturate onto the extreme ticks, which no point holds.
        out = np.where(ticks > limit, _I64_MAX, out)
        return np.where(ticks < -limit, _I64_MIN, out)
    if ratio.numerator == 1:
        per = np.int64(ratio.denominator)
        return -((-ticks) // per) if direction == UP else ticks // per
    exact = [Fraction(int(t)) * ratio for t in ticks]
    rounded = [math.ceil(v) if direction == UP else math.floor(v) for v in exact]
    return np.array(rounded, dtype=np.int64)


def _with_unit(dtype: np.dtype, unit: str) -> np.dtype:
    family = "datetime64" if dtype.kind == "M" else "timedelta64"
    return np.dtype(f"{family}[{unit}]")


def _convert_to_calendar_unit(arr: np.ndarray, axis: AxisInfo, direction: str) -> np.ndarray:
    """Axes in years or months: numpy converts, and a round trip tells if it rounded."""
    coarse = arr.astype(axis.dtype)
    back = coarse.astype(arr.dtype)
    ticks = coarse.view(np.int64).copy()
    if direction == UP:
        ticks += back < arr
    else:
        ticks -= back > arr
    return ticks


# ---------------------------------------------------------------- entry points


def scalar_bound(value: Any, axis: AxisInfo, name: str, direction: str) -> float | int:
    """One bound, as the ``float`` or ``int`` the engine takes."""
    if axis.is_time:
        if isinstance(value, (float, np.floating)) and math.isnan(value):
            raise ValueError(f"{name} contains NaN at position 0")
        if isinstance(value, (np.datetime64, np.timedelta64)) and np.isnat(value):
            raise ValueError(f"{name} contains NaT at position 0")
        return _time_scalar(value, axis, name, direction)
    return _numeric_scalar(value, axis, name, direction)


def array_bound(value: Any, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    """Bounds as a float64 or int64 array of the value's own shape."""
    arr = _to_numpy(value, name)
    if axis.is_time:
        if axis.kind == "datetime" and arr.dtype.kind in "MUS":
            check_time_zone(axis, name, tz_of(value))
        return _time_array(arr, axis, name, direction)
    if arr.dtype.kind in "Mm":
        raise TypeError(
            f"{name} holds time values but axis {axis.name} is {axis.dtype}; pass plain numbers"
        )
    return _numeric_array(arr, axis, name, direction)


# ---------------------------------------------------------------- a box's four bounds


def _specs(
    x_axis: AxisInfo, y_axis: AxisInfo, bounds: Sequence[Any], inclusive: Any
) -> list[tuple[Any, AxisInfo, str, str]]:
    """Each bound with its axis, its name and the direction it rounds in."""
    check_inclusive(inclusive)
    lo_dir, hi_dir = directions(inclusive)
    x_lo, x_hi, y_lo, y_hi = bounds
    return [
        (x_lo, x_axis, "x_lo", lo_dir),
        (x_hi, x_axis, "x_hi", hi_dir),
        (y_lo, y_axis, "y_lo", lo_dir),
        (y_hi, y_axis, "y_hi", hi_dir),
    ]


def scalar_box(
    x_axis: AxisInfo, y_axis: AxisInfo, bounds: Sequence[Any], inclusive: Any
) -> EngineBounds | None:
    """The four bounds as engine scalars, or None when any of them is an array."""
    specs = _specs(x_axis, y_axis, bounds, inclusive)
    if not all(is_scalar(spec[0]) for spec in specs):
        return None
    a, b, c, d = (scalar_bound(*spec) for spec in specs)
    return a, b, c, d


def box_arrays(
    x_axis: AxisInfo, y_axis: AxisInfo, bounds: Sequence[Any], inclusive: Any
) -> tuple[tuple[int, ...], BoundArrays]:
    """``(broadcast shape, four flat contiguous engine arrays)``."""
    specs = _specs(x_axis, y_axis, bounds, inclusive)
    arrays = [_bound_array(*spec) for spec in specs]
    try:
        broadcast = np.broadcast_arrays(*arrays)
    except ValueError:
        shapes = ", ".join(f"{n} {a.shape}" for n, a in zip(NAMES, arrays))
        raise ValueError(f"the bounds do not broadcast to one shape: {shapes}") from None
    shape = broadcast[0].shape
    a, b, c, d = (np.ascontiguousarray(v.ravel()) for v in broadcast)
    return shape, (a, b, c, d)


def per_box_arrays(
    x_axis: AxisInfo, y_axis: AxisInfo, bounds: Sequence[Any], inclusive: Any, n: int
) -> list[np.ndarray]:
    """The four bounds as flat engine arrays of one value for each of `n` boxes."""
    _, arrays = box_arrays(x_axis, y_axis, bounds, inclusive)
    return [a if a.size == n else np.full(n, a[0], dtype=a.dtype) for a in arrays]


def strictly_below(values: np.ndarray, bound: Any, axis: AxisInfo, name: str) -> np.ndarray:
    """Which engine coordinates `values` (the axis's float64 or int64 column) lie strictly
    below one bound, compared exactly: the retention cut ``x < bound`` of a growing tree."""
    cut = scalar_bound(bound, axis, name, UP)  # an open upper edge rounds up
    if isinstance(cut, float) and math.isinf(cut):
        return np.full(values.shape, cut > 0)
    if values.dtype == np.int64:
        if isinstance(cut, float):
            cut = math.ceil(cut)  # x < 2.5 is x < 3 for integers
        if cut > _I64_MAX:
            return np.ones(values.shape, dtype=bool)
        if cut <= _I64_MIN:
            return np.zeros(values.shape, dtype=bool)
        return values < np.int64(cut)
    if isinstance(cut, int):
        cut = _float_between(cut, UP)  # the least float at or above the integer
    return values < cut


def _bound_array(value: Any, axis: AxisInfo, name: str, direction: str) -> np.ndarray:
    if is_scalar(value):
        v = scalar_bound(value, axis, name, direction)
        return np.array(v, dtype=np.int64 if isinstance(v, int) else np.float64)
    return array_bound(value, axis, name, direction)


# ---------------------------------------------------------------- what a bound means
#
# Written once here and assembled into the docstring of every method that takes a box, so
# that ``help(RangeTree.count)`` and ``help(ShardedTree.count_boxes)`` say the same thing.

_BOUND_MEANING = """\
    A box is ``x_lo <= x <= x_hi`` and ``y_lo <= y <= y_hi`` (edges as `inclusive` says);
    one with ``x_lo > x_hi`` or ``y_lo > y_hi`` is empty. A bound is a number on a numeric
    axis, a time on a datetime axis (``datetime64``, ``datetime.date`` or ``datetime``,
    pandas ``Timestamp``, or an ISO 8601 string; tz-aware exactly when the axis is, and then
    compared as an instant) or a duration on a timedelta axis; ``-inf`` or ``inf`` leaves a
    side open on any axis; NaN and NaT are refused. Bounds are compared with the
    coordinates exactly in the column's own type: an integer bound on an int64 axis is never
    rounded through float, and a bound that falls between two values of the column's domain
    (``2.5`` on an integer axis, a millisecond on an axis of seconds) is rounded in the
    direction that keeps every comparison what it is on the exact values."""

_INCLUSIVE_MEANING = """\
inclusive
    Which edges are closed, the same on both axes: ``"both"`` (the default,
    ``lo <= v <= hi``), ``"neither"`` (``lo < v < hi``), ``"left"`` (``lo <= v < hi``) or
    ``"right"`` (``lo < v <= hi``)."""

#: Bounds given as values: scalars for one box, arrays (broadcast together) for many.
ARRAY_BOUNDS = f"""\
Bounds
------
x_lo, x_hi, y_lo, y_hi
    Scalars for one box, or arrays (lists, Series) that broadcast together to one box per
    element of their broadcast shape.
{_BOUND_MEANING}
{_INCLUSIVE_MEANING}"""

#: Bounds given by a DataFrame of boxes, one box a row.
FRAME_BOUNDS = f"""\
Bounds
------
x_lo, x_hi, y_lo, y_hi
    Each is a column label of the boxes frame (by default the columns ``x_lo`` ... ``y_hi``),
    ``None`` for an open side, or one constant bound for every box; strings always name
    columns, so a misspelt column is an error rather than a date. A missing value (NaN, NaT,
    NA) in a bound column raises ``ValueError`` naming the column and the box.
{_BOUND_MEANING}
{_INCLUSIVE_MEANING}"""

#: The order of reported rows, the same for every call that reports (written once here too).
ORDERED = """\
ordered
    ``True`` (the default): each box's rows in increasing row order, so a report is the same
    on every run, in both layouts and across shards. ``False`` leaves each box's rows in the
    order the tree finds them (unspecified, and not the same in the two layouts) and skips
    one sort of each box's rows (O(k log k) for k matches), which is most of the time a
    fast-layout report of large boxes takes (section *Layouts side by side* of
    ``benches/RESULTS.md``): worth it when the rows' order does not matter."""

BY = """\
by
    A keyed tree's (built with ``by=``) box key: a scalar, or an array broadcast with the
    bounds (a tuple of one per key column for several columns). A box asks only the points
    of its own key; a key the tree does not hold answers 0, no rows and a zero sum, and a
    key of another type than the tree's keys raises ``TypeError``. Required for a keyed
    tree, refused for one built without keys."""

FRAME_BY = """\
by
    A keyed tree's box keys: the label of the boxes frame's key column (a list of labels for
    several key columns, in the order the tree's were given). Each box asks only the points
    of its own key; a key the tree does not hold answers nothing, a box with a missing key
    raises. Required for a keyed tree."""

_PLACEHOLDERS = {
    "{array bounds}": ARRAY_BOUNDS,
    "{frame bounds}": FRAME_BOUNDS,
    "{ordered}": ORDERED,
    "{by}": BY,
    "{frame by}": FRAME_BY,
}


def document_bounds(func: Any) -> Any:
    """Replace a ``{array bounds}``, ``{frame bounds}``, ``{ordered}`` or ``{by}`` line of `func`'s
    docstring by the description above, at the line's indentation."""
    lines = []
    for line in (func.__doc__ or "").split("\n"):
        text = _PLACEHOLDERS.get(line.strip())
        if text is None:
            lines.append(line)
            continue
        indent = line[: len(line) - len(line.lstrip())]
        lines.extend(indent + part if part else "" for part in text.split("\n"))
    func.__doc__ = "\n".join(lines)
    return func
