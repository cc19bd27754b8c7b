"""A reference for box queries that is obviously right: every point against every box.

Nothing here is clever. Coordinates and bounds are turned into exact Python values first:

* integer columns and bounds become Python ``int`` (never float64),
* float columns and bounds become Python ``float`` (float32 widens exactly),
* datetime64 / timedelta64 columns and bounds become Python ``int`` counts of attoseconds,
  a unit every numpy time unit is a whole multiple of, so different units compare exactly,
* ``±inf`` stays a float, which Python compares exactly against any ``int``.

Then each point is tested against each box with Python's own comparison operators, which
are exact between ``int`` and ``float``. Sums use ``math.fsum`` (correctly rounded) for float
weights and Python's unbounded ``int`` for integer weights, so an int64 overflow shows up as
a value outside the int64 range instead of wrapping.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

INCLUSIVE = ("both", "neither", "left", "right")
INT64_MIN = -(2**63)
INT64_MAX = 2**63 - 1

# Attoseconds per tick of each fixed-length numpy time unit.
_ATTOSECONDS = {
    "as": 1,
    "fs": 10**3,
    "ps": 10**6,
    "ns": 10**9,
    "us": 10**12,
    "ms": 10**15,
    "s": 10**18,
    "m": 60 * 10**18,
    "h": 3600 * 10**18,
    "D": 86400 * 10**18,
    "W": 7 * 86400 * 10**18,
}


def _time_exact(arr: np.ndarray) -> list[int]:
    """Attoseconds (since the epoch, or of duration) of every element, as Python ints."""
    unit, step = np.datetime_data(arr.dtype)
    if unit in ("Y", "M"):
        if arr.dtype.kind == "m":
            raise ValueError("the reference has no fixed length for calendar timedelta units")
        # Years and months start at midnight: the cast to days is exact.
        arr = arr.astype("datetime64[D]")
        unit, step = "D", 1
    if unit == "generic":
        raise ValueError("generic time units have no length")
    factor = _ATTOSECONDS[unit] * step
    ticks = arr.view(np.int64).tolist()
    if any(t == INT64_MIN for t in ticks):
        raise ValueError("the reference does not take NaT")
    return [int(t) * factor for t in ticks]


def _as_array(values: Any) -> np.ndarray:
    """A numpy array from an array, list, pandas Series or scalar (0-d for scalars)."""
    if hasattr(values, "to_datetime64"):  # pandas Timestamp (before datetime: a subclass)
        return np.asarray(values.to_datetime64())
    if hasattr(values, "to_timedelta64"):  # pandas Timedelta
        return np.asarray(values.to_timedelta64())
    if hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        return values.to_numpy()
    if isinstance(values, dt.datetime):
        return np.asarray(np.datetime64(values))
    if isinstance(values, dt.timedelta):
        return np.asarray(np.timedelta64(values))
    return np.asarray(values)


def exact_values(values: Any) -> list:
    """The elements of a 1-D (or 0-d) column as exact Python values, flattened in C order."""
    if isinstance(values, bool):
        raise TypeError("bools are not coordinates")
    # np.float64 is a float subclass that would compare against ints through float64:
    # make every scalar a plain Python number.
    if isinstance(values, float):
        return [float(values)]
    if isinstance(values, int):
        return [int(values)]
    arr = _as_array(values)
    flat = arr.reshape(-1)
    kind = arr.dtype.kind
    if kind in "Mm":
        return _time_exact(flat)
    if kind in "iu":
        return [int(v) for v in flat.tolist()]
    if kind == "f":
        out = [float(v) for v in flat.tolist()]
        if any(math.isnan(v) for v in out):
            raise ValueError("the reference does not take NaN")
        return out
    if kind == "O" and all(isinstance(v, (int, float)) for v in flat.tolist()):
        # Python ints and floats compare exactly with each other, whatever their size.
        return [v if isinstance(v, int) else float(v) for v in flat.tolist()]
    raise TypeError(f"the reference does not take dtype {arr.dtype}")


def _bound_grid(bound: Any) -> np.ndarray:
    """A bound as an object array of exact Python values, in the bound's own shape."""
    if isinstance(bound, (int, float)) and not isinstance(bound, bool):
        shape: tuple[int, ...] = ()
    else:
        shape = _as_array(bound).shape
    out = np.empty(shape, dtype=object)
    out.reshape(-1)[:] = exact_values(bound)
    return out


def is_scalar(bound: Any) -> bool:
    """Whether a bound is a scalar (a Python or numpy number, or a time scalar)."""
    if isinstance(bound, (np.ndarray, list, tuple)) or hasattr(bound, "to_numpy"):
        return False
    return _as_array(bound).ndim == 0


def boxes(x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any) -> tuple[tuple[int, ...], list[tuple]]:
    """The broadcast shape of the four bounds and the boxes, flattened in C order."""
    grids = np.broadcast_arrays(*(_bound_grid(b) for b in (x_lo, x_hi, y_lo, y_hi)))
    shape = grids[0].shape
    flat = [g.reshape(-1).tolist() for g in grids]
    return shape, list(zip(*flat))


def inside(v: Any, lo: Any, hi: Any, inclusive: str) -> bool:
    """``lo <op> v <op> hi`` with the ends closed or open as ``inclusive`` says."""
    if inclusive == "both":
        return lo <= v <= hi
    if inclusive == "neither":
        return lo < v < hi
    if inclusive == "left":
        return lo <= v < hi
    if inclusive == "right":
        return lo < v <= hi
    raise ValueError(f"unknown inclusive {inclusive!r}")


def _rows_per_box(x: Any, y: Any, bounds: Sequence[Any], inclusive: str):
    xs = exact_values(x)
    ys = exact_values(y)
    if len(xs) != len(ys):
        raise ValueError("x and y differ in length")
    shape, box_list = boxes(*bounds)
    per_box = []
    for x_lo, x_hi, y_lo, y_hi in box_list:
        per_box.append(
            [
                i
                for i in range(len(xs))
                if inside(xs[i], x_lo, x_hi, inclusive) and inside(ys[i], y_lo, y_hi, inclusive)
            ]
        )
    return shape, per_box


def all_scalar(bounds: Sequence[Any]) -> bool:
    return all(is_scalar(b) for b in bounds)


def ref_rows(
    x: Any, y: Any, x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any, inclusive: str = "both"
) -> list[list[int]]:
    """Sorted row positions of the points in each box (boxes flattened in C order)."""
    _, per_box = _rows_per_box(x, y, (x_lo, x_hi, y_lo, y_hi), inclusive)
    return per_box  # built by scanning rows in ascending order: already sorted


def ref_count(
    x: Any, y: Any, x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any, inclusive: str = "both"
) -> int | np.ndarray:
    """Number of points in each box: a Python int for four scalar bounds, else an int64 array
    of the broadcast shape."""
    bounds = (x_lo, x_hi, y_lo, y_hi)
    shape, per_box = _rows_per_box(x, y, bounds, inclusive)
    counts = [len(r) for r in per_box]
    if all_scalar(bounds):
        return counts[0]
    return np.array(counts, dtype=np.int64).reshape(shape)


def ref_sum(
    x: Any,
    y: Any,
    weights: Any,
    x_lo: Any,
    x_hi: Any,
    y_lo: Any,
    y_hi: Any,
    inclusive: str = "both",
) -> int | float | np.ndarray:
    """Weight sum of each box, exactly: a Python number for four scalar bounds, else an object
    array of Python numbers (ints may lie outside the int64 range: that is an overflow)."""
    bounds = (x_lo, x_hi, y_lo, y_hi)
    ws = exact_values(weights)
    is_float = _as_array(weights).dtype.kind == "f"
    shape, per_box = _rows_per_box(x, y, bounds, inclusive)
    sums = []
    for rows in per_box:
        picked = [ws[i] for i in rows]
        sums.append(math.fsum(picked) if is_float else sum(picked))
    if all_scalar(bounds):
        return sums[0]
    out = np.empty(len(sums), dtype=object)
    out[:] = sums
    return out.reshape(shape)


def fits_int64(v: int) -> bool:
    return INT64_MIN <= v <= INT64_MAX


# ---------------------------------------------------------------- keyed boxes


def _key_grid(box_keys: Any) -> np.ndarray:
    """Boxes' keys as an object array of Python values (tuples for several key columns),
    in the keys' own shape."""
    if isinstance(box_keys, tuple):  # one key (or array of keys) per key column
        parts = [np.asarray(k, dtype=object) for k in box_keys]
        grids = np.broadcast_arrays(*parts)
        out = np.empty(grids[0].shape, dtype=object)
        flat = out.reshape(-1)
        for i, key in enumerate(zip(*(g.reshape(-1).tolist() for g in grids))):
            flat[i] = key
        return out
    arr = np.asarray(box_keys, dtype=object)
    out = np.empty(arr.shape, dtype=object)
    out.reshape(-1)[:] = arr.reshape(-1).tolist()
    return out


def keyed_ref_rows(
    x: Any,
    y: Any,
    point_keys: Sequence[Any],
    x_lo: Any,
    x_hi: Any,
    y_lo: Any,
    y_hi: Any,
    box_keys: Any,
    inclusive: str = "both",
) -> tuple[tuple[int, ...], list[list[int]]]:
    """``(broadcast shape, sorted rows per box)``: the points in each box whose key equals
    the box's key by Python's ``==`` (point keys as Python values, tuples for several
    columns), boxes being the broadcast of the four bounds and the keys, in C order."""
    xs, ys = exact_values(x), exact_values(y)
    grids = [_bound_grid(b) for b in (x_lo, x_hi, y_lo, y_hi)] + [_key_grid(box_keys)]
    grids = np.broadcast_arrays(*grids)
    shape = grids[0].shape
    flat = [g.reshape(-1).tolist() for g in grids]
    per_box = []
    for a, b, c, d, key in zip(*flat):
        per_box.append(
            [
                i
                for i in range(len(xs))
                if point_keys[i] == key
                and inside(xs[i], a, b, inclusive)
                and inside(ys[i], c, d, inclusive)
            ]
        )
    return shape, per_box


# ---------------------------------------------------------------- order statistics


def ref_sorted_values(x: Any, y: Any, bounds: Sequence[Any], inclusive: str, of: str) -> list[list]:
    """Each box's values of axis `of` (exact Python values), sorted: the sample whose order
    statistics and quantiles the tree answers."""
    values = exact_values(x if of == "x" else y)
    _, per_box = _rows_per_box(x, y, bounds, inclusive)
    return [sorted(values[i] for i in rows) for rows in per_box]


def ref_extreme_rows(
    x: Any, y: Any, bounds: Sequence[Any], inclusive: str, of: str, k: int, largest: bool
) -> list[list[int]]:
    """Each box's `k` rows with the largest (smallest) values of `of`, ties by row: sort by
    value (descending for largest), then row, take `k`; returned ascending."""
    values = exact_values(x if of == "x" else y)
    _, per_box = _rows_per_box(x, y, bounds, inclusive)
    out = []
    for rows in per_box:
        order = sorted(rows, key=lambda r: (-values[r] if largest else values[r], r))
        out.append(sorted(order[:k]))
    return out


def ref_quantile(sorted_values: list, q: float, method: str) -> Any:
    """The `method` quantile of a sorted sample, from the definitions of Hyndman and Fan
    (1996) as numpy's documentation states them (from memory): for the methods that pick a
    value, that value exactly; for ``linear`` and ``midpoint``, the interpolation in exact
    rational arithmetic (a Fraction). None for an empty sample."""
    from fractions import Fraction

    v, n = sorted_values, len(sorted_values)
    if n == 0:
        return None
    h = (n - 1) * q  # the index of linear, lower, higher, nearest and midpoint (0-based)
    if method == "lower":
        return v[math.floor(h)]
    if method == "higher":
        return v[math.ceil(h)]
    if method == "nearest":
        return v[round(h)]  # Python's round: half to even, as numpy's around
    if method in ("linear", "midpoint"):
        j = min(math.floor(h), n - 1)
        g = Fraction(h) - j if method == "linear" else Fraction(0 if h == j else 1, 2)
        upper = v[min(j + 1, n - 1)]
        return Fraction(v[j]) + g * (Fraction(upper) - Fraction(v[j]))
    if method == "inverted_cdf":  # the smallest value whose share of the sample reaches q
        index = n * q - 1
        j = math.floor(index)
        pick = j if index == j else j + 1
        return v[min(max(pick, 0), n - 1)]
    if method == "closest_observation":  # the nearest order statistic, the even one at ties
        index = n * q - 1.5
        j = math.floor(index)
        pick = j if (index == j and j % 2 == 1) else j + 1
        return v[min(max(pick, 0), n - 1)]
    raise ValueError(f"the reference has no method {method!r}")
