"""`ShardedTree`: range trees over x intervals of a Dask DataFrame's points, on the workers.

The client plans (boundaries, routing) and combines; the workers scan, split, build and
answer (:mod:`boxwood.dask._tasks`); a saved tree is a folder of shard files and a manifest
(:mod:`boxwood.dask._files`). See :mod:`boxwood.dask` for an example.
"""

from __future__ import annotations

import operator
import os
from collections.abc import Hashable, Sequence
from typing import Any, Literal

import dask.dataframe as dd
import distributed
import numpy as np

from .._bounds import Inclusive, document_bounds
from .._boxwood import CorruptIndexFileError
from .._columns import AxisInfo
from .._frames import (
    ON_MISSING,
    MissingValuesDropped,
    key_roles,
    pandas,
    require_columns,
    row_label,
    spread_columns,
    stats_frame,
    warn_at_caller,
)
from .._join import check_key_names, key_sides, output_sides
from .._keys import KeyDictionary, build_keys
from .._parts import Layout
from .._stats import (
    as_axis_dtype,
    axis_of,
    extremes_of_counted,
    probabilities,
    quantiles_of_counted,
)
from ._common import client_of, gather, new_token
from ._files import (
    load_shard,
    manifest_of,
    read_manifest,
    same_keys,
    save_shard,
    shard_file,
    write_manifest,
)
from ._routing import (
    Plan,
    box_codes,
    engine_dtype,
    given_boundaries,
    pair_boundaries,
    quantile_boundaries,
    route_partition,
)
from ._spread import ShardedBoxes
from ._tasks import (
    answer_routed,
    answer_some,
    build_shard,
    combine,
    combine_partition,
    join_frame,
    sample_pairs,
    scan_partition,
    shard_info,
    shard_key_counts,
    shard_nbytes,
    split_partition,
    take_points,
)

# Order statistics of x each partition sends per shard wanted, to place the boundaries.
SAMPLES_PER_SHARD = 64


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
        plan: Plan,
        *,
        layout: str,
        weights: str | None,
        shard_rows: list[int],
        nbytes: int,
        rows_dropped: int,
        partition_offsets: list[int],
        keys: KeyDictionary | None = None,
    ) -> None:
        self._client = client
        self._keys = keys
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
        layout: Layout = "compact",
        on_missing: str = "raise",
        check_memory: bool = True,
        client: Any = None,
        progress: bool = False,
        by: Hashable | list[Hashable] | None = None,
    ) -> ShardedTree:
        """Shard a Dask DataFrame's points by x and build one tree per shard on the workers.

        `shards` is how many shards to aim for (default: one per worker); boundaries are
        placed at quantiles of x, and there are fewer shards when x has fewer distinct
        values. Or give `boundaries` yourself (then `shards` is not used): strictly
        ascending x values of the column's type, shard ``i`` holding
        ``boundaries[i - 1] <= x < boundaries[i]``; shards may then be empty.
        Columns, dtypes, `layout`, `on_missing` and `check_memory` (checked on each worker
        for its shard) are as for :meth:`boxwood.RangeTree.from_frame`. Returns once every
        shard is built; the trees stay on the workers. Dask needs to be able to recompute
        `points` if a worker holding a shard is lost.

        With `by` (a key column, or a list of them, as for
        :meth:`boxwood.RangeTree.from_frame`) the tree is keyed: one key dictionary for all
        the points (codes in sorted key order), boundaries placed at quantiles of the
        (key, x) order, so that one key's points may span shards, and each shard a keyed
        tree with the shared dictionary. `boundaries` cannot be given then.
        """
        client = client_of(client)
        columns = _point_columns(points, x, y, weights, layout, on_missing)
        columns.update(key_roles(by))
        if by is not None and boundaries is not None:
            raise ValueError(
                "boundaries= cannot be given with by=: a keyed tree's shards are cut at "
                "(key, x) quantiles"
            )
        require_columns(points, columns, "the points frame")
        wanted = shards if shards is not None else max(1, len(client.scheduler_info()["workers"]))
        if isinstance(wanted, bool) or not isinstance(wanted, int) or wanted < 1:
            raise ValueError(f"shards must be a positive integer, got {shards!r}")
        token = new_token()
        source = points[list(dict.fromkeys(columns.values()))]
        parts = client.compute(source.to_delayed())
        samples = SAMPLES_PER_SHARD * wanted
        scans = client.gather(
            [
                client.submit(scan_partition, p, columns, samples, key=f"boxwood-scan-{token}-{j}")
                for j, p in enumerate(parts)
            ]
        )
        x_axis, y_axis = _agreed_axes(scans)
        rows_dropped = _check_missing(scans, columns, on_missing)
        offsets = np.concatenate(([0], np.cumsum([s["rows"] for s in scans]))).tolist()
        keys, key_codes = None, None
        if by is not None:
            keys = _shared_keys(scans, columns)
            pairs = client.gather(
                [
                    client.submit(
                        sample_pairs, p, columns, samples, keys, key=f"boxwood-pairs-{token}-{j}"
                    )
                    for j, p in enumerate(parts)
                ]
            )
            key_codes, cuts = pair_boundaries(pairs, wanted, engine_dtype(x_axis))
        elif boundaries is None:
            cuts = quantile_boundaries(scans, wanted, engine_dtype(x_axis))
        else:
            cuts = given_boundaries(boundaries, x_axis)
        plan = Plan(x_axis, y_axis, cuts, key_codes, 0 if keys is None else keys.count)
        k = cuts.size + 1
        splits = [
            client.submit(
                split_partition,
                p,
                columns,
                cuts,
                offsets[j],
                keys,
                key_codes,
                key=f"boxwood-split-{token}-{j}",
            )
            for j, p in enumerate(parts)
        ]
        trees = [
            client.submit(
                build_shard,
                columns,
                layout,
                check_memory,
                keys,
                *[
                    client.submit(operator.getitem, split, s, key=f"boxwood-piece-{token}-{j}-{s}")
                    for j, split in enumerate(splits)
                ],
                key=f"boxwood-build-{token}-{s}",
            )
            for s in range(k)
        ]
        del parts, splits  # Dask keeps what it needs to rebuild a lost shard
        info = gather(client, client.map(shard_info, trees, pure=False), progress, trees)
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
            keys=keys,
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
    def keys(self) -> Any:
        """A keyed tree's distinct keys in code order, as :attr:`boxwood.RangeTree.keys`;
        None for a tree built without ``by=``."""
        return None if self._keys is None else self._keys.listing()

    def count_by_key(self) -> dict[Any, int]:
        """Points of every key over all shards, in key order, as
        :meth:`boxwood.RangeTree.count_by_key` (each shard's from its key offsets, no query).
        """
        if self._keys is None:
            raise ValueError("this tree was built without keys (by=)")
        client = self._client
        per_shard = client.gather(client.map(shard_key_counts, self._shards, pure=False))
        counts = np.array([list(c.values()) for c in per_shard], dtype=np.int64)
        return dict(zip(per_shard[0], counts.sum(axis=0).tolist()))

    @property
    def key_names(self) -> tuple[str, ...] | None:
        return None if self._keys is None else self._keys.names

    @property
    def nbytes(self) -> int:
        """Bytes held by all shards' trees together: with the transposed count cascade a
        shard derives for its first y statistic (:meth:`stats_boxes` with ``of="y"``,
        ``boxwood.estimate_bytes(rows).y_statistics_bytes`` of each shard's rows)."""
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

    @document_bounds
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
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """Points in each box: for a pandas DataFrame of boxes, an int64 Series named
        ``"count"`` on its index (as :meth:`boxwood.RangeTree.count_boxes`); for a Dask
        DataFrame, a Dask Series of the same, partition by partition, already running.

        {frame bounds}
        {frame by}
        """
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, "count", progress, by=by)

    @document_bounds
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
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """Weight sum of each box (a Series named ``"sum"``), as :meth:`count_boxes`.
        Integer sums are exact (``OverflowError`` beyond int64); float sums add the shards'
        sums, so they agree with one tree's to a few units in the last place.

        {frame bounds}
        {frame by}
        """
        if self._weights is None:
            raise ValueError(
                "this tree was built without weights; pass weights= when building it to use "
                "sum_boxes()"
            )
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), inclusive, "sum", progress, by=by)

    @document_bounds
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
        progress: bool = False,
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """One row per (box, point) match, columns ``box`` (the box's index label) and
        ``row`` (the point's global position), in box order, as
        :meth:`boxwood.RangeTree.report_boxes` gives them. A Dask DataFrame of boxes gives
        a Dask DataFrame, one partition per partition of boxes.

        {frame bounds}
        {ordered}
        {frame by}
        """
        specs = (x_lo, x_hi, y_lo, y_hi)
        return self._ask(boxes, specs, inclusive, "report", progress, ordered=ordered, by=by)

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
        inclusive: Inclusive = "both",
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """How the points in each box are spread, exactly as
        :meth:`boxwood.RangeTree.stats_boxes` of one tree over all the points gives it: a
        pandas DataFrame on the boxes' index with ``count``, ``sum`` and ``mean`` (trees
        with weights; float sums add the shards' sums, as :meth:`sum_boxes`), ``min``,
        ``max`` and one column a quantile (``q0.5``, ...) of axis `of` with numpy.quantile's
        `method`. A Dask DataFrame of boxes is computed first (the answer is a pandas
        DataFrame): the order statistics take several rounds of tasks over the shards.

        x statistics take one round: the shards are x intervals, so a box's k-th smallest x
        lies in the shard where its running count passes k. y statistics narrow each
        shard's range of candidate ranks more than seven times a step (two rounds of
        tasks), at most about ``log(n) / log(7) + 1`` steps for every box at once
        (:mod:`boxwood.dask._spread`).

        {frame bounds}
        {frame by}
        """
        self._check_by(by)
        if isinstance(boxes, dd.DataFrame):
            boxes = self._client.compute(boxes).result()
        _require_boxes(boxes)
        axis = axis_of(self._plan.x_axis, self._plan.y_axis, of)
        probs = [float(q) for q in quantiles]
        checked, weak = probabilities(probs, method)
        specs = (x_lo, x_hi, y_lo, y_hi)
        bounds = self._plan.engine_bounds(boxes, specs, inclusive)
        codes = None if self._keys is None else box_codes(self._keys, boxes, by)
        first, last = self._plan.route(bounds, inclusive, codes)
        if codes is not None:
            bounds = [*bounds, codes]  # the shards' answers take the key codes last
        batch = ShardedBoxes(
            self._client,
            self._shards,
            bounds,
            inclusive,
            first,
            last,
            f"boxwood-stats-{new_token()}",
        )
        count = batch.counts.sum(axis=0)
        dtype = engine_dtype(axis)

        def fetch(ranks: np.ndarray) -> np.ndarray:
            return as_axis_dtype(axis, batch.order_statistics(of, ranks, dtype))

        minimum, maximum = extremes_of_counted(fetch, count)
        spread = quantiles_of_counted(fetch, method, count, checked, weak) if probs else None
        total = None if self._weights is None else batch.sums(self._weights)
        columns = spread_columns(count, total, minimum, maximum, probs, spread)
        if of == "y":  # shards asked for their first y statistic now hold more
            sizes = [self._client.submit(shard_nbytes, tree, pure=False) for tree in self._shards]
            self._nbytes = sum(self._client.gather(sizes))
        return stats_frame(columns, boxes.index, axis.tz)

    @document_bounds
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
        by: Hashable | list[Hashable] | None = None,
        points_by: Hashable | list[Hashable] | None = None,
        boxes_by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """:func:`boxwood.box_join` of `points` (the Dask DataFrame this tree was built
        from, in the same row order) and `boxes`: the matched points' columns, then the
        boxes' columns, in box order and within a box in the points' order. Pandas boxes
        give a pandas DataFrame on a fresh ``RangeIndex``; Dask boxes a Dask DataFrame
        whose partitions each start their index at 0.

        A keyed tree joins each box with the points of its own key only: `by` names the
        key column(s) of both frames (the tree's key columns), or `boxes_by` the boxes'
        when they name them otherwise (`points_by`, if given, must be the tree's). As in
        :func:`boxwood.box_join`, the joined frame carries the key once, as the points'
        key columns.

        {frame bounds}
        """
        if not isinstance(points, dd.DataFrame):
            raise TypeError(f"points must be a Dask DataFrame, got {type(points).__name__}")
        boxes_by = self._join_keys(by, points_by, boxes_by)
        specs = (x_lo, x_hi, y_lo, y_hi)
        drop = list(key_roles(boxes_by).values())  # the key once: the points' columns
        meta = _meta_of(boxes)
        require_columns(meta, key_roles(boxes_by), "the boxes frame")
        output_sides(points._meta, meta.drop(columns=drop), suffixes, keep_index)  # clash early
        client = self._client
        token = new_token()
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
                client.submit(take_points, p, offsets[j], *answers, key=f"{tag}-take-{j}")
                for j, p in enumerate(parts)
            ]

        if isinstance(boxes, dd.DataFrame):
            self._plan.engine_bounds(boxes._meta, specs, inclusive)  # types checked here
            if self._keys is not None:
                box_codes(self._keys, boxes._meta, boxes_by)  # key types checked here
            joined = []
            for i, part in enumerate(client.compute(boxes.to_delayed())):
                tag = f"boxwood-join-{token}-{i}"
                _, answers = self._answers_of_partition(
                    part, specs, inclusive, "report", tag, boxes_by, ordered=True
                )
                joined.append(
                    client.submit(
                        join_frame, part, suffixes, keep_index, drop, *take(answers, tag), key=tag
                    )
                )
            if progress:
                distributed.progress(joined)
            empty = join_frame(boxes._meta, suffixes, keep_index, drop, _empty_take(points._meta))
            return dd.from_delayed(joined, meta=empty, verify_meta=False)
        _require_boxes(boxes)
        tag = f"boxwood-join-{token}"
        answers = self._answers_of_frame(
            boxes, specs, inclusive, "report", tag, boxes_by, ordered=True
        )
        taken = gather(client, take(answers, tag), progress)
        return join_frame(boxes, suffixes, keep_index, drop, *taken)

    def _join_keys(self, by: Any, points_by: Any, boxes_by: Any) -> Any:
        """The boxes' key columns of a join (None for an unkeyed tree); the points' are
        the tree's own, so `boxes_by` may come alone."""
        self._check_by(by if by is not None else boxes_by)
        if by is None and points_by is None and boxes_by is not None:
            points_by = list(self.key_names or ())
        points_by, boxes_by = key_sides(by, points_by, boxes_by)
        if points_by is not None:
            check_key_names(self.key_names, points_by)
        return boxes_by

    def _ask(
        self,
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Any,
        op: str,
        progress: bool,
        *,
        ordered: bool = True,
        by: Any = None,
    ) -> Any:
        client = self._client
        tag = f"boxwood-{op}-{new_token()}"
        self._check_by(by)
        if isinstance(boxes, dd.DataFrame):
            self._plan.engine_bounds(boxes._meta, specs, inclusive)  # types checked here
            if self._keys is not None:
                box_codes(self._keys, boxes._meta, by)  # key columns and types checked here
            columns = [s for s in specs if isinstance(s, str) or _is_column(boxes, s)]
            columns += list(key_roles(by).values())
            source = boxes[list(dict.fromkeys(columns))] if columns else boxes
            results = []
            for i, part in enumerate(client.compute(source.to_delayed())):
                routed, answers = self._answers_of_partition(
                    part, specs, inclusive, op, f"{tag}-{i}", by
                )
                results.append(
                    client.submit(
                        combine_partition,
                        op,
                        self._weights,
                        routed,
                        *answers,
                        ordered=ordered,
                        key=f"{tag}-{i}",
                    )
                )
            if progress:
                distributed.progress(results)
            meta = combine(op, boxes._meta.index, self._weights)
            divisions = boxes.divisions if op != "report" else None
            return dd.from_delayed(results, meta=meta, divisions=divisions, verify_meta=False)
        _require_boxes(boxes)
        answers = self._answers_of_frame(boxes, specs, inclusive, op, tag, by)
        answered = gather(client, answers, progress)
        return combine(op, boxes.index, self._weights, *answered, ordered=ordered)

    def _check_by(self, by: Any) -> None:
        """A keyed tree's boxes need their keys, and an unkeyed tree's have none."""
        if self._keys is None and by is not None:
            raise ValueError("this tree was built without keys: by= needs a tree built with by=")
        if self._keys is not None and by is None:
            raise ValueError(
                f"this tree was built with keys (by={', '.join(self._keys.names)}): every box "
                "needs its key, by= naming the boxes' key column(s)"
            )

    def _answers_of_frame(
        self,
        boxes: Any,
        specs: Sequence[Any],
        inclusive: Any,
        op: str,
        tag: str,
        by: Any = None,
        *,
        ordered: bool = False,
    ) -> list[Any]:
        """Futures of ``(box positions, answer)``, one per shard with boxes routed to it;
        `ordered` asks the shards for ordered reports."""
        bounds = self._plan.engine_bounds(boxes, specs, inclusive)
        codes = None if self._keys is None else box_codes(self._keys, boxes, by)
        first, last = self._plan.route(bounds, inclusive, codes)
        if codes is not None:
            bounds = [*bounds, codes]  # the shards' answers take the key codes last
        futures = []
        for s, tree in enumerate(self._shards):
            ids = np.flatnonzero((first <= s) & (s <= last))
            if ids.size:
                futures.append(
                    self._client.submit(
                        answer_some,
                        tree,
                        [b[ids] for b in bounds],
                        ids,
                        op,
                        inclusive,
                        ordered,
                        key=f"{tag}-shard-{s}",
                    )
                )
        return futures

    def _answers_of_partition(
        self,
        part: Any,
        specs: Sequence[Any],
        inclusive: Any,
        op: str,
        tag: str,
        by: Any = None,
        *,
        ordered: bool = False,
    ) -> tuple[Any, list[Any]]:
        """The future of a partition's routing, and futures of every shard's answer for it
        (a shard with no box of the partition answers None at once)."""
        client = self._client
        routed = client.submit(
            route_partition, part, self._plan, specs, inclusive, self._keys, by, key=f"{tag}-route"
        )
        return routed, [
            client.submit(
                answer_routed, tree, routed, s, op, inclusive, ordered, key=f"{tag}-shard-{s}"
            )
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
        token = new_token()
        saved = [
            client.submit(
                save_shard,
                tree,
                os.path.join(folder, shard_file(s, self.num_shards)),
                key=f"boxwood-save-{token}-{s}",
            )
            for s, tree in enumerate(self._shards)
        ]
        done = client.submit(
            write_manifest, folder, self._manifest(), *saved, key=f"boxwood-manifest-{token}"
        )
        if not wait:
            return done
        gather(client, [done], progress, saved)
        return None

    def _manifest(self) -> dict[str, Any]:
        return manifest_of(
            self._plan,
            layout=self._layout,
            weights=self._weights,
            rows=len(self),
            rows_dropped=self._rows_dropped,
            partition_offsets=self._partition_offsets,
            nbytes=self._nbytes,
            keys=self._keys,
        )

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
        client = client_of(client)
        folder = os.path.abspath(os.fspath(folder))
        manifest = read_manifest(folder)
        token = new_token()
        entries = manifest["shards"]
        trees = [
            client.submit(
                load_shard,
                os.path.join(folder, entry["file"]),
                entry,
                mmap,
                key=f"boxwood-load-{token}-{s}",
            )
            for s, entry in enumerate(entries)
        ]
        info = gather(client, client.map(shard_info, trees, pure=False), progress, trees)
        recorded = manifest["keys"]
        keys = None if recorded is None else info[0]["keys"]
        key_codes = None if recorded is None else manifest["key_codes"]
        plan = Plan(
            manifest["x_axis"],
            manifest["y_axis"],
            manifest["cuts"],
            key_codes,
            0 if keys is None else keys.count,
        )
        for s, i in enumerate(info):
            same = _same_type(i["x_axis"], plan.x_axis) and _same_type(i["y_axis"], plan.y_axis)
            if not same or i["weights"] != manifest["weights"]:
                raise CorruptIndexFileError(
                    f"{folder}: shard {entries[s]['file']} has other columns than the manifest"
                )
            if not same_keys(i["keys"], recorded, keys):
                raise CorruptIndexFileError(
                    f"{folder}: shard {entries[s]['file']} has other keys than the manifest"
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
            keys=keys,
        )


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


def _shared_keys(scans: list[dict[str, Any]], columns: dict[str, Hashable]) -> KeyDictionary:
    """The one key dictionary of all partitions' keys (codes in sorted key order)."""
    pd = pandas()
    rows = pd.concat([s["key_rows"] for s in scans], ignore_index=True).drop_duplicates()
    roles = [r for r in columns if r.startswith("by")]
    values = tuple(rows[columns[r]] for r in roles)
    names = tuple(str(columns[r]) for r in roles)
    _, keys = build_keys(values if len(values) > 1 else values[0], len(rows), names)
    return keys


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
                    f"row {row_label(label)} (position {start + position}); drop those rows "
                    "first or pass on_missing='drop'"
                )
            start += scan["rows"]
    per_role = {role: sum(s["missing"].get(role, (0,))[0] for s in scans) for role in columns}
    described = "; ".join(f"{role} {columns[role]!r}: {n}" for role, n in per_role.items() if n)
    warn_at_caller(
        f"dropped {dropped} of {total} rows with missing values ({described})",
        MissingValuesDropped,
    )
    return dropped


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
