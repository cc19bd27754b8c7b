"""Routing boxes to shards, and the boundaries between shards.

>>> import numpy as np
>>> from boxwood._columns import AxisInfo
>>> from boxwood.dask._routing import Plan
>>> axis = AxisInfo("x", np.dtype("float64"), "float")
>>> plan = Plan(axis, axis, np.array([10.0, 20.0]))     # shards (-inf, 10), [10, 20), [20, inf)
>>> first, last = plan.route([np.array([5.0, 12.0]), np.array([15.0, 12.0])], "both")
>>> first.tolist(), last.tolist()
([0, 1], [1, 1])

Shard ``i`` holds the points with ``boundaries[i - 1] <= x < boundaries[i]``; a box goes to
every shard its x range overlaps, found with a tiny engine tree over the boundaries so that
bounds of any type compare exactly.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from .. import _bounds
from .._bounds import per_box_arrays
from .._boxwood import _Tree
from .._columns import AxisInfo
from .._frames import box_bounds, box_keys, naming_columns

I64_MAX = 2**63 - 1


class Plan:
    """What turns boxes into work for shards: the two axes and the shard boundaries.

    It converts bounds exactly as a shard's own tree would (the same axis descriptions), so
    the shards can be asked in the engine's numbers, and it finds each box's shards with a
    tiny engine tree over the boundaries, which compares bounds of any type exactly.
    Pickled to the workers; the router is rebuilt there on first use.
    """

    def __init__(
        self,
        x_axis: AxisInfo,
        y_axis: AxisInfo,
        boundaries: np.ndarray,
        key_codes: np.ndarray | None = None,
        key_count: int = 0,
    ) -> None:
        self.x_axis, self.y_axis, self.boundaries = x_axis, y_axis, boundaries
        #: A keyed tree's boundaries are (key code, x) pairs: their codes, ascending.
        self.key_codes, self.key_count = key_codes, key_count
        self._router: _Tree | None = None

    def __getstate__(self) -> dict[str, Any]:
        return {
            "x_axis": self.x_axis,
            "y_axis": self.y_axis,
            "boundaries": self.boundaries,
            "key_codes": self.key_codes,
            "key_count": self.key_count,
        }

    def __setstate__(self, state: dict[str, Any]) -> None:
        (boundaries,) = aligned([state["boundaries"]])
        codes = state["key_codes"]
        codes = None if codes is None else aligned([codes])[0]
        self.__init__(  # type: ignore[misc]
            state["x_axis"], state["y_axis"], boundaries, codes, state["key_count"]
        )

    @property
    def router(self) -> _Tree:
        """An engine tree of the boundaries (all at y = 0), keyed by their codes when the
        boundaries are (key code, x) pairs."""
        if self._router is None:
            ys = np.zeros(self.boundaries.size)
            if self.key_codes is None:
                self._router = _Tree(self.boundaries, ys, None, "compact")
            else:
                codes = self.key_codes.astype(np.uint32)
                self._router = _Tree(self.boundaries, ys, None, "compact", codes, self.key_count)
        return self._router

    def engine_bounds(self, boxes: Any, specs: Sequence[Any], inclusive: Any) -> list[np.ndarray]:
        """The bounds of a boxes frame in the shards' engine numbers, one value a box."""
        bounds, names = box_bounds(boxes, specs)
        with naming_columns(names):
            return per_box_arrays(self.x_axis, self.y_axis, bounds, inclusive, len(boxes))

    def route(
        self, bounds: Sequence[np.ndarray], inclusive: str, codes: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """The first and last shard each box can have points in (first > last: none).

        Shard ``i`` holds ``b[i] <= x < b[i + 1]`` (``b[0] = -inf``, ``b[k] = +inf``, the
        top closed). A box can have points in shard ``i`` only if ``b[i + 1] > x_lo``, so the
        first is the number of boundaries ``<= x_lo``; and only if ``b[i]`` passes the
        box's upper x test, so the last is the number of boundaries ``<= x_hi`` (``< x_hi``
        when the upper side is open).

        A keyed tree's boundaries are (key code, x) pairs in that order, so for a box of
        key code ``c`` the boundaries ``<=`` a bound are those of smaller codes and those of
        code ``c`` whose x is ``<=`` it; a box of a key the tree does not hold (code -1)
        goes to no shard.
        """
        x_lo, x_hi = aligned(bounds[:2])
        n = x_lo.size
        below, above = np.full(n, -math.inf), np.full(n, math.inf)
        engine = self.router
        hi_closed = inclusive in ("both", "right")
        if codes is None or self.key_codes is None:
            first = engine.count_many(below, x_lo, below, above, "both")
            last = engine.count_many(below, x_hi, below, above, "both" if hi_closed else "left")
            return first, last
        (codes,) = aligned([np.asarray(codes, dtype=np.int64)])
        smaller = np.searchsorted(self.key_codes, codes, side="left").astype(np.int64)
        first = smaller + engine.count_many(below, x_lo, below, above, "both", codes)
        if hi_closed:
            last = smaller + engine.count_many(below, x_hi, below, above, "both", codes)
        else:
            last = smaller + engine.count_many(below, x_hi, below, above, "left", codes)
        absent = codes < 0
        first[absent], last[absent] = 1, 0
        return first, last


def aligned(arrays: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Arrays that crossed the network can arrive unaligned inside a message buffer, and
    the engine takes only aligned contiguous arrays: copy those (and only those)."""
    return [np.require(a, requirements=["C", "A"]) for a in arrays]


def engine_dtype(axis: AxisInfo) -> type:
    return np.float64 if axis.kind == "float" else np.int64


def route_partition(
    part: Any, plan: Plan, specs: Sequence[Any], inclusive: str, keys: Any = None, by: Any = None
) -> dict[str, Any]:
    """A partition's bounds (with a keyed tree's, its boxes' key codes last) and shards."""
    bounds = plan.engine_bounds(part, specs, inclusive)
    codes = None if keys is None else box_codes(keys, part, by)
    first, last = plan.route(bounds, inclusive, codes)
    if codes is not None:
        bounds = [*bounds, codes]
    return {"bounds": bounds, "first": first, "last": last, "index": part.index}


def box_codes(keys: Any, boxes: Any, by: Any) -> np.ndarray:
    """The key codes (``-1`` for keys the tree does not hold) of a boxes frame's keys."""
    return np.ascontiguousarray(keys.codes_of(box_keys(boxes, by)), dtype=np.int64).reshape(-1)


def routed_to(routed: dict[str, Any], shard: int) -> np.ndarray:
    return np.flatnonzero((routed["first"] <= shard) & (shard <= routed["last"]))


def quantile_boundaries(scans: list[dict[str, Any]], shards: int, dtype: type) -> np.ndarray:
    """Interior boundaries at the x quantiles ``1/shards, 2/shards, ...`` of the samples
    (each sample value standing for its share of its partition's rows), distinct and above
    the smallest x, so that no shard is empty by construction."""
    values = [s["sample"] for s in scans if s["sample"].size]
    if not values or shards == 1:
        return np.zeros(0, dtype)
    weights = np.concatenate(
        [np.full(s["sample"].size, s["kept"] / s["sample"].size) for s in scans if s["sample"].size]
    )
    sample = np.concatenate(values)
    order = np.argsort(sample, kind="stable")
    sample, cumulative = sample[order], np.cumsum(weights[order])
    targets = cumulative[-1] * np.arange(1, shards) / shards
    cuts = np.unique(sample[np.minimum(np.searchsorted(cumulative, targets), sample.size - 1)])
    return cuts[cuts > sample[0]].astype(dtype)


def pair_boundaries(
    scans: list[dict[str, Any]], shards: int, dtype: type
) -> tuple[np.ndarray, np.ndarray]:
    """A keyed tree's boundaries: (key code, x) pairs at the quantiles of the samples'
    (code, x) order, as :func:`quantile_boundaries` takes x values; ``(codes, xs)``."""
    taken = [s for s in scans if s["sample_codes"].size]
    if not taken or shards == 1:
        return np.zeros(0, np.int64), np.zeros(0, dtype)
    weights = np.concatenate(
        [np.full(s["sample"].size, s["kept"] / s["sample"].size) for s in taken]
    )
    codes = np.concatenate([s["sample_codes"] for s in taken])
    xs = np.concatenate([s["sample"] for s in taken])
    order = np.lexsort((xs, codes))
    codes, xs, cumulative = codes[order], xs[order], np.cumsum(weights[order])
    targets = cumulative[-1] * np.arange(1, shards) / shards
    at = np.unique(np.minimum(np.searchsorted(cumulative, targets), xs.size - 1))
    cut_codes, cut_xs = codes[at], xs[at]
    distinct = np.ones(at.size, dtype=bool)
    distinct[1:] = (np.diff(cut_codes) != 0) | (cut_xs[1:] != cut_xs[:-1])
    above = (cut_codes > codes[0]) | ((cut_codes == codes[0]) & (cut_xs > xs[0]))
    keep = distinct & above
    return cut_codes[keep].astype(np.int64), cut_xs[keep].astype(dtype)


def given_boundaries(boundaries: Any, axis: AxisInfo) -> np.ndarray:
    """Boundaries given by the caller, as engine numbers. A boundary is a closed lower
    edge (``x >= b``), so it is rounded up into the axis's domain when it falls between."""
    if axis.is_time:
        cuts = _bounds.array_bound(boundaries, axis, "boundaries", _bounds.UP)
        if cuts.dtype.kind == "f" or (cuts.size and np.abs(cuts).max() == I64_MAX):
            raise ValueError("boundaries must be finite times")
        cuts = np.atleast_1d(cuts).astype(np.int64)
    else:
        values = np.atleast_1d(np.asarray(boundaries))
        if values.ndim != 1 or values.dtype.kind not in "iuf":
            raise TypeError(f"boundaries must be a 1-D array of numbers for the {axis.dtype} axis")
        cuts = np.array([_numeric_boundary(v, axis) for v in values.tolist()], engine_dtype(axis))
    if np.any(np.diff(cuts) <= 0):
        raise ValueError("boundaries must be strictly ascending")
    return cuts


def _numeric_boundary(value: float | int, axis: AxisInfo) -> float | int:
    if isinstance(value, float) and not math.isfinite(value):
        raise ValueError(f"boundaries must be finite, got {value}")
    if axis.kind == "float":
        return _bounds._float_between(value, _bounds.UP) if isinstance(value, int) else value
    ceiling = math.ceil(value)
    if not -(2**63) <= ceiling < 2**63:
        raise ValueError(f"boundary {value} is outside the int64 range of the x axis")
    return ceiling
