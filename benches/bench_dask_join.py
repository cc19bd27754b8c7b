"""How a sharded join puts its rows in order: the steps a Dask join runs, timed in one process.

    .venv/bin/python benches/bench_dask_join.py            # 10^6 points, 10^4 boxes
    BENCH_DJOIN_ROWS=2e5 BENCH_DJOIN_BOXES=2000 .venv/bin/python benches/bench_dask_join.py

``ShardedTree.join`` asks every shard for its (box, row) matches, gives each partition of the
points the matches of its own rows (``take_points``) and puts the partitions' rows beside
their boxes in box order, then row order (``join_frame``). Those three steps are what the
ordering changes, so they are timed here as the workers run them, one after another in this
process, on real shard trees (cut by x, or by (key, x) for keyed points, as
``ShardedTree.from_frame`` cuts them) and a real split of the rows into partitions: no
cluster, so neither scheduling nor the network is in the figures.

Two ways side by side, each best of 3, taken in turn:

* ``before``: each shard reports its boxes' rows unordered; each partition's task sorts every
  shard's matches (one int64 key a pair), then keeps its own; ``join_frame`` orders the
  concatenation with ``np.lexsort`` on (box, row).
* ``unordered``: as ``now`` but each shard reports unordered, and each partition's task
  sorts its own pairs with numpy's default sort of one int64 key (no runs to merge): the
  choice ``now`` was measured against.
* ``now``: each shard reports with ``ordered=True`` (each box's rows ascending, sorted in the
  engine); each partition's task keeps its own rows first and merges the shards' sorted runs
  with one stable sort of an int64 key; ``join_frame`` places each partition's pairs by
  a stable sort by box alone (each partition's pairs are sorted and its rows come after
  the previous partition's, so numpy's timsort merges a few sorted runs).

Checked in the run (assert): the three ways give the same joined frame, in the (box, row)
order of numpy's lexsort of every match of one unsharded tree.

Writes the section ``dask-join`` of benches/RESULTS.md.
"""

from __future__ import annotations

import argparse
import gc
import math
import time
from typing import Any, Callable

import numpy as np
import pandas as pd
from results import env_size, write_section

import boxwood
from boxwood.dask import _tasks

SHARDS = 4
PARTITIONS = 4
HOLDING = 300  # points a box holds, about


def best_of(calls: dict[str, Callable[[], Any]], repeats: int = 3) -> dict[str, tuple[Any, float]]:
    best = dict.fromkeys(calls, math.inf)
    result: dict[str, Any] = {}
    for _ in range(repeats):
        for name, call in calls.items():
            gc.collect()
            t0 = time.perf_counter()
            result[name] = call()
            best[name] = min(best[name], time.perf_counter() - t0)
    return {name: (result[name], best[name]) for name in calls}


# ------------------------------------------------------------------ the way before, as it was


def before_take(part: Any, first_row: int, *answers: Any) -> tuple[Any, np.ndarray, np.ndarray]:
    box = np.concatenate([ids[a[0]] for ids, a in answers])
    row = np.concatenate([a[1] for _, a in answers])
    span = int(row.max()) + 1  # the combined int64 key fitted in every run here
    key = box * np.int64(span) + row
    key.sort()
    box, row = key // span, key % span
    mine = (row >= first_row) & (row < first_row + len(part))
    return part.iloc[row[mine] - first_row], box[mine], row[mine]


def before_frame(boxes: Any, *taken: Any) -> Any:
    points = pd.concat([t[0] for t in taken])
    box = np.concatenate([t[1] for t in taken])
    rows = np.concatenate([t[2] for t in taken])
    order = np.lexsort((rows, box))
    left, right = boxwood._join.output_sides(points, boxes, ("_point", "_box"), False)
    left = left.iloc[order].reset_index(drop=True)
    right = right.iloc[box[order]].reset_index(drop=True)
    out = pd.concat([left, right], axis=1)
    out.index = pd.RangeIndex(len(order))
    return out


# ------------------------------------------------------------------ data


def scenario(n: int, q: int, keyed: bool, rng: np.random.Generator):
    """Points of an invented fleet (x: minute of the week, y: speed, key: vehicle), boxes
    holding about HOLDING points each, cut into shards and partitions as from_frame cuts."""
    keys = 1000 if keyed else 1
    points = pd.DataFrame(
        {
            "minute": rng.uniform(0, 10_080, n),
            "speed": rng.uniform(0, 120, n),
            "vehicle": rng.integers(0, keys, n),
            "load": rng.integers(0, 40, n),
        }
    )
    share = min(0.5, math.sqrt(HOLDING * keys / n))  # a square box's side, share of an axis
    lo_x = rng.uniform(0, 10_080 * (1 - share), q)
    lo_y = rng.uniform(0, 120 * (1 - share), q)
    boxes = pd.DataFrame(
        {
            "x_lo": lo_x,
            "x_hi": lo_x + 10_080 * share,
            "y_lo": lo_y,
            "y_hi": lo_y + 120 * share,
            "vehicle": rng.integers(0, keys, q),
            "zone": rng.integers(0, 50, q),
        }
    )
    by = "vehicle" if keyed else None
    whole = boxwood.RangeTree.from_frame(points, "minute", "speed", by=by)
    # Shards: (key, x) order cut in SHARDS equal runs, rows kept as positions in `points`.
    order = np.lexsort((points["minute"].to_numpy(), points["vehicle"].to_numpy()))
    shards = []
    for run in np.array_split(order, SHARDS):
        rows = np.sort(run)
        piece = points.iloc[rows].reset_index(drop=True)
        coded = None
        if keyed:
            codes = whole._keys.codes_of(piece["vehicle"].to_numpy())
            coded = (np.asarray(codes).astype(np.uint32), whole._keys)
        parts = boxwood._frames.frame_parts(
            piece,
            "minute",
            "speed",
            None,
            layout="compact",
            on_missing="raise",
            coded_keys=coded,
        )
        provenance = boxwood._parts.Provenance(source_rows=rows.astype(np.int64))
        shards.append(boxwood.RangeTree._from_parts(parts.with_provenance(provenance)))
    bounds = [boxes[c].to_numpy() for c in ("x_lo", "x_hi", "y_lo", "y_hi")]
    codes = (
        np.asarray(whole._keys.codes_of(boxes["vehicle"].to_numpy()), np.int64) if keyed else None
    )
    partitions = np.array_split(np.arange(n), PARTITIONS)
    firsts = [int(p[0]) for p in partitions]
    frames = [points.iloc[p[0] : p[-1] + 1].reset_index(drop=True) for p in partitions]
    return (
        points,
        boxes.drop(columns="vehicle" if keyed else []),
        shards,
        bounds,
        codes,
        frames,
        firsts,
        whole,
    )


def unordered_take(part: Any, first_row: int, *answers: Any) -> tuple[Any, np.ndarray, ...]:
    """``now``'s take on unordered shard reports: own rows first, then numpy's default
    (unstable, vectorised) sort of one int64 key, as runs to merge are not there."""
    end = first_row + len(part)
    box, row = [], []
    for ids, (b, r) in answers:
        mine = (r >= first_row) & (r < end)
        box.append(ids[b[mine]])
        row.append(r[mine])
    box, row = np.concatenate(box), np.concatenate(row)
    span = int(row.max()) + 1
    key = box * np.int64(span) + row
    key.sort()
    box, row = key // span, key % span
    return part.iloc[row - first_row], box, row


WAYS = ("before", "unordered", "now")


def run(n: int, q: int, keyed: bool, rng: np.random.Generator) -> list[str]:
    points, boxes, shards, bounds, codes, frames, firsts, whole = scenario(n, q, keyed, rng)
    ids = np.arange(q, dtype=np.int64)  # every box asked of every shard (the worst case)
    asked = [*bounds] + ([codes] if codes is not None else [])

    def answers(way: str) -> list[Any]:
        ordered = way == "now"
        return [(ids, _tasks._answer(t, asked, "report", "both", ordered)) for t in shards]

    timed = best_of({way: (lambda w=way: answers(w)) for way in WAYS})
    shard_answers = {way: timed[way][0] for way in timed}
    steps: dict[str, dict[str, float]] = {"answer": {w: timed[w][1] for w in timed}}
    takes = {"before": before_take, "unordered": unordered_take, "now": _tasks.take_points}

    def take(way: str) -> list[Any]:
        return [takes[way](f, first, *shard_answers[way]) for f, first in zip(frames, firsts)]

    timed = best_of({way: (lambda w=way: take(w)) for way in WAYS})
    taken = {way: timed[way][0] for way in timed}
    steps["take (all partitions)"] = {w: timed[w][1] for w in timed}
    timed = best_of(
        {
            way: (
                lambda w=way: (
                    before_frame(boxes, *taken[w])
                    if w == "before"
                    else _tasks.join_frame(boxes, ("_point", "_box"), False, [], *taken[w])
                )
            )
            for way in WAYS
        }
    )
    steps["join_frame"] = {w: timed[w][1] for w in timed}
    for way in WAYS[1:]:
        pd.testing.assert_frame_equal(timed["before"][0], timed[way][0])
    # Reference: numpy's lexsort of every match of the whole (unsharded) tree's report.
    by = {} if codes is None else {"by": np.asarray(whole.keys)[codes]}
    box, row = whole.pairs(*bounds, **by)
    want = np.lexsort((row, box))
    joined = timed["now"][0]
    np.testing.assert_array_equal(
        joined["minute"].to_numpy(), points["minute"].to_numpy()[row[want]]
    )
    steps["all three"] = {w: sum(s[w] for s in steps.values()) for w in WAYS}
    kind = "keyed, 1,000 keys" if keyed else "unkeyed"
    lines = [f"| **{kind}: {n:,} points, {q:,} boxes, {len(joined):,} matches** | | | | |"]
    for step, t in steps.items():
        cells = " | ".join(f"{t[w]:.3f}" for w in WAYS)
        lines.append(f"| {step} | {cells} | {t['before'] / t['now']:.2f} |")
    return lines


HOW_TO_READ = """\
Seconds of worker time for one join, each step summed over its tasks ({shards} shards, every
box asked of every shard; {parts} partitions of points), best of 3, the three ways taken in
turn. "before / now" above 1: now is faster. The machine was shared with other work."""


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    n = env_size("BENCH_DJOIN_ROWS", 10**6)
    q = env_size("BENCH_DJOIN_BOXES", 10**4)
    rng = np.random.default_rng(2026)
    lines = [
        "| step | before s | unordered s | now s | before / now |",
        "|---|---|---|---|---|",
    ]
    for keyed in (False, True):
        lines += run(n, q, keyed, rng)
    body = "\n".join(lines) + "\n\n" + HOW_TO_READ.format(shards=SHARDS, parts=PARTITIONS)
    print(body)
    if not args.no_write:
        write_section("dask-join", body, title="Sharded join order: `benches/bench_dask_join.py`")


if __name__ == "__main__":
    main()
