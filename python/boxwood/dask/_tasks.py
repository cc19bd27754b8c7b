"""The tasks the workers run: scanning and splitting partitions, building shards, answers.

Every function here runs inside a Dask task on a worker (or, for the small ones, on the
client while it plans) and gets everything it needs as arguments, so that Dask can rerun it
on another worker from its inputs. Answers are in the engine's numbers (box positions and
global row positions); :func:`combine` turns the shards' answers for one set of boxes into
what one :class:`boxwood.RangeTree` would have returned.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Hashable, Sequence
from typing import Any, Literal

import numpy as np

from .._bounds import Inclusive
from .._columns import AxisInfo, coordinate_column
from .._frames import box_keys, column_values, frame_parts, pandas
from .._join import output_sides
from .._keys import KeyDictionary
from .._parts import Layout, Provenance
from .._stats import Of
from .._tree import RangeTree
from ._routing import aligned, routed_to


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


def scan_partition(part: Any, columns: dict[str, Hashable], samples: int) -> dict[str, Any]:
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
    roles = key_roles_of(columns)
    return {
        "rows": len(part),
        "kept": x.size,
        "missing": first_missing,
        "x_axis": x_axis,
        "y_axis": y_axis,
        "sample": sample,
        # A keyed tree's distinct keys of this partition, for the one shared dictionary.
        "key_rows": kept[[columns[r] for r in roles]].drop_duplicates() if roles else None,
    }


def key_roles_of(columns: dict[str, Hashable]) -> list[str]:
    """The key columns' roles (``by``, or ``by[0]``, ``by[1]``, ...) among `columns`."""
    return [role for role in columns if role.startswith("by")]


def _key_spec(columns: dict[str, Hashable]) -> Any:
    """``by=`` for the key columns of `columns`: a label, or a list of labels."""
    roles = key_roles_of(columns)
    return [columns[r] for r in roles] if len(roles) > 1 else columns[roles[0]]


def _codes_of(rows: Any, columns: dict[str, Hashable], keys: KeyDictionary) -> np.ndarray:
    return np.asarray(keys.codes_of(box_keys(rows, _key_spec(columns))), np.int64).reshape(-1)


def sample_pairs(
    part: Any, columns: dict[str, Hashable], samples: int, keys: KeyDictionary
) -> dict[str, Any]:
    """Order statistics of (key code, x) of one partition's complete rows."""
    rows = part.iloc[_kept_rows(part, columns)]
    x, _ = _engine_x(rows, columns["x"])
    codes = _codes_of(rows, columns, keys)
    order = np.lexsort((x, codes))
    at = np.linspace(0, x.size - 1, min(x.size, samples)).round().astype(np.int64)
    return {"kept": x.size, "sample": x[order][at], "sample_codes": codes[order][at]}


def split_partition(
    part: Any,
    columns: dict[str, Hashable],
    boundaries: np.ndarray,
    first_row: int,
    keys: KeyDictionary | None = None,
    key_codes: np.ndarray | None = None,
) -> list[tuple[Any, np.ndarray, np.ndarray | None]]:
    """One piece per shard: the partition's rows of that shard (complete rows only, in
    their order), their global positions and, for a keyed tree, their key codes. A keyed
    tree's boundaries are (key code, x) pairs: a row goes after every pair ``<=`` its own."""
    keep = _kept_rows(part, columns)
    wanted = list(dict.fromkeys(columns.values()))
    rows = part[wanted].iloc[keep]
    x, _ = _engine_x(rows, columns["x"])
    if keys is None or key_codes is None:
        codes = None
        shard = np.searchsorted(boundaries, x, side="right")
    else:
        codes = _codes_of(rows, columns, keys)
        shard = np.zeros(x.size, np.int64)
        for code, cut in zip(key_codes.tolist(), boundaries):
            shard += (codes > code) | ((codes == code) & (x >= cut))
    order = np.argsort(shard, kind="stable")
    cuts = np.searchsorted(shard[order], np.arange(boundaries.size + 2))
    return [
        (
            rows.iloc[order[a:b]],
            first_row + keep[order[a:b]],
            None if codes is None else codes[order[a:b]],
        )
        for a, b in zip(cuts[:-1], cuts[1:])
    ]


def build_shard(
    columns: dict[str, Hashable],
    layout: Layout,
    check_memory: bool,
    keys: KeyDictionary | None,
    *pieces: tuple[Any, np.ndarray, np.ndarray | None],
) -> RangeTree:
    """The tree of one shard from its pieces of every partition (complete rows only); a
    keyed tree's with the whole tree's key dictionary and codes."""
    pd = pandas()
    frame = pd.concat([piece[0] for piece in pieces], ignore_index=True)
    coded = None
    if keys is not None:
        codes = np.concatenate([piece[2] for piece in pieces if piece[2] is not None])
        coded = (codes.astype(np.uint32), keys)
    parts = frame_parts(
        frame,
        columns["x"],
        columns["y"],
        columns.get("weights"),
        layout=layout,
        on_missing="raise",
        check_memory=check_memory,
        coded_keys=coded,
    )
    # Reported rows are positions in the whole Dask DataFrame; pieces come in partition
    # order, so these are ascending as the index format requires.
    rows = np.concatenate([piece[1] for piece in pieces]).astype(np.int64)
    return RangeTree._from_parts(parts.with_provenance(Provenance(source_rows=rows)))


def shard_info(tree: RangeTree) -> dict[str, Any]:
    weights = tree.weights_dtype
    return {
        "rows": len(tree),
        "nbytes": tree.nbytes,
        "weights": None if weights is None else weights.name,
        "x_axis": tree._parts.x,
        "y_axis": tree._parts.y,
        "keys": tree._parts.keys,
    }


def shard_nbytes(tree: RangeTree) -> int:
    return tree.nbytes


def shard_key_counts(tree: RangeTree) -> dict[Any, int]:
    return tree.count_by_key()


def _answer(
    tree: RangeTree,
    bounds: Sequence[np.ndarray],
    op: str,
    inclusive: Inclusive,
    ordered: bool = False,
) -> Any:
    """One shard's answer for boxes given in engine numbers; a report's pairs in box
    order, and with `ordered` each box's rows ascending (sorted in the engine)."""
    x_lo, x_hi, y_lo, y_hi, *coded = aligned(bounds)  # a keyed tree's key codes last
    codes = coded[0] if coded else None
    engine = tree._parts.engine
    if op == "count":
        return engine.count_many(x_lo, x_hi, y_lo, y_hi, inclusive, codes)
    if op == "sum":
        return engine.sum_many(x_lo, x_hi, y_lo, y_hi, inclusive, codes)
    offsets, rows = engine.report_many(x_lo, x_hi, y_lo, y_hi, inclusive, ordered, codes)
    box = np.repeat(np.arange(offsets.size - 1, dtype=np.int64), np.diff(offsets))
    source_rows = tree._parts.provenance.source_rows
    if source_rows is not None:
        rows = source_rows[rows]  # ascending, so each box's rows stay in order
    return box, rows


def answer_routed(
    tree: RangeTree,
    routed: dict[str, Any],
    shard: int,
    op: str,
    inclusive: Inclusive,
    ordered: bool = False,
) -> tuple[np.ndarray, Any]:
    ids = routed_to(routed, shard)
    if ids.size == 0:
        return ids, None
    return ids, _answer(tree, [b[ids] for b in routed["bounds"]], op, inclusive, ordered)


def answer_some(
    tree: RangeTree,
    bounds: Sequence[np.ndarray],
    ids: np.ndarray,
    op: str,
    inclusive: Inclusive,
    ordered: bool = False,
) -> tuple[np.ndarray, Any]:
    return ids, _answer(tree, bounds, op, inclusive, ordered)


def shard_kth(
    tree: RangeTree, bounds: Sequence[np.ndarray], inclusive: Inclusive, of: Of, ranks: np.ndarray
) -> np.ndarray:
    """The value (engine number) of axis `of` at rank ``ranks[i]`` (0 the smallest) among
    box ``i``'s points in this shard; every rank below its box's count here."""
    x_lo, x_hi, y_lo, y_hi, *coded = aligned(bounds)
    codes = coded[0] if coded else None
    (ranks,) = aligned([np.asarray(ranks, dtype=np.int64)])
    engine = tree._parts.engine
    values, _ = engine.kth_many(x_lo, x_hi, y_lo, y_hi, inclusive, of, ranks, 1, codes)
    return values


def shard_y_ranks(
    tree: RangeTree, bounds: Sequence[np.ndarray], inclusive: Inclusive, values: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """How many of box ``i``'s points in this shard have ``y < values[i]``, and how many
    ``y <= values[i]``; each value a y (engine number) of a point inside its box.

    Both are counts of the box with its upper y edge moved onto the value: kept closed at
    the value (or at the next number below it) when the box's upper edges are closed, open
    at the next number above it (or at the value) when they are open."""
    x_lo, x_hi, y_lo, y_hi, *coded = aligned(bounds)
    codes = coded[0] if coded else None
    values = np.ascontiguousarray(values)
    engine = tree._parts.engine
    if values.dtype.kind == "f":
        below, above = np.nextafter(values, -np.inf), np.nextafter(values, np.inf)
        lowest, highest = -np.inf, np.inf
    else:
        info = np.iinfo(np.int64)
        lowest, highest = info.min, info.max
        below = values - (values != lowest)  # no step past either end of int64
        above = values + (values != highest)
    closed = inclusive in ("both", "right")
    lt_edge, le_edge = (below, values) if closed else (values, above)
    lt = engine.count_many(x_lo, x_hi, y_lo, np.ascontiguousarray(lt_edge), inclusive, codes)
    le = engine.count_many(x_lo, x_hi, y_lo, np.ascontiguousarray(le_edge), inclusive, codes)
    # The edge cannot move past the end of the axis's numbers: nothing lies below the
    # lowest number, and an open edge above the highest holds every point of the box.
    lt[values == lowest] = 0
    if not closed:
        top = values == highest
        if top.any():
            keys = None if codes is None else codes[top]
            le[top] = engine.count_many(x_lo[top], x_hi[top], y_lo[top], y_hi[top], inclusive, keys)
    return lt, le


def _add_int64(total: np.ndarray, ids: np.ndarray, part: np.ndarray) -> None:
    before = total[ids]
    after = before + part  # wraps on overflow, which the sign test below catches
    if np.any(((before ^ after) & (part ^ after)) < 0):
        box = int(ids[np.flatnonzero(((before ^ after) & (part ^ after)) < 0)[0]])
        raise OverflowError(f"the weight sum of box {box} does not fit in int64")
    total[ids] = after


def combine(
    op: str,
    index: Any,
    weights: str | None,
    *answers: tuple[np.ndarray, Any],
    ordered: bool = True,
) -> Any:
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
    box, rows = _global_pairs(answers, ordered=ordered)
    return pd.DataFrame({"box": index.take(box), "row": rows})


def combine_partition(
    op: str,
    weights: str | None,
    routed: dict[str, Any],
    *answers: tuple[np.ndarray, Any],
    ordered: bool = True,
) -> Any:
    return combine(op, routed["index"], weights, *answers, ordered=ordered)


def _global_pairs(
    answers: Sequence[tuple[np.ndarray, Any]], *, ordered: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """(box, row) pairs of all shards' unordered reports, boxes ascending; rows ascending
    within a box, or with ``ordered=False`` in shard order. (Ordered shard reports merged
    by a stable sort measured no faster here than one sort of unordered ones:
    benches/bench_dask_join.py is about joins, whose partitions sort far fewer pairs.)"""
    boxes = [ids[part[0]] for ids, part in answers if part is not None]
    rows = [part[1] for _, part in answers if part is not None]
    box = np.concatenate(boxes) if boxes else np.zeros(0, np.int64)
    row = np.concatenate(rows) if rows else np.zeros(0, np.int64)
    if not ordered:
        order = np.argsort(box, kind="stable")
        return box[order], row[order]
    return _merged_runs(box, row, kind="quicksort")


def take_points(
    part: Any, first_row: int, *answers: tuple[np.ndarray, Any]
) -> tuple[Any, np.ndarray, np.ndarray]:
    """The matched rows that lie in this partition of the points, with their boxes, in box
    order then row order. The shards' answers are ordered reports (each sorted by box, then
    row), so this partition's pairs of each shard are kept first and their sorted runs
    merged by one stable sort."""
    end = first_row + len(part)
    boxes, rows = [], []
    for ids, pairs in answers:
        if pairs is None:
            continue
        mine = (pairs[1] >= first_row) & (pairs[1] < end)
        boxes.append(ids[pairs[0][mine]])
        rows.append(pairs[1][mine])
    box = np.concatenate(boxes) if boxes else np.zeros(0, np.int64)
    row = np.concatenate(rows) if rows else np.zeros(0, np.int64)
    if len(boxes) > 1:
        box, row = _merged_runs(box, row)
    return part.iloc[row - first_row], box, row


def _merged_runs(
    box: np.ndarray, row: np.ndarray, kind: Literal["stable", "quicksort"] = "stable"
) -> tuple[np.ndarray, np.ndarray]:
    """The pairs sorted by box, then row, by one sort of a combined int64 key when it fits
    (else numpy's two-key lexsort). ``kind="stable"`` for runs each already sorted, as
    ordered reports are (numpy's timsort merges them); numpy's default sort otherwise."""
    if box.size == 0:
        return box, row
    span = int(row.max()) + 1
    if (int(box.max()) + 1) * span >= 2**63:
        order = np.lexsort((row, box))
        return box[order], row[order]
    key = box * np.int64(span) + row
    key.sort(kind=kind)
    return key // span, key % span


def join_frame(
    boxes: Any,
    suffixes: Any,
    keep_index: bool,
    drop: list[Hashable],
    *taken: tuple[Any, np.ndarray, np.ndarray],
) -> Any:
    """Matched point rows beside their boxes' rows, in box order then point order; the
    boxes' columns `drop` (a keyed join's key, which the points' columns carry) left out.

    Each partition's pairs come in (box, row) order and its rows follow the previous
    partition's, so a stable sort by box alone puts them all in (box, row) order."""
    pd = pandas()
    boxes = boxes.drop(columns=drop)
    points = pd.concat([t[0] for t in taken])
    box = np.concatenate([t[1] for t in taken])
    order = np.argsort(box, kind="stable")
    left, right = output_sides(points, boxes, suffixes, keep_index)
    left = left.iloc[order].reset_index(drop=True)
    right = right.iloc[box[order]].reset_index(drop=True)
    out = pd.concat([left, right], axis=1)
    out.index = pd.RangeIndex(len(order))
    return out


def broadcast_answer(tree: Any, boxes: Any, specs: Sequence[Any], op: str, kw: dict) -> Any:
    """A broadcast tree's answer (a RangeTree's or a GrowingSnapshot's) to a frame of boxes."""
    method = {"count": tree.count_boxes, "sum": tree.sum_boxes, "report": tree.report_boxes}[op]
    return method(boxes, *specs, **kw)
