"""How the points in a box are spread: min, max, quantiles and the k extreme rows.

The engine answers order statistics, the value of the k-th smallest x or y among a box's
points, in O(log n) a box (``rust_core/src/stats.rs``). A quantile is numpy's definition
applied to those: this module computes, per box and per probability, the ranks numpy's
``method`` reads (``numpy.quantile`` on the box's values would sort them and read the same
ranks) and interpolates between them with numpy's own arithmetic, so that the answer is
numpy's to the last bit, in numpy's result dtype.

>>> import numpy as np, boxwood
>>> tree = boxwood.RangeTree(np.arange(10.0), np.arange(10.0) ** 2)
>>> float(tree.quantile(0, 4, 0, 100, 0.5)), float(np.quantile([0, 1, 4, 9, 16], 0.5))
(4.0, 4.0)
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np

from . import _bounds
from ._columns import AxisInfo, axis_value
from ._keys import broadcast_with_keys
from ._parts import TreeParts

Of = Literal["x", "y"]

#: numpy.quantile's methods, each with its virtual index (a float for the interpolating
#: ones, an integer for those that pick one value) as numpy computes it for a sample of
#: size `n` (here an array: one size a box) and probabilities `q`. Copied from numpy 2's
#: ``_QuantileMethods`` so that every rounding is the same; tests/test_stats.py checks
#: every method against numpy.quantile itself.
_PICKING = ("inverted_cdf", "closest_observation", "lower", "higher", "nearest")
_INTERPOLATING = (
    "averaged_inverted_cdf",
    "interpolated_inverted_cdf",
    "hazen",
    "weibull",
    "linear",
    "median_unbiased",
    "normal_unbiased",
    "midpoint",
)
METHODS = _PICKING + _INTERPOLATING


def _hyndman_fan(n: np.ndarray, q: np.ndarray, alpha: float, beta: float) -> np.ndarray:
    return n * q + (alpha + q * (1 - alpha - beta)) - 1


def _to_boundaries(index: np.ndarray, take_previous: Any) -> np.ndarray:
    previous = np.floor(index)
    gamma = index - previous
    res = np.where(take_previous(gamma, index), previous, previous + 1).astype(np.intp)
    res[res < 0] = 0
    return res


def _virtual_index(method: str, n: np.ndarray, q: np.ndarray) -> np.ndarray:
    if method == "inverted_cdf":
        return _to_boundaries(n * q - 1, lambda gamma, _: gamma == 0)
    if method == "closest_observation":
        return _to_boundaries(
            n * q - 1 - 0.5, lambda gamma, index: (gamma == 0) & (np.floor(index) % 2 == 1)
        )
    if method == "lower":
        return np.floor((n - 1) * q).astype(np.intp)
    if method == "higher":
        return np.ceil((n - 1) * q).astype(np.intp)
    if method == "nearest":
        return np.around((n - 1) * q).astype(np.intp)
    if method == "averaged_inverted_cdf":
        return n * q - 1
    if method == "midpoint":
        return 0.5 * (np.floor((n - 1) * q) + np.ceil((n - 1) * q))
    if method == "linear":
        return (n - 1) * q
    alpha_beta = {
        "interpolated_inverted_cdf": (0, 1),
        "hazen": (0.5, 0.5),
        "weibull": (0, 0),
        "median_unbiased": (1 / 3.0, 1 / 3.0),
        "normal_unbiased": (3 / 8.0, 3 / 8.0),
    }
    return _hyndman_fan(n, q, *alpha_beta[method])


def _gamma(method: str, virtual: np.ndarray, previous: np.ndarray) -> np.ndarray:
    gamma = np.asanyarray(virtual - previous)
    if method == "averaged_inverted_cdf":
        gamma = np.where(gamma == 0, 0.5, 1.0)
    elif method == "midpoint":
        gamma = np.where(virtual % 1 == 0, 0.0, 0.5)
    return np.asanyarray(gamma, dtype=virtual.dtype)


def _lerp(a: np.ndarray, b: np.ndarray, t: np.ndarray, weak: np.dtype | None) -> np.ndarray:
    """numpy's ``_lerp``, operation for operation. `weak` is the dtype a Python float `t`
    would have been cast to (numpy's weak promotion), or None."""
    diff_b_a = b - a
    scaled = t if weak is None else t.astype(weak)
    rest = (1 - t) if weak is None else (1 - t).astype(weak)
    lerp_interpolation = np.asanyarray(np.add(a, diff_b_a * scaled))
    np.subtract(
        b,
        diff_b_a * rest,
        out=lerp_interpolation,
        where=t >= 0.5,
        casting="unsafe",
        dtype=type(lerp_interpolation.dtype),
    )
    return lerp_interpolation


# ---------------------------------------------------------------- boxes and values


def _axis(parts: TreeParts, of: Any) -> AxisInfo:
    return axis_of(parts.x, parts.y, of)


def axis_of(x: AxisInfo, y: AxisInfo, of: Any) -> AxisInfo:
    """The axis `of` names (``"x"`` or ``"y"``)."""
    if of == "x":
        return x
    if of == "y":
        return y
    raise ValueError(f"of must be 'x' or 'y', got {of!r}")


def _boxes(
    parts: TreeParts, box: tuple[Any, ...], inclusive: Any, codes: np.ndarray | None
) -> tuple[tuple[int, ...], tuple[np.ndarray, ...], np.ndarray | None]:
    """The boxes' broadcast shape, four flat engine bound arrays and flat key codes."""
    shape, arrays = _bounds.box_arrays(parts.x, parts.y, box, inclusive)
    if codes is None:
        return shape, arrays, None
    return broadcast_with_keys(shape, arrays, codes)


def _order_stats(
    parts: TreeParts,
    arrays: tuple[np.ndarray, ...],
    keys: np.ndarray | None,
    inclusive: Any,
    of: Of,
    ranks: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Values (in the axis's own dtype, shaped as `ranks`: boxes by ranks) and whether each
    rank exists in its box."""
    per_box = ranks.shape[1]
    flat = np.ascontiguousarray(ranks.ravel(), dtype=np.int64)
    a, b, c, d = arrays
    values, found = parts.engine.kth_many(a, b, c, d, inclusive, of, flat, per_box, keys)
    return as_axis_dtype(_axis(parts, of), values).reshape(ranks.shape), found.reshape(ranks.shape)


def as_axis_dtype(axis: AxisInfo, values: np.ndarray) -> np.ndarray:
    """Engine values (float64, or int64 numbers or ticks) as the axis's own dtype; tz-aware
    datetimes as naive UTC."""
    if axis.is_time:
        return values.view(axis.dtype)
    return values.astype(axis.dtype)


def _missing(result: np.ndarray, empty: np.ndarray) -> Any:
    """`result` with the entries of empty boxes missing: NaN, NaT, or masked for integers
    (which have no NaN)."""
    if result.dtype.kind in "iub":
        return np.ma.MaskedArray(result, mask=np.broadcast_to(empty, result.shape).copy())
    if empty.any():
        result = result.copy()
        result[np.broadcast_to(empty, result.shape)] = np.array(
            "NaT" if result.dtype.kind in "Mm" else np.nan, dtype=result.dtype
        )
    return result


def _scalar(axis: AxisInfo, result: Any) -> Any:
    """One answer: a numpy scalar of the result's dtype (a tz-aware axis's in its zone), NaN
    or NaT for an empty box, ``numpy.ma.masked`` for an empty box of integers."""
    value = result[()]
    if value is np.ma.masked or axis.tz is None or result.dtype.kind != "M":
        return value
    if np.isnat(value):
        return value
    return axis_value(axis, int(value.view(np.int64)))


# ---------------------------------------------------------------- the statistics


def extreme(
    parts: TreeParts,
    box: tuple[Any, ...],
    inclusive: Any,
    of: Any,
    codes: np.ndarray | None,
    largest: bool,
) -> Any:
    """The smallest (or `largest`) value of axis `of` in each box."""
    axis = _axis(parts, of)
    shape, arrays, keys = _boxes(parts, box, inclusive, codes)
    q = arrays[0].size
    ranks = np.full((q, 1), -1 if largest else 0, dtype=np.int64)
    values, found = _order_stats(parts, arrays, keys, inclusive, of, ranks)
    result = _missing(values[:, 0], ~found[:, 0]).reshape(shape)
    return _scalar(axis, result) if shape == () else result


def quantile(
    parts: TreeParts,
    box: tuple[Any, ...],
    q: Any,
    inclusive: Any,
    of: Any,
    method: Any,
    codes: np.ndarray | None,
) -> Any:
    """numpy.quantile of each box's values of axis `of`."""
    axis = _axis(parts, of)
    probs, weak_q = probabilities(q, method)
    shape, arrays, keys = _boxes(parts, box, inclusive, codes)
    a, b, c, d = arrays
    # One search and count a box; the ranks numpy reads depend on the counts.
    counted, n = parts.engine.count_for_stats(a, b, c, d, inclusive, of, keys)

    def fetch(ranks: np.ndarray) -> np.ndarray:
        flat = np.ascontiguousarray(ranks.ravel(), dtype=np.int64)
        values, _ = parts.engine.kth_counted(counted, flat, ranks.shape[1])
        return as_axis_dtype(axis, values).reshape(ranks.shape)

    result = quantiles_of_counted(fetch, method, n, probs, weak_q)
    result = result.reshape(shape + probs.shape)
    return _scalar(axis, result) if result.ndim == 0 else result


def probabilities(q: Any, method: Any) -> tuple[np.ndarray, bool]:
    """`q` as an array of probabilities (checked), and whether numpy would treat it as a
    weak Python number; `method` checked to be one of numpy's."""
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    weak_q = type(q) in (int, float)  # numpy's rule: a Python number keeps the data's dtype
    probs = np.asanyarray(q)
    if probs.ndim > 1:
        raise ValueError(f"q must be a scalar or 1-D, got shape {probs.shape}")
    if probs.dtype.kind not in "iuf":
        raise TypeError(f"q must hold probabilities (numbers), got dtype {probs.dtype}")
    if probs.size and not (np.all(probs >= 0) and np.all(probs <= 1)):
        raise ValueError("q must be in the range [0, 1]")
    return probs, weak_q


def quantiles_of_counted(
    fetch: Any, method: str, n: np.ndarray, probs: np.ndarray, weak_q: bool
) -> Any:
    """numpy.quantile of boxes holding `n` points each (boxes by probabilities, empty boxes
    missing), from `fetch`, which gives the values of ranks (boxes by ranks, each rank below
    its box's count) in the axis's dtype."""
    n = np.asarray(n).reshape(-1, 1)
    result = _quantiles_of(fetch, method, n, probs.reshape(1, -1), weak_q)
    return _missing(result, n == 0)


def extremes_of_counted(fetch: Any, n: np.ndarray) -> tuple[Any, Any]:
    """The smallest and largest value of boxes holding `n` points each (empty boxes
    missing), from `fetch` as :func:`quantiles_of_counted` takes it."""
    n = np.asarray(n)
    last = np.maximum(n, 1) - 1
    values = fetch(np.stack([np.zeros_like(last), last], axis=1))
    return _missing(values[:, 0], n == 0), _missing(values[:, 1], n == 0)


def _quantiles_of(
    fetch: Any,
    method: str,
    n: np.ndarray,
    q: np.ndarray,
    weak_q: bool,
) -> np.ndarray:
    """numpy's ``_quantile`` with one sample size a box: boxes by probabilities. `fetch`
    gives the values of ranks (boxes by ranks) in the axis's dtype."""
    size = np.maximum(n, 1)  # empty boxes are masked by the caller; any size serves them
    virtual = np.asanyarray(_virtual_index(method, size, q))
    picking = method in _PICKING or (
        method == "linear" and np.issubdtype(virtual.dtype, np.integer)
    )
    if picking:
        return fetch(np.broadcast_to(virtual, (n.shape[0], q.shape[1])))
    # numpy's neighbours: the last value past the end (index -1), the first before the start.
    above, below = virtual >= size - 1, virtual < 0
    floor = np.where(below, 0, np.where(above, -1, np.floor(virtual)))
    previous = np.where(floor < 0, size - 1, floor).astype(np.intp)
    following = np.where(above, size - 1, np.where(below, 0, previous + 1)).astype(np.intp)
    m = q.shape[1]
    ranks = np.empty((n.shape[0], 2 * m), dtype=np.int64)
    ranks[:, :m], ranks[:, m:] = previous, following
    values = fetch(ranks)
    # numpy's gamma is the virtual index less the neighbour index (-1 past the end).
    gamma = _gamma(method, virtual, floor)
    weak = values.dtype if weak_q and values.dtype.kind == "f" else None
    return _lerp(values[:, :m], values[:, m:], gamma, weak)


def extreme_rows(
    parts: TreeParts,
    box: tuple[Any, ...],
    k: Any,
    inclusive: Any,
    of: Any,
    largest: bool,
    codes: np.ndarray | None,
) -> tuple[np.ndarray, np.ndarray]:
    """CSR ``(offsets, rows)`` of each box's `k` largest (or smallest) points on `of`."""
    _axis(parts, of)
    shape, arrays, keys = _boxes(parts, box, inclusive, codes)
    counts = np.asarray(k)
    if counts.dtype.kind not in "iu" or (counts.size and counts.min() < 0):
        raise ValueError(f"k must be a non-negative integer (or an array of them), got {k!r}")
    try:
        per_box = np.broadcast_to(counts, shape)
    except ValueError:
        raise ValueError(
            f"k of shape {counts.shape} does not broadcast with the boxes' shape {shape}"
        ) from None
    flat = np.ascontiguousarray(per_box.ravel(), dtype=np.uint64)
    a, b, c, d = arrays
    offsets, rows = parts.engine.extreme_rows_many(
        a, b, c, d, inclusive, of, flat, bool(largest), keys
    )
    source_rows = parts.provenance.source_rows
    if source_rows is not None:
        rows = source_rows[rows]  # ascending, so each box's rows stay ascending
    return offsets, rows
