"""Grid counts: a 2-D histogram of the tree's points for any bin edges, without a data pass.

>>> import numpy as np, boxwood
>>> tree = boxwood.RangeTree([0.5, 1.0, 1.5, 2.0], [0, 0, 1, 1], weights=[1, 2, 3, 4])
>>> tree.grid([0, 1, 2], [0, 1])           # bins [0, 1) and [1, 2] by [0, 1]
array([[1],
       [3]])
>>> tree.grid([0, 1, 2], [0, 1], weighted=True)
array([[1],
       [9]])

Bins follow ``numpy.histogram2d``: ``[e_i, e_{i+1})``, the last bin on each axis closed. The
tree answers one dominance count ("how many points have x < e and y < f") per grid corner,
and inclusion–exclusion turns corners into cells: O(cells · log n), whatever n is. The
closed last edges come from exact "x == e" slabs, so every count is exact on every axis
type; weight sums are differences of corner sums (exact for integer weights; for float
weights within a few units in the last place of the corner sums, i.e. of the total weight).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ._bounds import DOWN, UP, array_bound
from ._boxwood import _Tree
from ._columns import AxisInfo, _to_numpy
from ._parts import TreeParts


def grid(
    parts: TreeParts,
    x_edges: Any,
    y_edges: Any,
    *,
    weighted: bool = False,
    codes: np.ndarray | None = None,
) -> np.ndarray:
    """Counts (or weight sums) per cell of the tree made of `parts` (see RangeTree.grid);
    a keyed tree's grid of each key code in `codes` (their shape leads the result's)."""
    if weighted and parts.engine.weights_kind is None:
        raise ValueError("this tree was built without weights; pass weights= to use weighted=True")
    x_open, x_closed = _edges(x_edges, parts.x, "x_edges")
    y_open, y_closed = _edges(y_edges, parts.y, "y_edges")
    query = _Corners(parts.engine, weighted, codes)
    c = query.dominance(x_open, x_closed, y_open, y_closed)
    return c[..., 1:, 1:] - c[..., :-1, 1:] - c[..., 1:, :-1] + c[..., :-1, :-1]


def _edges(values: Any, axis: AxisInfo, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Bin edges as engine numbers: rounded for ``coordinate >= edge`` and ``< edge`` (up),
    and for ``coordinate <= edge`` (down), after checking them as numpy does."""
    arr = _to_numpy(values, name)
    if arr.ndim != 1 or arr.shape[0] < 2:
        raise ValueError(f"{name} must be a 1-D array of at least 2 edges, got shape {arr.shape}")
    _check_no_missing(arr, name)
    _check_increasing(arr, name)
    return array_bound(values, axis, name, UP), array_bound(values, axis, name, DOWN)


def _check_no_missing(arr: np.ndarray, name: str) -> None:
    if arr.dtype.kind == "f":
        bad = np.isnan(arr)
    elif arr.dtype.kind in "Mm":
        bad = np.isnat(arr)
    elif arr.dtype.kind == "O":
        bad = np.array([v is None or v != v for v in arr], dtype=bool)  # NaN and NaT != self
    else:
        return
    if bad.any():
        raise ValueError(f"{name} contains NaN or NaT at position {int(np.flatnonzero(bad)[0])}")


def _check_increasing(arr: np.ndarray, name: str) -> None:
    if arr.dtype.kind in "US":
        try:
            arr = arr.astype("datetime64")
        except ValueError as exc:
            raise ValueError(f"{name} holds a string that is not a date or time: {exc}") from None
    try:
        falls = np.flatnonzero(arr[1:] < arr[:-1])
    except TypeError as exc:
        raise TypeError(f"{name} holds values that do not compare: {exc}") from None
    if falls.size:
        i = int(falls[0])
        raise ValueError(
            f"{name} must increase monotonically (as numpy.histogram2d requires), but "
            f"edge {i + 1} ({arr[i + 1]}) is below edge {i} ({arr[i]})"
        )


class _Corners:
    """Batched box queries on one tree, counts or weight sums."""

    def __init__(self, engine: _Tree, weighted: bool, codes: np.ndarray | None = None) -> None:
        self._many = engine.sum_many if weighted else engine.count_many
        self._codes = codes

    def ask(self, inclusive: Any, x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any) -> np.ndarray:
        """One answer per element of the bounds' broadcast, in its shape (after the key
        codes' shape, for a keyed tree)."""
        arrays = np.broadcast_arrays(*(np.asarray(b) for b in (x_lo, x_hi, y_lo, y_hi)))
        shape = arrays[0].shape
        if self._codes is None:
            a, b, c, d = (np.ascontiguousarray(v.ravel()) for v in arrays)
            return self._many(a, b, c, d, inclusive).reshape(shape)
        full = self._codes.shape + shape
        keys = self._codes.reshape(self._codes.shape + (1,) * len(shape))
        keys = np.ascontiguousarray(np.broadcast_to(keys, full).ravel(), dtype=np.int64)
        a, b, c, d = (np.ascontiguousarray(np.broadcast_to(v, full).ravel()) for v in arrays)
        return self._many(a, b, c, d, inclusive, keys).reshape(full)

    def dominance(self, x_open, x_closed, y_open, y_closed) -> np.ndarray:
        """``D[i, j]``: points with ``x < e_i`` and ``y < f_j``, except ``<=`` for the last
        edge of either axis (histogram2d closes the last bins)."""
        inf = np.inf
        corners = self.ask("left", -inf, x_open[:, None], -inf, y_open[None, :])
        x_top, x_top_lo, y_top, y_top_lo = x_closed[-1], x_open[-1], y_closed[-1], y_open[-1]
        # x == last edge with y < f_j: (x == e, y <= f_j) less (x == e, y == f_j).
        on_x_top = self.ask("both", x_top_lo, x_top, -inf, y_closed) - self.ask(
            "both", x_top_lo, x_top, y_open, y_closed
        )
        # x < e_i with y == last edge, the same way round.
        on_y_top = self.ask("both", -inf, x_closed, y_top_lo, y_top) - self.ask(
            "both", x_open, x_closed, y_top_lo, y_top
        )
        on_both = self.ask("both", x_top_lo, x_top, y_top_lo, y_top)
        corners[..., -1, :-1] += on_x_top[..., :-1]
        corners[..., :-1, -1] += on_y_top[..., :-1]
        corners[..., -1, -1] += on_x_top[..., -1] + on_y_top[..., -1] + on_both
        return corners
