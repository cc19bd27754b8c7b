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
from .._frames import box_bounds, naming_columns

I64_MAX = 2**63 - 1


class Plan:
    """What turns boxes into work for shards: the two axes and the shard boundaries.

    It converts bounds exactly as a shard's own tree would (the same axis descriptions), so
    the shards can be asked in the engine's numbers, and it finds each box's shards with a
    tiny engine tree over the boundaries, which compares bounds of any type exactly.
    Pickled to the workers; the router is rebuilt there on first use.
    """

    def __init__(self, x_axis: AxisInfo, y_axis: AxisInfo, boundaries: np.ndarray) -> None:
        self.x_axis, self.y_axis, self.boundaries = x_axis, y_axis, boundaries
        self._router: _Tree | None = None

    def __getstate__(self) -> dict[str, Any]:
        return {"x_axis": self.x_axis, "y_axis": self.y_axis, "boundaries": self.boundaries}

    def __setstate__(self, state: dict[str, Any]) -> None:
        (boundaries,) = aligned([state["boundaries"]])
        self.__init__(state["x_axis"], state["y_axis"], boundaries)  # type: ignore[misc]

    @property
    def router(self) -> _Tree:
        """An engine tree of the boundaries (all at y = 0)."""
        if self._router is None:
            self._router = _Tree(self.boundaries, np.zeros(self.boundaries.size), None, "compact")
        return self._router

    def engine_bounds(self, boxes: Any, specs: Sequence[Any], inclusive: Any) -> list[np.ndarray]:
        """The bounds of a boxes frame in the shards' engine numbers, one value a box."""
        bounds, names = box_bounds(boxes, specs)
        with naming_columns(names):
            return per_box_arrays(self.x_axis, self.y_axis, bounds, inclusive, len(boxes))

    def route(self, bounds: Sequence[np.ndarray], inclusive: str) -> tuple[np.ndarray, np.ndarray]:
        """The first and last shard each box can have points in (first > last: none).

        Shard ``i`` holds ``b[i] <= x < b[i + 1]`` (``b[0] = -inf``, ``b[k] = +inf``, the
        top closed). A box can have points in shard ``i`` only if ``b[i + 1] > x_lo``, so the
        first is the number of boundaries ``<= x_lo``; and only if ``b[i]`` passes the
        box's upper x test, so the last is the number of boundaries ``<= x_hi`` (``< x_hi``
        when the upper side is open).
        """
        x_lo, x_hi = aligned(bounds[:2])
        n = x_lo.size
        below, above = np.full(n, -math.inf), np.full(n, math.inf)
        engine = self.router
        first = engine.count_many(below, x_lo, below, above, "both")
        hi_closed = inclusive in ("both", "right")
        last = engine.count_many(below, x_hi, below, above, "both" if hi_closed else "left")
        return first, last


def aligned(arrays: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Arrays that crossed the network can arrive unaligned inside a message buffer, and
    the engine takes only aligned contiguous arrays: copy those (and only those)."""
    return [np.require(a, requirements=["C", "A"]) for a in arrays]


def engine_dtype(axis: AxisInfo) -> type:
    return np.float64 if axis.kind == "float" else np.int64


def route_partition(part: Any, plan: Plan, specs: Sequence[Any], inclusive: str) -> dict[str, Any]:
    bounds = plan.engine_bounds(part, specs, inclusive)
    first, last = plan.route(bounds, inclusive)
    return {"bounds": bounds, "first": first, "last": last, "index": part.index}


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
