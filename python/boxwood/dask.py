"""Range trees on Dask's distributed scheduler: sharded by x across the workers, or broadcast.

>>> import numpy as np, pandas as pd, dask.dataframe as dd
>>> import boxwood.dask
>>> trips = pd.DataFrame({"start": np.arange(100.0), "minutes": np.arange(100) % 30})
>>> points = dd.from_pandas(trips, npartitions=4)
>>> sharded = boxwood.dask.ShardedTree.from_frame(points, x="start", y="minutes", shards=3,
...                                               client=client)
>>> sharded.num_shards
3
>>> boxes = pd.DataFrame({"x_lo": [0, 10], "x_hi": [50, 90], "y_lo": [0, 5], "y_hi": [9, 5]})
>>> sharded.count_boxes(boxes).tolist()
[20, 2]
>>> sharded.count_boxes(dd.from_pandas(boxes, npartitions=2)).compute().tolist()
[20, 2]

A :class:`ShardedTree` splits the points of a Dask DataFrame into half-open x intervals
(shards) at quantiles of x, builds one :class:`boxwood.RangeTree` per shard on the workers
and keeps it there as a Dask future. Each box is sent only to the shards whose x interval
its x range overlaps; counts and sums add up, reported rows and joined rows are
concatenated. :func:`broadcast` instead copies one small tree to every worker and answers a
Dask DataFrame of boxes partition by partition. Work runs as ordinary Dask tasks (named
``boxwood-...``): follow it with ``distributed.progress``, ``progress=True`` or the
dashboard, and a lost worker's tasks are rerun by Dask from their inputs.

Dask is optional: ``pip install 'boxwood[dask]'``; ``import boxwood`` never imports it.
"""

from __future__ import annotations

import dataclasses
import json
import math
import operator
import os
import re
import uuid
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np

try:
    import dask.dataframe as dd
    import distributed
except ImportError as _exc:
    raise ImportError(
        "boxwood.dask needs Dask's distributed scheduler; install it with "
        "pip install 'boxwood[dask]'"
    ) from _exc

from . import _bounds, _persist
from ._boxwood import (
    ChecksumMismatchError,
    CorruptIndexFileError,
    TruncatedIndexFileError,
    UnsupportedIndexFileError,
)
from ._columns import AxisInfo, coordinate_column
from ._frames import (
    ON_MISSING,
    MissingValuesDropped,
    box_bounds,
    column_values,
    naming_columns,
    pandas,
    require_columns,
    warn_at_caller,
)
from ._join import _engine_bounds, _output_sides
from ._tree import Inclusive, Layout, RangeTree

__all__ = ["BroadcastTree", "ShardedTree", "broadcast"]

#: Version of the shard folder's manifest; bumped when its meaning changes.
MANIFEST_VERSION = 1
MANIFEST_NAME = "manifest.json"
_MANIFEST_KEY = "boxwood-shards"
# The index file format the shard files are written in (docs/index-format.md).
_INDEX_FORMAT_VERSION = 1
# Order statistics of x each partition sends per shard wanted, to place the boundaries.
_SAMPLES_PER_SHARD = 64
_BOUND_SPECS = ("x_lo", "x_hi", "y_lo", "y_hi")
_INF = float("inf")
_I64_MAX = 2**63 - 1


# ---------------------------------------------------------------- helpers on both sides


def _client(client: Any) -> Any:
    if client is not None:
        return client
    try:
        return distributed.get_client()
    except ValueError:
        raise ValueError(
            "no Dask client: pass client=..., or create a distributed.Client first"
        ) from None


def _token() -> str:
    return uuid.uuid4().hex[:12]


def _missing_rows(part: Any, columns: dict[str, Hashable]) -> dict[str, np.ndarray]:
    """Each role's mask of rows with NaN, NaT or NA in its column."""
    return {role: column_values(part[column])[1] for role, column in columns.items()}


def _kept_rows(part: Any, columns: dict[str, Hashable]) -> np.ndarray:
    missing = np.zeros(len(part), dtype=bool)
    for mask in _missing_rows(part, columns).values():
        missing |= mask
    return np.flatnonzero(~missing).astype(np.int64)


def _engine_x(frame: Any, column: Hashable) -> tuple[np.ndarray, AxisInfo]:
    values, _ = column_values(frame[column])
    return coordinate_column(values, "x")


class _Plan:
    """What turns boxes into work for shards: the two axes and the shard boundaries.

    It converts bounds exactly as a shard's own tree would (the same axis descriptions), so
    the shards can be asked in the engine's numbers, and it finds each box's shards with a
    tiny range tree over the boundaries, which compares bounds of any type exactly.
    Pickled to the workers; the trees are rebuilt there on first use.
    """

    def __init__(self, x_axis: AxisInfo, y_axis: AxisInfo, boundaries: np.ndarray) -> None:
        self.x_axis, self.y_axis, self.boundaries = x_axis, y_axis, boundaries
        self._template: RangeTree | None = None
        self._router: RangeTree | None = None

    def __getstate__(self) -> dict[str, Any]:
        return {"x_axis": self.x_axis, "y_axis": self.y_axis, "boundaries": self.boundaries}

    def __setstate__(self, state: dict[str, Any]) -> None:
        (boundaries,) = _aligned([state["boundaries"]])
        self.__init__(state["x_axis"], state["y_axis"], boundaries)  # type: ignore[misc]

    @property
    def template(self) -> RangeTree:
        """An empty tree with the shards' axes: its bound conversion is theirs."""
        if self._template is None:
            tree = RangeTree(
                np.zeros(0, _engine_dtype(self.x_axis)), np.zeros(0, _engine_dtype(self.y_axis))
            )
            tree._x, tree._y = self.x_axis, self.y_axis
            self._template = tree
        return self._template

    @property
    def router(self) -> RangeTree:
        if self._router is None:
            self._router = RangeTree(self.boundaries, np.zeros(self.boundaries.size))
        return self._router

    def engine_bounds(self, boxes: Any, specs: Sequence[Any], inclusive: Any) -> list[np.ndarray]:
        bounds, names = box_bounds(boxes, specs)
        with naming_columns(names):
            return _engine_bounds(self.template, bounds, inclusive, len(boxes))

    def route(self, bounds: Sequence[np.ndarray], inclusive: str) -> tuple[np.ndarray, np.ndarray]:
        """The first and last shard each box can have points in (first > last: none).

        Shard ``i`` holds ``b[i] <= x < b[i + 1]`` (``b[0] = -inf``, ``b[k] = +inf``, the
        top closed). A box can have points in shard ``i`` only if ``b[i + 1] > x_lo``, so the
        first is the number of boundaries ``<= x_lo``; and only if ``b[i]`` passes the
        box's upper x test, so the last is the number of boundaries ``<= x_hi`` (``< x_hi``
        when the upper side is open).
        """
        x_lo, x_hi = _aligned(bounds[:2])
        n = x_lo.size
        below, above = np.full(n, -_INF), np.full(n, _INF)
        engine = self.router._tree
        first = engine.count_many(below, x_lo, below, above, "both")
        hi_closed = inclusive in ("both", "right")
        last = engine.count_many(below, x_hi, below, above, "both" if hi_closed else "left")
        return first, last


def _aligned(arrays: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Arrays that crossed the network can arrive unaligned inside a message buffer, and
    the engine takes only aligned contiguous arrays: copy those (and only those)."""
    return [np.require(a, requirements=["C", "A"]) for a in arrays]


def _engine_dtype(axis: AxisInfo) -> type:
    return np.float64 if axis.kind == "float" else np.int64


# ---------------------------------------------------------------- tasks run on the workers


def _scan_partition(part: Any, columns: dict[str, Hashable], samples: int) -> dict[str, Any]:
    """Rows, missing values, axis types and order statistics of x of one partition."""
    first_missing = {}  # role: (rows missing, position of the first, its index label)
    for role, mask in _missing_rows(part, columns).items():
        if mask.any():
            first = int(np.flatnonzero(mask)[0])
            first_missing[role] = (int(mask.sum()), first, part.index[first])
    kept = part.iloc[_kept_rows(part, columns)]
    x, x_axis = _engine_x(kept, columns["x"])
    _, y_axis = coordinate_column(column_values(kept[columns["y"]])[0], "y")
    # Named after their columns, so that bound errors name them as from_frame's trees do.
    x_axis = dataclasses.replace(x_axis, name=str(columns["x"]))
    y_axis = dataclasses.replace(y_axis, name=str(columns["y"]))
    if x.size:
        at = np.linspace(0, x.size - 1, min(x.size, samples)).round().astype(np.int64)
        sample = np.sort(x)[at]
    else:
        sample = x[:0]
    return {
        "rows": len(part),
        "kept": x.size,
        "missing": first_missing,
        "x_axis": x_axis,
        "y_axis": y_axis,
        "sample": sample,
    }


def _split_partition(
    part: Any, columns: dict[str, Hashable], boundaries: np.ndarray, first_row: int
) -> list[tuple[Any, np.ndarray]]:
    """One piece per shard: the partition's rows of that shard (complete rows only, in
    their order) and their global positions."""
    keep = _kept_rows(part, columns)
    wanted = list(dict.fromkeys(columns.values()))
    rows = part[wanted].iloc[keep]
    x, _ = _engine_x(rows, columns["x"])
    shard = np.searchsorted(boundaries, x, side="right")
    order = np.argsort(shard, kind="stable")
    cuts = np.searchsorted(shard[order], np.arange(boundaries.size + 2))
    return [
        (rows.iloc[order[a:b]], first_row + keep[order[a:b]]) for a, b in zip(cuts[:-1], cuts[1:])
    ]


def _build_shard(
    columns: dict[str, Hashable], layout: Layout, *pieces: tuple[Any, np.ndarray]
) -> RangeTree:
    pd = pandas()
    frame = pd.concat([piece[0] for piece in pieces], ignore_index=True)
    tree = RangeTree.from_frame(
        frame, x=columns["x"], y=columns["y"], weights=columns.get("weights"), layout=layout
    )
    # Reported rows are positions in the whole Dask DataFrame; pieces come in partition
    # order, so these are ascending as the index format requires.
    tree._source_rows = np.concatenate([piece[1] for piece in pieces]).astype(np.int64)
    return tree


def _shard_info(tree: RangeTree) -> dict[str, Any]:
    weights = tree.weights_dtype
    return {
        "rows": len(tree),
        "nbytes": tree.nbytes,
        "weights": None if weights is None else weights.name,
        "x_axis": tree._x,
        "y_axis": tree._y,
    }


def _answer(tree: RangeTree, bounds: Sequence[np.ndarray], op: str, inclusive: Inclusive) -> Any:
    """One shard's answer for boxes given in engine numbers."""
    x_lo, x_hi, y_lo, y_hi = _aligned(bounds)
    engine = tree._tree
    if op == "count":
        return engine.count_many(x_lo, x_hi, y_lo, y_hi, inclusive)
    if op == "sum":
        return engine.sum_many(x_lo, x_hi, y_lo, y_hi, inclusive)
    offsets, rows = engine.report_many(x_lo, x_hi, y_lo, y_hi, inclusive)
    box = np.repeat(np.arange(offsets.size - 1, dtype=np.int64), np.diff(offsets))
    if tree._source_rows is not None:
        rows = tree._source_rows[rows]
    return box, rows


def _route_partition(
    part: Any, plan: _Plan, specs: Sequence[Any], inclusive: str
) -> dict[str, Any]:
    bounds = plan.engine_bounds(part, specs, inclusive)
    first, last = plan.route(bounds, inclusive)
    return {"bounds": bounds, "first": first, "last": last, "index": part.index}


def _routed_to(routed: dict[str, Any], shard: int) -> np.ndarray:
    return np.flatnonzero((routed["first"] <= shard) & (shard <= routed["last"]))


def _answer_routed(
    tree: RangeTree, routed: dict[str, Any], shard: int, op: str, inclusive: Inclusive
) -> tuple[np.ndarray, Any]:
    ids = _routed_to(routed, shard)
    if ids.size == 0:
        return ids, None
    return ids, _answer(tree, [b[ids] for b in routed["bounds"]], op, inclusive)


def _answer_some(
    tree: RangeTree, bounds: Sequence[np.ndarray], ids: np.ndarray, op: str, inclusive: Inclusive
) -> tuple[np.ndarray, Any]:
    return ids, _answer(tree, bounds, op, inclusive)


def _add_int64(total: np.ndarray, ids: np.ndarray, part: np.ndarray) -> None:
    before = total[ids]
    after = before + part  # wraps on overflow, which the sign test below catches
    if np.any(((before ^ after) & (part ^ after)) < 0):
        box = int(ids[np.flatnonzero(((before ^ after) & (part ^ after)) < 0)[0]])
        raise OverflowError(f"the weight sum of box {box} does not fit in int64")
    total[ids] = after


def _combine(op: str, index: Any, weights: str | None, *answers: tuple[np.ndarray, Any]) -> Any:
    """The shards' answers for one set of boxes, as the single-machine tree returns them."""
    pd = pandas()
    n = len(index)
    answers = tuple(a for a in answers if a[1] is not None)
    if op == "count":
        counts = np.zeros(n, dtype=np.int64)
        for ids, part in answers:
            counts[ids] += part
        return pd.Series(counts, index=index, name="count", dtype="int64")
    if op == "sum":
        sums = np.zeros(n, dtype=np.int64 if weights == "int64" else np.float64)
        for ids, part in answers:
            if sums.dtype.kind == "i":
                _add_int64(sums, ids, part)
            else:
                sums[ids] += part
        return pd.Series(sums, index=index, name="sum")
    box, rows = _global_pairs(answers)
    return pd.DataFrame({"box": index.take(box), "row": rows})


def _combine_partition(
    op: str, weights: str | None, routed: dict[str, Any], *answers: tuple[np.ndarray, Any]
) -> Any:
    return _combine(op, routed["index"], weights, *answers)


def _global_pairs(answers: Sequence[tuple[np.ndarray, Any]]) -> tuple[np.ndarray, np.ndarray]:
    """(box, row) pairs of all shards, boxes ascending and rows ascending within a box."""
    boxes = [ids[part[0]] for ids, part in answers if part is not None]
    rows = [part[1] for _, part in answers if part is not None]
    box = np.concatenate(boxes) if boxes else np.zeros(0, np.int64)
    row = np.concatenate(rows) if rows else np.zeros(0, np.int64)
    order = np.lexsort((row, box))
    return box[order], row[order]


def _take_points(
    part: Any, first_row: int, *answers: tuple[np.ndarray, Any]
) -> tuple[Any, np.ndarray, np.ndarray]:
    """The matched rows that lie in this partition of the points, with their boxes."""
    box, rows = _global_pairs(answers)
    mine = (rows >= first_row) & (rows < first_row + len(part))
    return part.iloc[rows[mine] - first_row], box[mine], rows[mine]


def _join_frame(
    boxes: Any, suffixes: Any, keep_index: bool, *taken: tuple[Any, np.ndarray, np.ndarray]
) -> Any:
    """Matched point rows beside their boxes' rows, in box order then point order."""
    pd = pandas()
    points = pd.concat([t[0] for t in taken])
    box = np.concatenate([t[1] for t in taken])
    rows = np.concatenate([t[2] for t in taken])
    order = np.lexsort((rows, box))
    left, right = _output_sides(points, boxes, suffixes, keep_index)
    left = left.iloc[order].reset_index(drop=True)
    right = right.iloc[box[order]].reset_index(drop=True)
    out = pd.concat([left, right], axis=1)
    out.index = pd.RangeIndex(len(order))
    return out


def _broadcast_answer(tree: RangeTree, boxes: Any, specs: Sequence[Any], op: str, kw: dict) -> Any:
    method = {"count": tree.count_boxes, "sum": tree.sum_boxes, "report": tree.report_boxes}[op]
    return method(boxes, *specs, **kw)


# ---------------------------------------------------------------- shard files


def _shard_file(shard: int, shards: int) -> str:
    return f"shard-{shard:05d}-of-{shards:05d}.boxwood"


_PARTIAL = re.compile(r"^\.shard-\d{5}-of-\d{5}\.boxwood\..*\.partial$")


def _file_fingerprint(path: str) -> tuple[int, str]:
    """Size and header checksum (which covers every section's checksum) of an index file."""
    with open(path, "rb") as f:
        f.seek(64)
        checksum = f.read(8).hex()
    return os.path.getsize(path), checksum


def _save_shard(tree: RangeTree, path: str) -> dict[str, Any]:
    tree.save(path)  # atomic: a temporary file, synced, renamed
    size, checksum = _file_fingerprint(path)
    return {"file": os.path.basename(path), "rows": len(tree), "bytes": size, "xxh3": checksum}


def _write_manifest(folder: str, manifest: dict[str, Any], *saved: dict[str, Any]) -> str:
    """Last step of a save, after every shard file is in place: the folder becomes valid."""
    for name in os.listdir(folder):
        if _PARTIAL.match(name):  # left by a worker killed mid-save; its task was rerun
            os.remove(os.path.join(folder, name))
    manifest = dict(manifest, shards=list(saved))
    path = os.path.join(folder, MANIFEST_NAME)
    partial = os.path.join(folder, f".{MANIFEST_NAME}.{os.getpid()}-{_token()}.partial")
    with open(partial, "w", encoding="utf-8") as f:
        json.dump(manifest, f, indent=1, sort_keys=True)
        f.flush()
        os.fsync(f.fileno())
    os.replace(partial, path)
    _sync_folder(folder)
    return path


def _sync_folder(folder: str) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _load_shard(path: str, expected: dict[str, Any], mmap: bool) -> RangeTree:
    size, checksum = _file_fingerprint(path)
    if size < expected["bytes"]:
        raise TruncatedIndexFileError(
            f"{path}: shard file is cut short: {size} bytes, the manifest says {expected['bytes']}"
        )
    if size != expected["bytes"]:
        raise CorruptIndexFileError(
            f"{path}: shard file is {size} bytes, the manifest says {expected['bytes']}"
        )
    if checksum != expected["xxh3"]:
        raise ChecksumMismatchError(
            f"{path}: shard file is not the one the manifest names (header checksum differs)"
        )
    tree = _persist.load(path, mmap=mmap)
    if len(tree) != expected["rows"]:
        raise CorruptIndexFileError(
            f"{path}: shard holds {len(tree)} rows, the manifest says {expected['rows']}"
        )
    return tree


# ---------------------------------------------------------------- the sharded tree


class ShardedTree:
    """Range trees over x-intervals of a Dask DataFrame's points, one per shard, on workers.

    Build it with :meth:`from_frame` or open a saved one with :meth:`load`. Shard ``i``
    holds the points with ``boundaries[i - 1] <= x < boundaries[i]`` (the first and last
    shard open to -inf and +inf), so equal x values always share a shard. A row is its
    position in the Dask DataFrame the tree was built from, counted as if its partitions
    were concatenated in order (the frame's index labels play no part); rows left out for
    missing values keep their positions.
    """

    def __init__(
        self,
        client: Any,
        shards: list[Any],
        plan: _Plan,
        *,
        layout: str,
        weights: str | None,
        shard_rows: list[int],
        nbytes: int,
        rows_dropped: int,
        partition_offsets: list[int],
    ) -> None:
        self._client = client
        self._shards = shards
        self._plan = plan
        self._layout = layout
        self._weights = weights
        self._shard_rows = shard_rows
        self._nbytes = nbytes
        self._rows_dropped = rows_dropped
        self._partition_offsets = partition_offsets

    # ------------------------------------------------------------ building

    @classmethod
    def from_frame(
        cls,
        points: Any,
        x: Hashable,
        y: Hashable,
        weights: Hashable | None = None,
        *,
        shards: int | None = None,
        boundaries: Any = None,
        layout: Layout = "fast",
        on_missing: str = "raise",
        client: Any = None,
        progress: bool = False,
    ) -> ShardedTree:
        """Shard a Dask DataFrame's points by x and build one tree per shard on the workers.

        `shards` is how many shards to aim for (default: one per worker); boundaries are
        placed at quantiles of x, and there are fewer shards when x has fewer distinct
        values. Or give `boundaries` yourself (then `shards` is not used): strictly
        ascending x values of the column's type, shard ``i`` holding
        ``boundaries[i - 1] <= x < boundaries[i]``; shards may then be empty.
        Columns, dtypes, `layout` and `on_missing` are as for
        :meth:`boxwood.RangeTree.from_frame`. Returns once every shard is built; the trees
        stay on the workers. Dask needs to be able to recompute `points` if a worker
        holding a shard is lost.
        """
        client = _client(client)
        columns = _point_columns(points, x, y, weights, layout, on_missing)
        wanted = shards if shards is not None else max(1, len(client.scheduler_info()["workers"]))
        if isinstance(wanted, bool) or not isinstance(wanted, int) or wanted < 1:
            raise ValueError(f"shards must be a positive integer, got {shards!r}")
        token = _token()
        source = points[list(dict.fromkeys(columns.values()))]
        parts = client.compute(source.to_delayed())
        samples = _SAMPLES_PER_SHARD * wanted
        scans = client.gather(
            [
                client.submit(_scan_partition, p, columns, samples, key=f"boxwood-scan-{token}-{j}")
                for j, p in enumerate(parts)
            ]
        )
        x_axis, y_axis = _agreed_axes(scans)
        rows_dropped = _check_missing(scans, columns, on_missing)
        offsets = np.concatenate(([0], np.cumsum([s["rows"] for s in scans]))).tolist()
        if boundaries is None:
            cuts = _quantile_boundaries(scans, wanted, _engine_dtype(x_axis))
        else:
            cuts = _given_boundaries(boundaries, x_axis)
        plan = _Plan(x_axis, y_axis, cuts)
        k = cuts.size + 1
        splits = [
            client.submit(
                _split_partition, p, columns, cuts, offsets[j], key=f"boxwood-split-{token}-{j}"
            )
            for j, p in enumerate(parts)
        ]
        trees = [
            client.submit(
                _build_shard,
                columns,
                layout,
                *[
                    client.submit(operator.getitem, split, s, key=f"boxwood-piece-{token}-{j}-{s}")
                    for j, split in enumerate(splits)
                ],
                key=f"boxwood-build-{token}-{s}",
            )
            for s in range(k)
        ]
        del parts, splits  # Dask keeps what it needs to rebuild a lost shard
        info = _gather(client, client.map(_shard_info, trees, pure=False), progress, trees)
        return cls(
            client,
            trees,
            plan,
            layout=layout,
            weights=info[0]["weights"],
            shard_rows=[i["rows"] for i in info],
            nbytes=sum(i["nbytes"] for i in info),
            rows_dropped=rows_dropped,
            partition_offsets=offsets,
        )

    # ------------------------------------------------------------ description

    def __len__(self) -> int:
        return sum(self._shard_rows)

    @property
    def num_shards(self) -> int:
        return len(self._shards)

    @property
    def shard_rows(self) -> list[int]:
        """Points in each shard."""
        return list(self._shard_rows)

    @property
    def boundaries(self) -> np.ndarray:
        """The x values where shards meet, ascending (``num_shards - 1`` of them), in the x
        column's numpy dtype (tz-aware times as naive UTC)."""
        axis = self._plan.x_axis
        cuts = self._plan.boundaries
        return cuts.view(axis.dtype) if axis.is_time else cuts.astype(axis.dtype)

    @property
    def futures(self) -> list[Any]:
        """The Dask futures of the shards' trees, in x order (for ``distributed.progress``,
        ``client.who_has`` and the like)."""
        return list(self._shards)

    @property
    def layout(self) -> str:
        return self._layout

    @property
    def nbytes(self) -> int:
        """Bytes held by all shards' trees together."""
        return self._nbytes

    @property
    def rows_dropped(self) -> int:
        return self._rows_dropped

    @property
    def weights_dtype(self) -> np.dtype | None:
        return None if self._weights is None else np.dtype(self._weights)

    def __repr__(self) -> str:
        return (
            f"ShardedTree(rows={len(self):,}, shards={self.num_shards}, layout={self.layout!r}, "
            f"weights={self._weights}, nbytes={self.nbytes:,})"
        )

    # ------------------------------------------------------------ queries

    def count_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        progress: bool = False,
    ) -> Any:
        """Points in each box: for a pandas DataFrame of boxes, an int64 Series named
        ``"count"`` on its index (as :meth:`boxwood.RangeTree.count_boxes`); for a Dask
        DataFrame, a Dask Series of the same, partition by partition, already running."""
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, "count", progress)

    def sum_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        progress: bool = False,
    ) -> Any:
        """Weight sum of each box (a Series named ``"sum"``), as :meth:`count_boxes`.
        Integer sums are exact (``OverflowError`` beyond int64); float sums add the shards'
        sums, so they agree with one tree's to a few units in the last place."""
        if self._weights is None:
            raise ValueError(
                "this tree was built without weights; pass weights= when building it to use "
                "sum_boxes()"
            )
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, "sum", progress)

    def report_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        progress: bool = False,
    ) -> Any:
        """One row per (box, point) match, columns ``box`` (the box's index label) and
        ``row`` (the point's global position), in box order and rows ascending within a
        box: :meth:`boxwood.RangeTree.report_boxes` with ``ordered=True``. A Dask DataFrame
        of boxes gives a Dask DataFrame, one partition per partition of boxes."""
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, "report", progress)

    def join(
        self,
        points: Any,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        suffixes: tuple[str | None, str | None] = ("_point", "_box"),
        keep_index: bool = False,
        progress: bool = False,
    ) -> Any:
        """:func:`boxwood.box_join` of `points` (the Dask DataFrame this tree was built
        from, in the same row order) and `boxes`: the matched points' columns, then the
        boxes' columns, in box order and within a box in the points' order. Pandas boxes
        give a pandas DataFrame on a fresh ``RangeIndex``; Dask boxes a Dask DataFrame
        whose partitions each start their index at 0."""
        if not isinstance(points, dd.DataFrame):
            raise TypeError(f"points must be a Dask DataFrame, got {type(points).__name__}")
        specs = (x_lo, x_hi, y_lo, y_hi)
        _output_sides(points._meta, _meta_of(boxes), suffixes, keep_index)  # names clash early
        client = self._client
        token = _token()
        parts = client.compute(points.to_delayed())
        lengths = client.gather(client.map(len, parts, pure=False))
        offsets = np.concatenate(([0], np.cumsum(lengths))).tolist()
        if offsets[-1] != len(self) + self._rows_dropped:
            raise ValueError(
                f"this tree was built from {len(self) + self._rows_dropped} rows but points "
                f"has {offsets[-1]}; pass the frame the tree was built from"
            )

        def take(answers: list[Any], tag: str) -> list[Any]:
            return [
                client.submit(_take_points, p, offsets[j], *answers, key=f"{tag}-take-{j}")
                for j, p in enumerate(parts)
            ]

        if isinstance(boxes, dd.DataFrame):
            self._plan.engine_bounds(boxes._meta, specs, inclusive)  # types checked here
            joined = []
            for i, part in enumerate(client.compute(boxes.to_delayed())):
                tag = f"boxwood-join-{token}-{i}"
                _, answers = self._answers_of_partition(part, specs, inclusive, "report", tag)
                joined.append(
                    client.submit(
                        _join_frame, part, suffixes, keep_index, *take(answers, tag), key=tag
                    )
                )
            if progress:
                distributed.progress(joined)
            meta = _join_frame(boxes._meta, suffixes, keep_index, _empty_take(points._meta))
            return dd.from_delayed(joined, meta=meta, verify_meta=False)
        _require_boxes(boxes)
        tag = f"boxwood-join-{token}"
        answers = self._answers_of_frame(boxes, specs, inclusive, "report", tag)
        taken = _gather(client, take(answers, tag), progress)
        return _join_frame(boxes, suffixes, keep_index, *taken)

    def _ask(self, boxes: Any, specs: Sequence[Any], inclusive: Any, op: str, progress: bool):
        client = self._client
        tag = f"boxwood-{op}-{_token()}"
        if isinstance(boxes, dd.DataFrame):
            self._plan.engine_bounds(boxes._meta, specs, inclusive)  # types checked here
            columns = [s for s in specs if isinstance(s, str) or _is_column(boxes, s)]
            source = boxes[list(dict.fromkeys(columns))] if columns else boxes
            results = []
            for i, part in enumerate(client.compute(source.to_delayed())):
                routed, answers = self._answers_of_partition(
                    part, specs, inclusive, op, f"{tag}-{i}"
                )
                results.append(
                    client.submit(
                        _combine_partition, op, self._weights, routed, *answers, key=f"{tag}-{i}"
                    )
                )
            if progress:
                distributed.progress(results)
            meta = _combine(op, boxes._meta.index, self._weights)
            divisions = boxes.divisions if op != "report" else None
            return dd.from_delayed(results, meta=meta, divisions=divisions, verify_meta=False)
        _require_boxes(boxes)
        answers = self._answers_of_frame(boxes, specs, inclusive, op, tag)
        return _combine(op, boxes.index, self._weights, *_gather(client, answers, progress))

    def _answers_of_frame(
        self, boxes: Any, specs: Sequence[Any], inclusive: Any, op: str, tag: str
    ) -> list[Any]:
        """Futures of ``(box positions, answer)``, one per shard with boxes routed to it."""
        bounds = self._plan.engine_bounds(boxes, specs, inclusive)
        first, last = self._plan.route(bounds, inclusive)
        futures = []
        for s, tree in enumerate(self._shards):
            ids = np.flatnonzero((first <= s) & (s <= last))
            if ids.size:
                futures.append(
                    self._client.submit(
                        _answer_some,
                        tree,
                        [b[ids] for b in bounds],
                        ids,
                        op,
                        inclusive,
                        key=f"{tag}-shard-{s}",
                    )
                )
        return futures

    def _answers_of_partition(
        self, part: Any, specs: Sequence[Any], inclusive: Any, op: str, tag: str
    ) -> tuple[Any, list[Any]]:
        """The future of a partition's routing, and futures of every shard's answer for it
        (a shard with no box of the partition answers None at once)."""
        client = self._client
        routed = client.submit(
            _route_partition, part, self._plan, specs, inclusive, key=f"{tag}-route"
        )
        return routed, [
            client.submit(_answer_routed, tree, routed, s, op, inclusive, key=f"{tag}-shard-{s}")
            for s, tree in enumerate(self._shards)
        ]

    # ------------------------------------------------------------ saving and loading

    def save(
        self, folder: str | os.PathLike[str], *, wait: bool = True, progress: bool = False
    ) -> Any:
        """Write one index file per shard and a manifest into `folder` (new or empty), on
        the workers: every worker and this process must see the same `folder`.

        Each shard file is written atomically (:meth:`boxwood.RangeTree.save`) and the
        manifest, which :meth:`load` needs, only after all of them, atomically too: an
        interrupted save leaves a folder without a manifest, which :meth:`load` refuses.
        With ``wait=False`` it returns the Dask future of the manifest's path at once.
        """
        folder = os.path.abspath(os.fspath(folder))
        os.makedirs(folder, exist_ok=True)
        if os.listdir(folder):
            raise FileExistsError(f"{folder}: the folder is not empty; save into a new folder")
        client = self._client
        token = _token()
        saved = [
            client.submit(
                _save_shard,
                tree,
                os.path.join(folder, _shard_file(s, self.num_shards)),
                key=f"boxwood-save-{token}-{s}",
            )
            for s, tree in enumerate(self._shards)
        ]
        done = client.submit(
            _write_manifest, folder, self._manifest(), *saved, key=f"boxwood-manifest-{token}"
        )
        if not wait:
            return done
        _gather(client, [done], progress, saved)
        return None

    def _manifest(self) -> dict[str, Any]:
        cuts = self._plan.boundaries
        return {
            _MANIFEST_KEY: MANIFEST_VERSION,
            "index_format_version": _INDEX_FORMAT_VERSION,
            "layout": self._layout,
            "x": _persist._axis_to_json(self._plan.x_axis),
            "y": _persist._axis_to_json(self._plan.y_axis),
            "weights": self._weights,
            "boundaries": {
                "domain": cuts.dtype.name,
                # Floats as exact repr strings ("inf" included), which JSON numbers are not.
                "values": [repr(float(v)) for v in cuts]
                if cuts.dtype.kind == "f"
                else cuts.tolist(),
            },
            "rows": len(self),
            "rows_dropped": self._rows_dropped,
            "partition_offsets": self._partition_offsets,
            "nbytes": self._nbytes,
        }

    @classmethod
    def load(
        cls,
        folder: str | os.PathLike[str],
        *,
        client: Any = None,
        mmap: bool = True,
        progress: bool = False,
    ) -> ShardedTree:
        """Open a folder written by :meth:`save`: each worker loads its shards (memory-mapped
        unless ``mmap=False``), checked against the manifest and like any index file."""
        client = _client(client)
        folder = os.path.abspath(os.fspath(folder))
        manifest = _read_manifest(folder)
        token = _token()
        entries = manifest["shards"]
        trees = [
            client.submit(
                _load_shard,
                os.path.join(folder, entry["file"]),
                entry,
                mmap,
                key=f"boxwood-load-{token}-{s}",
            )
            for s, entry in enumerate(entries)
        ]
        info = _gather(client, client.map(_shard_info, trees, pure=False), progress, trees)
        plan = _Plan(manifest["x_axis"], manifest["y_axis"], manifest["cuts"])
        for s, i in enumerate(info):
            same = _same_type(i["x_axis"], plan.x_axis) and _same_type(i["y_axis"], plan.y_axis)
            if not same or i["weights"] != manifest["weights"]:
                raise CorruptIndexFileError(
                    f"{folder}: shard {entries[s]['file']} has other columns than the manifest"
                )
        return cls(
            client,
            trees,
            plan,
            layout=manifest["layout"],
            weights=manifest["weights"],
            shard_rows=[i["rows"] for i in info],
            nbytes=sum(i["nbytes"] for i in info),
            rows_dropped=manifest["rows_dropped"],
            partition_offsets=manifest["partition_offsets"],
        )


# ---------------------------------------------------------------- client-side checks


def _same_type(a: AxisInfo, b: AxisInfo) -> bool:
    """Axes that compare alike (their names only label messages)."""
    return (a.dtype, a.kind, a.tz) == (b.dtype, b.kind, b.tz)


def _point_columns(
    points: Any, x: Hashable, y: Hashable, weights: Hashable | None, layout: Any, on_missing: Any
) -> dict[str, Hashable]:
    if not isinstance(points, dd.DataFrame):
        hint = (
            "; for a pandas DataFrame use boxwood.RangeTree.from_frame, or "
            "dask.dataframe.from_pandas first"
            if isinstance(points, pandas().DataFrame)
            else ""
        )
        raise TypeError(f"points must be a Dask DataFrame, got {type(points).__name__}{hint}")
    if layout not in ("fast", "compact"):
        raise ValueError(f"layout must be 'fast' or 'compact', got {layout!r}")
    if on_missing not in ON_MISSING:
        raise ValueError(f"on_missing must be 'raise' or 'drop', got {on_missing!r}")
    columns = {"x": x, "y": y}
    if weights is not None:
        columns["weights"] = weights
    require_columns(points, columns, "the points frame")
    return columns


def _agreed_axes(scans: list[dict[str, Any]]) -> tuple[AxisInfo, AxisInfo]:
    x_axis, y_axis = scans[0]["x_axis"], scans[0]["y_axis"]
    for j, scan in enumerate(scans):
        if not (_same_type(scan["x_axis"], x_axis) and _same_type(scan["y_axis"], y_axis)):
            raise TypeError(
                f"partition {j} of the points has other column types than partition 0 "
                f"(x: {scan['x_axis'].dtype} vs {x_axis.dtype}, y: {scan['y_axis'].dtype} vs "
                f"{y_axis.dtype}); cast the columns to one dtype first"
            )
    return x_axis, y_axis


def _check_missing(
    scans: list[dict[str, Any]], columns: dict[str, Hashable], on_missing: str
) -> int:
    """Raise on missing values as from_frame does, or warn and count the rows dropped."""
    total = sum(s["rows"] for s in scans)
    dropped = total - sum(s["kept"] for s in scans)
    if dropped == 0:
        return 0
    if on_missing == "raise":
        start = 0
        for scan in scans:
            for role, (_, position, label) in scan["missing"].items():
                raise ValueError(
                    f"{role} column {columns[role]!r} has a missing value (NaN, NaT or NA) at "
                    f"row {label!r} (position {start + position}); drop those rows first or "
                    "pass on_missing='drop'"
                )
            start += scan["rows"]
    per_role = {role: sum(s["missing"].get(role, (0,))[0] for s in scans) for role in columns}
    described = "; ".join(f"{role} {columns[role]!r}: {n}" for role, n in per_role.items() if n)
    warn_at_caller(
        f"dropped {dropped} of {total} rows with missing values ({described})",
        MissingValuesDropped,
    )
    return dropped


def _quantile_boundaries(scans: list[dict[str, Any]], shards: int, dtype: type) -> np.ndarray:
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


def _given_boundaries(boundaries: Any, axis: AxisInfo) -> np.ndarray:
    """Boundaries given by the caller, as engine numbers. A boundary is a closed lower
    edge (``x >= b``), so it is rounded up into the axis's domain when it falls between."""
    if axis.is_time:
        cuts = _bounds.array_bound(boundaries, axis, "boundaries", _bounds.UP)
        if cuts.dtype.kind == "f" or (cuts.size and np.abs(cuts).max() == _I64_MAX):
            raise ValueError("boundaries must be finite times")
        cuts = np.atleast_1d(cuts).astype(np.int64)
    else:
        values = np.atleast_1d(np.asarray(boundaries))
        if values.ndim != 1 or values.dtype.kind not in "iuf":
            raise TypeError(f"boundaries must be a 1-D array of numbers for the {axis.dtype} axis")
        cuts = np.array([_numeric_boundary(v, axis) for v in values.tolist()], _engine_dtype(axis))
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


def _read_manifest(folder: str) -> dict[str, Any]:
    path = os.path.join(folder, MANIFEST_NAME)
    if not os.path.isdir(folder):
        raise FileNotFoundError(f"{folder}: no such shard folder")
    if not os.path.exists(path):
        raise FileNotFoundError(
            f"{folder}: no {MANIFEST_NAME}: not a finished shard folder (an interrupted save "
            "leaves none)"
        )
    try:
        with open(path, encoding="utf-8") as f:
            manifest = json.load(f)
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise CorruptIndexFileError(f"{path}: the manifest is not valid JSON") from None
    if not isinstance(manifest, dict) or not isinstance(manifest.get(_MANIFEST_KEY), int):
        raise CorruptIndexFileError(f"{path}: not a boxwood shard manifest")
    if manifest[_MANIFEST_KEY] != MANIFEST_VERSION:
        raise UnsupportedIndexFileError(
            f"{path}: manifest version {manifest[_MANIFEST_KEY]}; this boxwood reads "
            f"version {MANIFEST_VERSION}"
        )
    try:
        return _manifest_fields(manifest, path)
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        if isinstance(exc, CorruptIndexFileError):
            raise
        raise CorruptIndexFileError(
            f"{path}: the manifest is incomplete or malformed ({exc!r})"
        ) from None


def _manifest_fields(manifest: dict[str, Any], path: str) -> dict[str, Any]:
    """The manifest with its axes and boundaries decoded; raises on anything out of place."""
    domain = manifest["boundaries"]["domain"]
    if domain not in ("float64", "int64"):
        raise CorruptIndexFileError(f"{path}: boundaries of unknown domain {domain!r}")
    x_axis = _persist._axis_from_json(manifest["x"], domain, path)
    y_kind = manifest["y"]["kind"]
    y_axis = _persist._axis_from_json(manifest["y"], _persist._KIND_DOMAIN[y_kind], path)
    values = manifest["boundaries"]["values"]
    cuts = np.array([float(v) for v in values] if domain == "float64" else values, dtype=domain)
    shards = manifest["shards"]
    if not isinstance(shards, list) or len(shards) != cuts.size + 1:
        raise CorruptIndexFileError(f"{path}: {cuts.size} boundaries need {cuts.size + 1} shards")
    for s, entry in enumerate(shards):
        if entry["file"] != _shard_file(s, len(shards)):
            raise CorruptIndexFileError(f"{path}: shard {s} names the file {entry['file']!r}")
        for field in ("rows", "bytes"):
            if type(entry[field]) is not int or entry[field] < 0:
                raise CorruptIndexFileError(f"{path}: shard {s} has a bad {field!r}")
        if not isinstance(entry["xxh3"], str):
            raise CorruptIndexFileError(f"{path}: shard {s} has no header checksum")
    if manifest["layout"] not in ("fast", "compact") or manifest["weights"] not in (
        None,
        "float64",
        "int64",
    ):
        raise CorruptIndexFileError(f"{path}: unknown layout or weights")
    offsets = manifest["partition_offsets"]
    if sum(e["rows"] for e in shards) + manifest["rows_dropped"] != offsets[-1]:
        raise CorruptIndexFileError(f"{path}: the row counts do not add up")
    return dict(manifest, x_axis=x_axis, y_axis=y_axis, cuts=cuts)


# ---------------------------------------------------------------- shared small pieces


def _gather(client: Any, futures: list[Any], progress: bool, watched: Any = None) -> list[Any]:
    if progress:
        distributed.progress(watched if watched is not None else futures)
    return client.gather(futures)


def _require_boxes(boxes: Any) -> None:
    if not isinstance(boxes, pandas().DataFrame):
        raise TypeError(f"boxes must be a pandas or a Dask DataFrame, got {type(boxes).__name__}")


def _meta_of(boxes: Any) -> Any:
    return boxes._meta if isinstance(boxes, dd.DataFrame) else boxes


def _is_column(frame: Any, spec: Any) -> bool:
    try:
        return spec is not None and spec in frame.columns
    except TypeError:
        return False


def _empty_take(points_meta: Any) -> tuple[Any, np.ndarray, np.ndarray]:
    return points_meta.iloc[:0], np.zeros(0, np.int64), np.zeros(0, np.int64)


# ---------------------------------------------------------------- a tree broadcast whole


class BroadcastTree:
    """One tree copied to every worker, answering Dask DataFrames of boxes partition by
    partition (a pandas DataFrame of boxes is answered here, by the tree itself)."""

    def __init__(self, tree: RangeTree, client: Any) -> None:
        if not isinstance(tree, RangeTree):
            raise TypeError(f"tree must be a boxwood.RangeTree, got {type(tree).__name__}")
        self.tree = tree
        self._client = client
        # Every worker holds a copy, so losing one worker loses no tree.
        self.future = client.scatter(tree, broadcast=True, hash=False)

    def count_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
    ) -> Any:
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "count", {"inclusive": inclusive})

    def sum_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
    ) -> Any:
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "sum", {"inclusive": inclusive})

    def report_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        ordered: bool = True,
    ) -> Any:
        kw = {"inclusive": inclusive, "ordered": ordered}
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "report", kw)

    def _ask(self, boxes: Any, specs: Sequence[Any], op: str, kw: dict[str, Any]) -> Any:
        if not isinstance(boxes, dd.DataFrame):
            return _broadcast_answer(self.tree, boxes, specs, op, kw)
        meta = _broadcast_answer(self.tree, boxes._meta, specs, op, kw)  # types checked here
        tag = f"boxwood-{op}-{_token()}"
        results = [
            self._client.submit(
                _broadcast_answer, self.future, part, specs, op, kw, key=f"{tag}-{i}"
            )
            for i, part in enumerate(self._client.compute(boxes.to_delayed()))
        ]
        divisions = boxes.divisions if op != "report" else None
        return dd.from_delayed(results, meta=meta, divisions=divisions, verify_meta=False)


def broadcast(tree: RangeTree, client: Any = None) -> BroadcastTree:
    """Copy `tree` to every worker of `client` (default: the current client)."""
    return BroadcastTree(tree, _client(client))
