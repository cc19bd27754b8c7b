"""Frames without an index (Arrow tables, polars frames): points and boxes read through one
reader of the frame's kind, rows and boxes named by their position.

Each kind's module gives a :class:`Reader` (:mod:`boxwood._arrow_frames`,
:mod:`boxwood._polars_frames`): how to recognise a frame of its kind, list its columns, take
one, find its missing rows and take rows, and how key columns are handed on. The rules
written here once for both: which bounds are columns, which rows are missing and what the
error says about them, which rows are dropped, what a tree remembers of its frame. Each
module turns the numpy answers into its own kind.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Any, Callable, Protocol

import numpy as np

from ._bounds import Inclusive
from ._fingerprint import columns_of
from ._frames import (
    _keyed,
    _per_box,
    check_on_missing,
    kept_rows,
    key_roles,
    naming_columns,
    parts_of_columns,
    point_roles,
    stats_columns,
)
from ._keys import KeyDictionary
from ._parts import Provenance, TreeParts

_BOUND_ROLES = ("x_lo", "x_hi", "y_lo", "y_hi")


class Reader(Protocol):
    """How one kind of frame is read (every method a staticmethod of the kind's class)."""

    #: What messages call a frame of the kind: "table", "frame".
    noun: str

    def require(self, frame: Any, what: str) -> None:
        """Raise ``TypeError`` unless `frame` is of this kind."""

    def names(self, frame: Any) -> Sequence[Hashable]:
        """The frame's column names."""

    def prepared(self, frame: Any, columns: dict[str, Hashable], what: str) -> Any:
        """The frame holding `columns` (by role), ready to read them; a missing one raises
        :class:`boxwood.MissingColumnError` naming the frame (`what`) and its columns."""

    def rows(self, frame: Any) -> int:
        """The frame's row count."""

    def column(self, frame: Any, name: Hashable) -> Any:
        """One column, as the column code reads it."""

    def missing(self, values: Any) -> np.ndarray:
        """A column's missing rows: nulls, and NaN in a float column."""

    def take(self, values: Any, keep: np.ndarray) -> Any:
        """A column's rows at positions `keep`."""

    def build_key(self, values: Any) -> Any:
        """A points' key column as the key code builds a dictionary from it."""

    def query_key(self, values: Any) -> Any:
        """A boxes' key column as the key code looks it up."""

    def answers(self, name: str, values: np.ndarray) -> Any:
        """One answer a box (counts, sums) as a column of the kind, named `name`."""

    def nullable(self, name: str, values: np.ndarray, empty: np.ndarray, zone: str | None) -> Any:
        """A statistic as a column of the kind, null where `empty`, times in `zone`."""

    def table(self, columns: dict[str, Any]) -> Any:
        """Columns (numpy arrays or the kind's own) as a table of the kind."""


def describe_missing(role: str, column: Hashable, missing: np.ndarray, what: str) -> str:
    """Where a column first misses a value: its `what` (row or box) by position."""
    first = int(np.flatnonzero(missing)[0])
    return (
        f"{role} column {column!r} has a missing value (null or NaN) at {what} {first}; "
        f"{int(missing.sum())} of {missing.size} {'boxes' if what == 'box' else what + 's'} "
        "are missing in it"
    )


class ColumnarKind:
    """The functions :func:`boxwood._frame_kinds.frames_for` sends a frame to
    (``frame_parts``, ``count_boxes``, ``sum_boxes``, ``report_boxes``, ``stats_boxes``),
    and the join's ``box_bounds`` and ``box_keys``, for the kind `reader` reads; its module
    takes them as its own functions (``count_boxes = KIND.count_boxes``)."""

    def __init__(self, reader: Reader) -> None:
        self.reader = reader

    # ------------------------------------------------------------ points

    def point_columns(
        self, frame: Any, columns: dict[str, Hashable], on_missing: str, keys: dict[str, Hashable]
    ) -> tuple[dict[str, Any], np.ndarray | None]:
        """Each role's column with missing rows refused or dropped, and the kept rows
        (int64 positions in `frame`, or None when every row was kept)."""
        reader = self.reader
        check_on_missing(on_missing)
        roles = {**columns, **keys}
        frame = reader.prepared(frame, roles, f"the points {reader.noun}")
        values = {role: reader.column(frame, column) for role, column in roles.items()}
        masks = [(role, column, reader.missing(values[role])) for role, column in roles.items()]

        def describe(role: str, column: Hashable, missing: np.ndarray) -> str:
            return describe_missing(role, column, missing, "row")

        keep = kept_rows(masks, reader.rows(frame), on_missing, describe)
        if keep is None:
            return values, None
        return {role: reader.take(v, keep) for role, v in values.items()}, keep

    def frame_parts(
        self,
        frame: Any,
        x: Hashable,
        y: Hashable,
        weights: Hashable | None,
        *,
        layout: Any,
        on_missing: str,
        check_memory: bool = True,
        by: Hashable | list[Hashable] | None = None,
        coded_keys: tuple[np.ndarray, KeyDictionary] | None = None,
    ) -> TreeParts:
        """The parts of :meth:`RangeTree.from_frame`'s tree from a frame's columns."""
        reader = self.reader
        reader.require(frame, "frame")
        columns = point_roles(x, y, weights)
        keys = key_roles(by)
        frame = reader.prepared(frame, {**columns, **keys}, f"the points {reader.noun}")
        values, keep = self.point_columns(frame, columns, on_missing, keys)
        values.update({role: reader.build_key(values[role]) for role in keys})
        dropped = 0 if keep is None else reader.rows(frame) - keep.size
        source = Provenance(keep, dropped, columns_of(frame, x, y))
        return parts_of_columns(
            values,
            columns,
            keys,
            source,
            layout=layout,
            check_memory=check_memory,
            coded_keys=coded_keys,
        )

    # ------------------------------------------------------------ boxes given as columns

    def _boxes(self, boxes: Any, specs: Sequence[Any], by: Any) -> Any:
        """The boxes ready to read their bound and key columns (read once: a polars
        LazyFrame is collected with only those)."""
        self.reader.require(boxes, "boxes")
        columns = {**_bound_columns(self.reader.names(boxes), specs), **key_roles(by)}
        return self.reader.prepared(boxes, columns, f"the boxes {self.reader.noun}")

    def box_bounds(self, boxes: Any, specs: Sequence[Any]) -> tuple[list[Any], dict[str, str]]:
        """The four bounds from a boxes frame: column names, None (open) or constants, as
        for the pandas path (strings always name columns)."""
        boxes = self._boxes(boxes, specs, None)
        columns = _bound_columns(self.reader.names(boxes), specs)
        bounds = []
        for role, spec in zip(_BOUND_ROLES, specs):
            if role in columns:
                advice = "every box needs all four bounds (use ±inf for an open side)"
                bounds.append(self._complete(boxes, f"{role} bound", spec, advice))
            elif spec is None:
                bounds.append(-np.inf if role.endswith("lo") else np.inf)
            else:
                bounds.append(spec)
        return bounds, {role: f"{role} column {column!r}" for role, column in columns.items()}

    def _complete(self, boxes: Any, role: str, column: Hashable, advice: str) -> Any:
        """A boxes frame's column, or the error naming its first box with a null (or NaN)."""
        values = self.reader.column(boxes, column)
        missing = self.reader.missing(values)
        if missing.any():
            raise ValueError(f"{describe_missing(role, column, missing, 'box')}; {advice}")
        return values

    def box_keys(self, boxes: Any, by: Hashable | list[Hashable] | None) -> Any:
        """The boxes' key columns for ``by=`` (a tuple for several), or None; a box with a
        missing key raises."""
        roles = key_roles(by)
        if not roles:
            return None
        boxes = self.reader.prepared(boxes, roles, f"the boxes {self.reader.noun}")
        values = [
            self.reader.query_key(
                self._complete(boxes, f"{role} key", column, "every box needs its key")
            )
            for role, column in roles.items()
        ]
        return tuple(values) if len(values) > 1 else values[0]

    def _asked(
        self, boxes: Any, specs: Sequence[Any], by: Any
    ) -> tuple[int, list[Any], dict[str, str], Any]:
        """``(rows, bounds, bound column names, keys)`` of a boxes frame."""
        boxes = self._boxes(boxes, specs, by)
        bounds, names = self.box_bounds(boxes, specs)
        return self.reader.rows(boxes), bounds, names, self.box_keys(boxes, by)

    def count_boxes(
        self,
        count: Callable[..., Any],
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Inclusive,
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """`count` (a tree's) of each box of a boxes frame: int64, one a box, named
        ``count``."""
        counts = self._per_box(count, boxes, specs, inclusive, by)
        return self.reader.answers("count", counts.astype(np.int64))

    def sum_boxes(
        self,
        weight_sum: Callable[..., Any],
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Inclusive,
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """`weight_sum` (a tree's sum) of each box of a boxes frame: int64 or float64 as
        the weights, named ``sum``."""
        return self.reader.answers("sum", self._per_box(weight_sum, boxes, specs, inclusive, by))

    def _per_box(
        self,
        method: Callable[..., Any],
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Inclusive,
        by: Hashable | list[Hashable] | None,
    ) -> np.ndarray:
        rows, bounds, names, keys = self._asked(boxes, specs, by)
        with naming_columns(names):
            return _per_box(method(*bounds, inclusive=inclusive, **_keyed(keys)), rows)

    def report_boxes(
        self,
        pairs: Callable[..., Any],
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Inclusive,
        ordered: bool,
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """`pairs` (a tree's) of the boxes of a boxes frame: a table of ``box`` (the box's
        row position) and ``row`` (the point's), both int64."""
        rows, bounds, names, keys = self._asked(boxes, specs, by)
        bounds = [np.broadcast_to(b, rows) if np.ndim(b) == 0 else b for b in bounds]
        with naming_columns(names):
            box, row = pairs(*bounds, inclusive=inclusive, ordered=ordered, **_keyed(keys))
        return self.reader.table({"box": box, "row": row})

    def stats_boxes(
        self,
        tree: Any,
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Inclusive,
        by: Hashable | list[Hashable] | None,
        quantiles: Sequence[float],
        of: str,
        method: str,
    ) -> Any:
        """The pandas path's statistics table (``count``, ``sum`` and ``mean`` with
        weights, ``min``, ``max``, ``q0.5``, ...), an empty box's statistics null; a zoned
        time axis's times in its zone."""
        rows, bounds, names, keys = self._asked(boxes, specs, by)
        with naming_columns(names):
            columns = stats_columns(tree, bounds, keys, rows, inclusive, quantiles, of, method)
        empty = columns["count"] == 0
        zone = (tree._parts.x if of == "x" else tree._parts.y).tz
        out = {}
        for name, values in columns.items():
            if name in ("count", "sum"):
                out[name] = self.reader.answers(name, values)
            else:
                spread = np.broadcast_to(np.ma.getdata(values), rows)
                out[name] = self.reader.nullable(name, spread, empty, zone)
        return self.reader.table(out)


def _bound_columns(names: Sequence[Hashable], specs: Sequence[Any]) -> dict[str, Hashable]:
    """The bounds given as column names, by role (strings always name columns)."""
    return {
        role: spec
        for role, spec in zip(_BOUND_ROLES, specs)
        if isinstance(spec, str) or (spec is not None and _is_name(names, spec))
    }


def _is_name(names: Sequence[Hashable], spec: Any) -> bool:
    try:
        return spec in names
    except TypeError:
        return False


def check_index_free(names: Sequence[Hashable], what: str, noun: str) -> None:
    """``keep_index=True`` adds a column ``index`` of row positions: refuse a frame that
    has one already."""
    if "index" in names:
        raise ValueError(
            f"keep_index=True: the {what} {noun} has a column 'index' already; rename it"
        )
