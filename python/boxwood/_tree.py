"""`RangeTree`: the typed Python face of the compiled range tree, and :func:`load`.

>>> import numpy as np, boxwood
>>> tree = boxwood.RangeTree(np.arange(10.0), np.arange(10) % 3)
>>> tree.count(2, 7, 0, 1)
4

A tree is made in one place, :meth:`RangeTree._from_parts`, from the parts the other modules
return (:class:`boxwood._parts.TreeParts`): the build, :meth:`RangeTree.from_frame`, the
command line, :func:`load`, unpickling and the Dask workers all go through it.
"""

from __future__ import annotations

import os
import pickle
from collections.abc import Hashable
from typing import Any, Literal, overload

import numpy as np

from . import _bounds, _persist
from ._bounds import Inclusive, Scalar, document_bounds
from ._columns import AxisInfo, axis_value
from ._keys import broadcast_with_keys
from ._parts import Layout, TreeParts, build_parts

__all__ = ["Inclusive", "Layout", "RangeTree", "Scalar", "from_bytes", "load"]


class RangeTree:
    """A static 2-D range tree: counts, weight sums and rows of axis-parallel boxes.

    Build once from two coordinate columns, then ask any number of boxes. A box is
    ``x_lo <= x <= x_hi`` and ``y_lo <= y <= y_hi`` (edges as ``inclusive`` says). Counting and
    summing cost O(log n) per box whatever the box holds; reporting costs O(log n + k).

    Parameters
    ----------
    x, y
        1-D arrays, lists, pandas Series or Arrow arrays (read in place where they can be)
        of equal length: float64, float32, int64, int32, int16, int8, uint32, uint16,
        uint8, datetime64 or timedelta64; x and y may differ.
    weights
        Optional float or integer weights per point, for :meth:`sum`. Integer sums are exact.
    layout
        ``"compact"`` (the default) stores only the cascade bits and the count cascade
        (about 0.4 bytes per point per level) and finds reported rows by walking down the
        tree; ``"fast"`` also stores the row ids on every level (about 4.2 bytes per point
        per level) so that a report copies contiguous runs. Both also keep about 23 bytes
        per point once (the two sorted key columns, their search indexes and the leaf row
        ids); weights add 8 bytes per point per level. Answers are identical, and counts
        and sums run at about the same speed in both; fast is worth its memory (about 3.9
        times compact's at 10^7 points without weights) only for reports of many rows,
        which it produced 3 to 7 times as fast there, and for joins given a tree (about 2.5
        times as fast), as measured side by side by ``benches/bench_layout.py`` (section *Layouts
        side by side* of ``benches/RESULTS.md``). ``nbytes_by_part`` says where the bytes
        are.
    check_memory
        ``True`` (the default) refuses, with :class:`boxwood.InsufficientMemoryError` and
        before allocating anything, a build whose peak (:func:`boxwood.estimate_bytes`, an
        upper bound) exceeds the memory available; ``False`` builds anyway.
    by
        Optional key column (or a tuple of key columns) of the points: integers, strings,
        booleans, datetime64, or pandas categoricals of those. A keyed tree answers boxes
        per key: ``count(..., by=key)`` counts only the points whose key is ``key``, at the
        cost of an unkeyed count, and one tree holds every key. Keys missing from the
        points answer 0, an empty report and a zero sum. Missing key values (None, NaN,
        NaT) raise ``ValueError`` naming the row. tz-aware datetime keys compare as
        instants and are kept (and listed by :attr:`keys`) as naive UTC.

    Examples
    --------
    >>> import numpy as np, boxwood
    >>> start = np.array([0.0, 10.0, 10.0, 25.0, 40.0])   # minute a trip started
    >>> length = np.array([12, 5, 30, 8, 8])              # its length in minutes
    >>> tree = boxwood.RangeTree(start, length, weights=[300, 150, 700, 200, 200])
    >>> tree.count(10, 40, 5, 10)
    3
    >>> tree.count(10, 40, 5, 10, inclusive="left")
    2
    >>> tree.sum(10, 40, 5, 10)
    550
    >>> tree.count([0, 10], [20, 40], 0, np.inf)
    array([3, 4])
    >>> dock = np.array(["east", "west", "east", "east", "west"])   # where each trip began
    >>> keyed = boxwood.RangeTree(start, length, by=dock)
    >>> keyed.count(10, 40, 5, 10, by="east"), keyed.count(10, 40, 5, 10, by=["west", "north"])
    (1, array([2, 0]))
    """

    # `_parts` is everything the tree holds; `_tree` (the engine tree), `_x` and `_y` (the
    # axes) are the same parts again, kept apart for the scalar query path. Only `_adopt`
    # sets them. The package's helper modules read `_parts`; none of them writes a field.
    __slots__ = ("_keys", "_parts", "_tree", "_x", "_y")

    def __init__(
        self,
        x: Any,
        y: Any,
        *,
        weights: Any = None,
        by: Any = None,
        layout: Layout = "compact",
        check_memory: bool = True,
    ) -> None:
        self._adopt(build_parts(x, y, weights, layout=layout, check_memory=check_memory, by=by))

    @classmethod
    def _from_parts(cls, parts: TreeParts) -> RangeTree:
        """The one internal constructor: a tree holding `parts`, as the build, from_frame,
        the command line, load, unpickling and the Dask workers make them."""
        tree = cls.__new__(cls)
        tree._adopt(parts)
        return tree

    def _adopt(self, parts: TreeParts) -> None:
        self._parts = parts
        self._tree = parts.engine
        self._x = parts.x
        self._y = parts.y
        self._keys = parts.keys

    @classmethod
    def from_frame(
        cls,
        frame: Any,
        x: Hashable,
        y: Hashable,
        weights: Hashable | None = None,
        *,
        by: Hashable | list[Hashable] | None = None,
        layout: Layout = "compact",
        on_missing: Literal["raise", "drop"] = "raise",
        check_memory: bool = True,
    ) -> RangeTree:
        """A tree from two columns (and optionally a weight column) of a pandas DataFrame,
        or of a ``pyarrow.Table`` or ``RecordBatch`` (README, *Arrow*: types map as for
        Arrow-backed pandas columns, and row positions stand in for index labels), or of a
        ``polars.DataFrame`` or ``LazyFrame`` (README, *polars*: likewise).

        `by` names a key column, or a list of them, for a keyed tree (see
        :class:`RangeTree`): integer, string, boolean, datetime or categorical columns,
        numpy-backed, nullable or Arrow-backed (``string[pyarrow]``, dictionary types).

        Columns may be numeric, datetime64 (naive or tz-aware, compared in UTC), timedelta64,
        nullable (``Int64``, ``Float64``) or Arrow-backed (``int64[pyarrow]``,
        ``timestamp[ns, tz=UTC][pyarrow]``, ...). A row with NaN, NaT or NA in any of the
        named columns raises ``ValueError`` naming the column and the row, unless
        ``on_missing="drop"``: then such rows are left out with a
        :class:`boxwood.MissingValuesDropped` warning, :attr:`rows_dropped` says how many,
        and :meth:`report` and :meth:`pairs` still return positions in `frame`. A column that
        is not in the frame raises :class:`boxwood.MissingColumnError` (a ``KeyError``).
        `layout` and `check_memory` are as for :class:`RangeTree`.

        >>> import pandas as pd, boxwood
        >>> trips = pd.DataFrame({"start": [0.0, 10.0, None, 25.0], "minutes": [12, 5, 30, 8]})
        >>> tree = boxwood.RangeTree.from_frame(trips, x="start", y="minutes", on_missing="drop")
        >>> tree.rows_dropped
        1
        >>> tree.report(0, 30, 0, 10)[1]          # rows are positions in `trips`
        array([1, 3])
        """
        from ._frame_kinds import frames_for

        return cls._from_parts(
            frames_for(frame).frame_parts(
                frame,
                x,
                y,
                weights,
                layout=layout,
                on_missing=on_missing,
                check_memory=check_memory,
                by=by,
            )
        )

    # ------------------------------------------------------------ description

    def __len__(self) -> int:
        return len(self._tree)

    @property
    def nbytes(self) -> int:
        """Bytes held by the tree's arrays."""
        return self._tree.nbytes

    @property
    def nbytes_by_part(self) -> dict[str, int]:
        """``nbytes`` split by part, in bytes. ``"sorted axes"`` (both axes' sorted
        coordinates and search indexes) and ``"leaf rows"`` grow with the number of points
        alone; ``"cascade bits"``, ``"count cascade"``, ``"level rows"`` (fast layout),
        ``"level weights"`` (trees with weights) and ``"transposed cascade"`` (derived by
        the first statistic of ``of="y"``: :meth:`min`, :meth:`quantile`, ...) grow with
        points times levels.

        >>> import numpy as np, boxwood
        >>> tree = boxwood.RangeTree(np.arange(1000.0), np.arange(1000.0), layout="compact")
        >>> parts = tree.nbytes_by_part
        >>> sum(parts.values()) == tree.nbytes, parts["level rows"]
        (True, 0)
        """
        return dict(self._tree.nbytes_by_part)

    @property
    def layout(self) -> str:
        return self._tree.layout

    @property
    def height(self) -> int:
        """Levels below the root: ``ceil(log2(n + 1))``."""
        return self._tree.height

    @property
    def x_dtype(self) -> np.dtype:
        return self._x.dtype

    @property
    def y_dtype(self) -> np.dtype:
        return self._y.dtype

    @property
    def weights_dtype(self) -> np.dtype | None:
        kind = self._tree.weights_kind
        return None if kind is None else np.dtype(kind)

    @property
    def x_range(self) -> tuple[Any, Any] | None:
        """``(min, max)`` of the x coordinates in x's own type (None for an empty tree)."""
        return _range(self._x, self._tree.x_extremes)

    @property
    def y_range(self) -> tuple[Any, Any] | None:
        """``(min, max)`` of the y coordinates in y's own type (None for an empty tree)."""
        return _range(self._y, self._tree.y_extremes)

    @property
    def x_name(self) -> str:
        """The x column's name: its label when built by :meth:`from_frame`, else ``"x"``."""
        return self._x.name

    @property
    def y_name(self) -> str:
        """The y column's name: its label when built by :meth:`from_frame`, else ``"y"``."""
        return self._y.name

    @property
    def rows_dropped(self) -> int:
        """Rows of the source frame that :meth:`from_frame` left out for missing values."""
        return self._parts.provenance.rows_dropped

    @property
    def keys(self) -> Any:
        """A keyed tree's distinct keys in code order (sorted): an array for one key
        column, a tuple of arrays (one per column, row ``k`` of each is key ``k``) for
        several; None for a tree built without ``by=``."""
        return None if self._keys is None else self._keys.listing()

    @property
    def key_names(self) -> tuple[str, ...] | None:
        """The key columns' names (labels for :meth:`from_frame`), or None."""
        return None if self._keys is None else self._keys.names

    def count_by_key(self) -> dict[Any, int]:
        """Points of every key, in key order: ``{key: count}`` (tuples for several key
        columns). Read from the tree's key offsets, no query.

        >>> import boxwood
        >>> boxwood.RangeTree([1, 2, 3], [1, 2, 3], by=["b", "a", "b"]).count_by_key()
        {'a': 1, 'b': 2}
        """
        offsets = self._tree.key_offsets
        if self._keys is None or offsets is None:
            raise ValueError("this tree was built without keys (by=)")
        counts = np.diff(offsets.astype(np.int64)).tolist()
        values = [list(v) if v.dtype.kind == "M" else v.tolist() for v in self._keys.values()]
        names = values[0] if len(values) == 1 else list(zip(*values))
        return dict(zip(names, counts))

    def _codes(self, by: Any) -> np.ndarray:
        """Key codes of boxes' keys, or the error for a key given or left out wrongly."""
        if self._keys is None:
            if by is None:
                raise AssertionError("only keyed calls ask for codes")
            raise ValueError("this tree was built without keys: by= needs a tree built with by=")
        if by is None:
            raise ValueError(
                f"this tree was built with keys (by={', '.join(self._keys.names)}): every box "
                "needs its key, by=key (a scalar or an array broadcast with the bounds); "
                "count_by_key() gives each key's total"
            )
        return self._keys.codes_of(by)

    def _optional_codes(self, by: Any) -> np.ndarray | None:
        """None for an unkeyed call on an unkeyed tree, else the boxes' key codes (or the
        error for a key given or left out wrongly), for calls that answer both ways."""
        return None if by is None and self._keys is None else self._codes(by)

    def _keyed(self, method: str, box: tuple[Any, ...], by: Any, inclusive: Any, *rest: Any):
        """A keyed query: one box through the one-box call, else the batch call."""
        codes = self._codes(by)
        if codes.ndim == 0 and method != "report_many":
            scalars = _bounds.scalar_box(self._x, self._y, box, inclusive)
            if scalars is not None:
                one = getattr(self._tree, method.replace("_many", "_one"))
                return one(*scalars, inclusive, int(codes))
        bounds_shape, arrays = _bounds.box_arrays(self._x, self._y, box, inclusive)
        shape, flat, keys = broadcast_with_keys(bounds_shape, arrays, codes)
        a, b, c, d = flat
        if method == "report_many":
            (ordered,) = rest
            return self._tree.report_many(a, b, c, d, inclusive, ordered, keys)
        return getattr(self._tree, method)(a, b, c, d, inclusive, keys).reshape(shape)

    @property
    def build_stats(self) -> dict[str, int]:
        """Operation counts of the build: presorts, level passes (``merge_passes``: one
        linear pass a level), elements written by them (``elements_merged``)."""
        return self._tree.build_stats

    def __repr__(self) -> str:
        weights = self.weights_dtype
        keys = "" if self._keys is None else f"keys={self._keys.count:,}, "
        return (
            f"RangeTree(rows={len(self):,}, x={_label(self._x)}, y={_label(self._y)}, "
            f"weights={weights if weights is not None else None}, {keys}layout={self.layout!r}, "
            f"height={self.height}, nbytes={self.nbytes:,})"
        )

    # ------------------------------------------------------------ persistence

    def save(self, path: str | bytes | os.PathLike[str] | os.PathLike[bytes]) -> None:
        """Write the tree to an index file at `path` (``.boxwood`` by convention).

        The file is written beside `path` under a temporary name, synced, then renamed over
        `path`: a crash or a full disk at any moment leaves an earlier file at `path` intact
        (a killed process can leave a hidden ``.<name>.<pid>-<n>.partial`` file behind,
        which is safe to delete). Open it with :func:`boxwood.load`.
        """
        _persist.save(self._parts, path)

    @property
    def source(self) -> str:
        """Where the arrays live: ``"built"``, ``"memory-mapped file"``, ``"read from file"``
        or ``"bytes"`` (unpickled)."""
        return self._tree.source

    @property
    def verified(self) -> tuple[str, ...]:
        """The parts of the index whose checksums and rules have been checked and hold.

        A loaded tree checks its count path (``"count path"``: keys, search indexes, count
        cascade) at load, and ``"cascade bits"``, ``"row ids"`` and ``"weights"`` each before
        the first query that reads them, so a count never reads the others. A built tree
        has nothing left to check and lists every part it has.
        """
        return tuple(self._tree.verified)

    def __reduce_ex__(self, protocol):
        # Pickled as the index file's bytes, checked like a file when it is read back. From
        # protocol 5 on, the bytes travel as a buffer that a pickler with a buffer_callback
        # (Dask's, multiprocessing's shared memory) can send without copying.
        data = _persist.to_bytes(self._parts)
        if protocol >= 5:
            return (from_bytes, (pickle.PickleBuffer(data),))
        return (from_bytes, (data,))

    # ------------------------------------------------------------ queries

    @overload
    def count(
        self,
        x_lo: Scalar,
        x_hi: Scalar,
        y_lo: Scalar,
        y_hi: Scalar,
        *,
        by: Any = ...,
        inclusive: Inclusive = ...,
    ) -> int: ...
    @overload
    def count(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        by: Any = ...,
        inclusive: Inclusive = ...,
    ) -> int | np.ndarray: ...
    @document_bounds
    def count(self, x_lo, x_hi, y_lo, y_hi, *, by=None, inclusive="both"):
        """Number of points in each box: an ``int`` for scalar bounds, else an int64 array
        of the bounds' broadcast shape.

        {array bounds}
        {by}
        """
        if by is not None or self._keys is not None:
            return self._keyed("count_many", (x_lo, x_hi, y_lo, y_hi), by, inclusive)
        if not self._x.is_time and not self._y.is_time:
            # Four plain numbers (Python floats or ints, numpy float64s as DataFrame.apply hands
            # over): answered without leaving the compiled module; None for anything else,
            # which the general path takes.
            count = self._tree.count_plain(x_lo, x_hi, y_lo, y_hi, inclusive)
            if count is not None:
                return count
        box = (x_lo, x_hi, y_lo, y_hi)
        return self._one_or_many(self._tree.count_one, self._tree.count_many, box, inclusive)

    @document_bounds
    def sum(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        by: Any = None,
        inclusive: Inclusive = "both",
    ):
        """Weight sum of each box: a scalar for scalar bounds, else a float64 or int64 array.

        Raises ``ValueError`` if the tree was built without weights and ``OverflowError`` if
        an integer sum does not fit in int64.

        {array bounds}
        {by}
        """
        if self._tree.weights_kind is None:
            raise ValueError(
                "this tree was built without weights; pass weights= when building it to use sum()"
            )
        box = (x_lo, x_hi, y_lo, y_hi)
        if by is not None or self._keys is not None:
            return self._keyed("sum_many", box, by, inclusive)
        return self._one_or_many(self._tree.sum_one, self._tree.sum_many, box, inclusive)

    def _one_or_many(self, one: Any, many: Any, box: tuple, inclusive: Inclusive) -> Any:
        """A scalar answer for four scalar bounds (`one`), else the batch (`many`) shaped as
        the bounds' broadcast."""
        scalars = _bounds.scalar_box(self._x, self._y, box, inclusive)
        if scalars is not None:
            return one(*scalars, inclusive)
        shape, arrays = _bounds.box_arrays(self._x, self._y, box, inclusive)
        return many(*arrays, inclusive).reshape(shape)

    @document_bounds
    def report(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        by: Any = None,
        inclusive: Inclusive = "both",
        ordered: bool = True,
    ) -> tuple[np.ndarray, np.ndarray]:
        """The rows in each box, as CSR: ``(offsets, rows)``, both int64.

        Boxes are the bounds' broadcast, flattened in C order (one box for scalar bounds).
        Box ``i`` matched ``rows[offsets[i]:offsets[i + 1]]``: positions in the arrays the
        tree was built from.

        {array bounds}
        {by}
        {ordered}
        """
        box = (x_lo, x_hi, y_lo, y_hi)
        if by is not None or self._keys is not None:
            offsets, rows = self._keyed("report_many", box, by, inclusive, bool(ordered))
        else:
            _, arrays = _bounds.box_arrays(self._x, self._y, box, inclusive)
            offsets, rows = self._tree.report_many(*arrays, inclusive, bool(ordered))
        source_rows = self._parts.provenance.source_rows
        if source_rows is not None:
            rows = source_rows[rows]  # ascending, so ordered rows stay ordered
        return offsets, rows

    @document_bounds
    def pairs(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        by: Any = None,
        inclusive: Inclusive = "both",
        ordered: bool = True,
    ) -> tuple[np.ndarray, np.ndarray]:
        """One ``(box, row)`` entry per match, as two int64 arrays, boxes ascending and
        rows within a box as :meth:`report` orders them.

        {array bounds}
        {by}
        {ordered}
        """
        offsets, rows = self.report(
            x_lo, x_hi, y_lo, y_hi, by=by, inclusive=inclusive, ordered=ordered
        )
        boxes = np.repeat(np.arange(offsets.size - 1, dtype=np.int64), np.diff(offsets))
        return boxes, rows

    # ------------------------------------------------------------ how a box is spread

    @document_bounds
    def min(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        of: Literal["x", "y"] = "y",
        by: Any = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """The smallest value of axis `of` among each box's points, in the axis's own dtype:
        a scalar for scalar bounds, else an array of the bounds' broadcast shape. O(log n) a
        box (the k-th smallest value, `k` = 1, found by one descent of the tree).

        An empty box gives NaN (NaT on a time axis); integers have no NaN, so on an integer
        axis the answer is a ``numpy.ma.MaskedArray`` with empty boxes masked
        (``numpy.ma.masked`` for one box). Arrays of a tz-aware axis are in naive UTC.

        {array bounds}
        {by}
        """
        from ._stats import extreme

        box = (x_lo, x_hi, y_lo, y_hi)
        return extreme(self._parts, box, inclusive, of, self._optional_codes(by), largest=False)

    @document_bounds
    def max(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        *,
        of: Literal["x", "y"] = "y",
        by: Any = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """The largest value of axis `of` among each box's points, as :meth:`min` gives the
        smallest.

        {array bounds}
        {by}
        """
        from ._stats import extreme

        box = (x_lo, x_hi, y_lo, y_hi)
        return extreme(self._parts, box, inclusive, of, self._optional_codes(by), largest=True)

    @document_bounds
    def quantile(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        q: Any,
        *,
        of: Literal["x", "y"] = "y",
        method: str = "linear",
        by: Any = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """The `q` quantile of axis `of` among each box's points: exactly
        ``numpy.quantile(values_in_box, q, method=method)``, in the dtype numpy gives (the
        axis's own for the methods that pick a value, such as ``"lower"``, ``"higher"``,
        ``"nearest"``, ``"inverted_cdf"`` and ``"closest_observation"``; float64 for
        interpolation between integers; datetimes for interpolation between datetimes).

        `q` is a probability or a 1-D array of them (in [0, 1]); an array adds a trailing
        axis to the result. `method` is any of numpy.quantile's methods. Costs O(log n) a
        box and probability whatever the box holds: a count, then one descent of the tree
        for each order statistic the method reads. Empty boxes give NaN or NaT (masked, for
        integer results), as for :meth:`min`.

        {array bounds}
        {by}

        Examples
        --------
        >>> import numpy as np, boxwood
        >>> hour = np.array([0, 0, 0, 1, 1, 1])            # hour a request came in
        >>> ms = np.array([120, 80, 300, 95, 110, 2500])    # how long it took
        >>> tree = boxwood.RangeTree(hour, ms)
        >>> tree.quantile(0, 0, 0, np.inf, 0.5)             # median of hour 0
        np.float64(120.0)
        >>> tree.quantile([0, 1], [0, 1], 0, np.inf, [0.5, 0.9])   # hours 0 and 1
        array([[ 120.,  264.],
               [ 110., 2022.]])
        >>> tree.extreme_rows(0, 1, 0, np.inf, 2)           # the two slowest requests
        (array([0, 2]), array([2, 5]))
        >>> tree.max(2, 3, 0, np.inf)                       # no requests: masked (ints)
        masked
        """
        from ._stats import quantile

        box = (x_lo, x_hi, y_lo, y_hi)
        return quantile(self._parts, box, q, inclusive, of, method, self._optional_codes(by))

    @document_bounds
    def extreme_rows(
        self,
        x_lo: Any,
        x_hi: Any,
        y_lo: Any,
        y_hi: Any,
        k: Any,
        *,
        of: Literal["x", "y"] = "y",
        largest: bool = True,
        by: Any = None,
        inclusive: Inclusive = "both",
    ) -> tuple[np.ndarray, np.ndarray]:
        """The rows of the `k` points with the largest (``largest=False``: smallest) values
        of axis `of` in each box, as CSR ``(offsets, rows)`` like :meth:`report`, each box's
        rows ascending. A box of fewer than `k` points gives all of them. Of points tied on
        the value where the cut falls, the lowest rows are taken: box ``i``'s rows are the
        first ``k`` when its points are sorted by value (descending for `largest`), then by
        row. O(log n + k) a box, plus the points of the box tied with the k-th value.

        `k` is a non-negative integer, or an array of them that broadcasts to the bounds'
        shape.

        {array bounds}
        {by}
        """
        from ._stats import extreme_rows

        box = (x_lo, x_hi, y_lo, y_hi)
        codes = self._optional_codes(by)
        return extreme_rows(self._parts, box, k, inclusive, of, largest, codes)

    # ------------------------------------------------------------ boxes from a DataFrame

    @document_bounds
    def count_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """Points in each row of a pandas DataFrame of boxes: an int64 Series named
        ``"count"`` on the boxes' index (duplicate labels included, order kept). For a
        ``pyarrow.Table`` or ``RecordBatch`` of boxes, an int64 ``pyarrow.Array``, and for
        a polars DataFrame or LazyFrame an Int64 ``polars.Series`` named ``count`` (and so
        for every ``*_boxes`` call: Arrow in, Arrow out, polars in, polars out; README,
        *Arrow* and *polars*).

        {frame bounds}
        {frame by}

        Examples
        --------
        >>> import pandas as pd, boxwood
        >>> tree = boxwood.RangeTree([0.0, 10.0, 10.0, 25.0], [12, 5, 30, 8])
        >>> boxes = pd.DataFrame({"t0": [0, 10], "t1": [20, 40]}, index=["a", "b"])
        >>> tree.count_boxes(boxes, "t0", "t1", None, 10)
        a    1
        b    2
        Name: count, dtype: int64
        """
        from ._frame_kinds import frames_for

        return frames_for(boxes).count_boxes(
            self.count, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, by
        )

    @document_bounds
    def sum_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """Weight sum of each row of a DataFrame of boxes: a Series named ``"sum"`` on the
        boxes' index.

        {frame bounds}
        {frame by}
        """
        from ._frame_kinds import frames_for

        return frames_for(boxes).sum_boxes(self.sum, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, by)

    @document_bounds
    def report_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
        ordered: bool = True,
    ) -> Any:
        """One row per (box, point) match, as a DataFrame with columns ``box`` (the box's
        index label) and ``row`` (the point's position in the data the tree was built
        from), in box order. :func:`boxwood.box_join` carries whole columns.

        {frame bounds}
        {frame by}
        {ordered}
        """
        from ._frame_kinds import frames_for

        return frames_for(boxes).report_boxes(
            self.pairs, boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, ordered, by
        )

    @document_bounds
    def stats_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        quantiles: Any = (0.5, 0.95, 0.99),
        of: Literal["x", "y"] = "y",
        method: str = "linear",
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """How the points in each row of a DataFrame of boxes are spread: a DataFrame on the
        boxes' index with ``count``, ``sum`` and ``mean`` (trees with weights; ``mean`` NaN
        for an empty box), ``min`` and ``max`` of axis `of`, and one column a quantile,
        named ``q`` and the probability (``q0.5``, ``q0.95``, ``q0.99`` by default), as
        :meth:`quantile` computes them with `method`. Statistics of empty boxes are missing
        (NaN, NaT, or ``<NA>`` in a nullable integer column).

        {frame bounds}
        {frame by}

        Examples
        --------
        >>> import pandas as pd, boxwood
        >>> tree = boxwood.RangeTree([0, 1, 2, 3, 4], [40, 95, 12, 300, 61])
        >>> hours = pd.DataFrame({"t0": [0, 3, 9], "t1": [2, 4, 9]}, index=["a", "b", "c"])
        >>> tree.stats_boxes(hours, "t0", "t1", None, None, quantiles=[0.5])
           count   min   max   q0.5
        a      3    12    95   40.0
        b      2    61   300  180.5
        c      0  <NA>  <NA>    NaN
        """
        from ._frame_kinds import frames_for

        specs = (x_lo, x_hi, y_lo, y_hi)
        return frames_for(boxes).stats_boxes(
            self, boxes, specs, inclusive, by, quantiles, of, method
        )

    def grid(
        self, x_edges: Any, y_edges: Any, *, by: Any = None, weighted: bool = False
    ) -> np.ndarray:
        """Points (or with ``weighted=True`` their weight sum) in each cell of a grid: an
        array of shape ``(len(x_edges) - 1, len(y_edges) - 1)``. A keyed tree's grid is of
        the points of key `by`; an array of keys gives one grid per key, its shape leading
        (``tree.grid(xe, ye, by=tree.keys)`` is every key's grid).

        Bins are those of ``numpy.histogram2d(x, y, bins=[x_edges, y_edges])``: half-open
        ``[e_i, e_{i+1})`` with the last bin on each axis closed, and edges must increase
        monotonically. Edges may be of any type a bound may be (datetimes for a time axis,
        tz-aware ones for a tz-aware axis). Costs O(cells · log n): one count per grid
        corner, not a pass over the points.

        >>> import boxwood
        >>> tree = boxwood.RangeTree([0.5, 1.0, 1.5, 2.0], [0, 0, 1, 1])
        >>> tree.grid([0, 1, 2], [0, 1, 2])
        array([[1, 0],
               [1, 2]])
        """
        from ._grid import grid

        codes = self._optional_codes(by)
        return grid(self._parts, x_edges, y_edges, weighted=weighted, codes=codes)

    def _probe(
        self, x_lo, x_hi, y_lo, y_hi, inclusive: Inclusive = "both", *, report: bool = False
    ) -> dict[str, Any]:
        """Diagnostic, not API: one box counted (or reported) and everything the engine read
        doing it, for tests of the algorithm's operation counts.

        Returns ``count`` (and ``rows`` for a report), ``reads`` (one ``(part, first line,
        last line, bytes)`` per read, lines being memory addresses divided by 64), ``nodes``
        and ``canonical`` (nodes visited, and canonical nodes found, per level).
        """
        scalars = _bounds.scalar_box(self._x, self._y, (x_lo, x_hi, y_lo, y_hi), inclusive)
        if scalars is None:
            raise ValueError("_probe takes scalar bounds")
        return self._tree.probe_one(*scalars, inclusive, bool(report))


def _range(axis: AxisInfo, extremes: tuple[Any, Any] | None) -> tuple[Any, Any] | None:
    if extremes is None:
        return None
    return axis_value(axis, extremes[0]), axis_value(axis, extremes[1])


def _label(axis: AxisInfo) -> str:
    return f"{axis.dtype}" if axis.tz is None else f"{axis.dtype.name[:-1]}, {axis.tz}]"


# ---------------------------------------------------------------- reading trees back


def load(
    path: str | bytes | os.PathLike[str] | os.PathLike[bytes],
    *,
    mmap: bool = True,
    verify: Literal["checksums", "full"] = "checksums",
) -> RangeTree:
    """Open an index file written by :meth:`RangeTree.save`.

    With ``mmap=True`` (the default) the file is memory-mapped read-only and the tree's
    arrays point into the mapping: processes that load one file share its pages, and
    nothing is copied or rebuilt. ``mmap=False`` reads it into memory instead. Do not modify
    or truncate an index file while a process has it mapped (saving over it is safe).

    Every checksum and every rule that keeps queries in bounds is checked before the part
    it covers is used: the count path (keys, search indexes, count cascade) at load, the
    cascade bits, row ids and weights before the first query that reads them, so a count
    never touches the others. A damaged file raises an :class:`IndexFileError` subclass,
    from the load or from that first query; a missing one the usual ``OSError``.
    ``verify="full"`` checks everything at load and also derives again every section that
    can be derived from others and compares: for files you did not write yourself.
    """
    return RangeTree._from_parts(_persist.load_parts(path, mmap=mmap, verify=verify))


def from_bytes(data: bytes | bytearray | memoryview | pickle.PickleBuffer) -> RangeTree:
    """The tree pickled by :meth:`RangeTree.__reduce_ex__`, from bytes or any contiguous
    buffer (an out-of-band pickle buffer arrives as one)."""
    return RangeTree._from_parts(_persist.parts_from_bytes(data))
