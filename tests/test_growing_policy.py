"""The merge policy of GrowingTree: the segments it keeps, and what an append rebuilds.

The reference is the logarithmic method (Bentley and Saxe 1980, from memory): with batches of
one size b appended to an empty tree, the segments after k appends are b times the powers of
two of k's binary digits, largest (oldest) first, and appending makes the merges a binary
counter's carry does, once the background merges settle. Counts are checked against NumPy
masks over the appended points.
"""

from __future__ import annotations

import math
import threading
import time

import numpy as np
import pytest

import boxwood
from boxwood._growing import _merges, _segments


def _binary_sizes(k: int, b: int) -> list[int]:
    """b times the powers of two that sum to k, largest first (k's binary digits)."""
    return [b << bit for bit in range(k.bit_length() - 1, -1, -1) if k >> bit & 1]


@pytest.mark.parametrize("layout", ["compact", "fast"])
def test_equal_batches_keep_the_binary_counters_segments(layout):
    rng = np.random.default_rng(7)
    grow = boxwood.GrowingTree("float64", "float64", layout=layout)
    b = 50
    xs, ys = [], []
    for k in range(1, 40):
        x, y = rng.random(b), rng.random(b)
        grow.append(x, y)
        grow.wait_for_merges()
        xs.append(x)
        ys.append(y)
        assert [s.rows for s in grow.segments] == _binary_sizes(k, b)
    x, y = np.concatenate(xs), np.concatenate(ys)
    lo, hi = rng.random((2, 30)), rng.random((2, 30))
    x_lo, x_hi = np.minimum(lo[0], hi[0]), np.maximum(lo[0], hi[0])
    y_lo, y_hi = np.minimum(lo[1], hi[1]), np.maximum(lo[1], hi[1])
    want = [
        int(((x >= a) & (x <= c) & (y >= e) & (y <= f)).sum())
        for a, c, e, f in zip(x_lo, x_hi, y_lo, y_hi)
    ]
    assert grow.count(x_lo, x_hi, y_lo, y_hi).tolist() == want


def test_an_append_that_carries_builds_one_tree(monkeypatch):
    """Appending the 8th batch of one size carries through three segments: the policy's
    pairwise merges (new + 1, then + 2, then + 4 batches) are built as one tree of all 8,
    in the background, after the append's own segment."""
    grow = boxwood.GrowingTree("float64", "float64")
    for i in range(7):
        grow.append(np.arange(10.0) + 10 * i, np.zeros(10))
        grow.wait_for_merges()
    assert [s.rows for s in grow.segments] == [40, 20, 10]
    built: list[int] = []
    real = _segments.build_tree

    def counting(cols, schema):
        built.append(len(cols))
        return real(cols, schema)

    monkeypatch.setattr(_segments, "build_tree", counting)
    ids = grow.append(np.arange(10.0) + 70, np.zeros(10))
    grow.wait_for_merges()
    assert built == [10, 80]
    assert [s.rows for s in grow.segments] == [80]
    assert ids.tolist() == list(range(70, 80))
    # The merged segment reports every row by its id, in id order.
    assert grow.report(0, 80, 0, 0)[1].tolist() == list(range(80))


def test_deleted_rows_are_left_out_of_a_merge():
    grow = boxwood.GrowingTree("int64", "int64")
    grow.append(np.arange(4), np.zeros(4, np.int64))
    grow.append(np.arange(4, 6), np.zeros(2, np.int64))
    grow.wait_for_merges()
    assert [(s.rows, s.deleted) for s in grow.segments] == [(4, 0), (2, 0)]
    # Then 3 live rows are fewer than twice the newer segment's 2: the policy merges the
    # two (after any change, a delete too), without row 1.
    grow.delete([1])
    grow.wait_for_merges()
    assert [(s.rows, s.deleted) for s in grow.segments] == [(5, 0)]
    assert grow.report(0, 10, 0, 0)[1].tolist() == [0, 2, 3, 4, 5]


def test_the_segment_bound_is_the_logarithmic_methods():
    # floor(log2(n)) + 1 segments once settled (each at least twice the next: Bentley and
    # Saxe 1980, from memory), twice that while a merge runs; math.log2 is exact on powers
    # of two, the edges where the bound steps.
    for rows in [*range(1, 70), 2**20 - 1, 2**20, 2**20 + 1, 10**7]:
        settled = math.floor(math.log2(rows)) + 1
        assert _segments.most_segments(rows, merging=False) == settled
        assert _segments.most_segments(rows, merging=True) == 2 * settled
    assert _segments.most_segments(0, merging=False) == 1


def _segments_of(sizes: list[int]) -> tuple[_segments.Segment, ...]:
    """Segments of consecutive id ranges holding `sizes` rows (their trees unused)."""
    out, first = [], 0
    for n in sizes:
        ids = np.arange(first, first + n, dtype=np.int64)
        out.append(_segments.Segment(None, ids, np.zeros(0, np.int64), None))  # type: ignore[arg-type]
        first += n
    return tuple(out)


def test_appends_pay_for_the_merges_evenly_and_more_past_the_settled_bound():
    # 64 rows: 7 segments once settled (floor(log2(64)) + 1), 14 while merging. An append
    # whose usual time is 0.2 s waits once that up to 7 segments, then two sevenths more a
    # segment, three times it from 14 on (where it also stops until a commit).
    usual = 0.2
    waits = []
    for count in range(1, 17):
        segs = _segments_of([64 - (count - 1)] + [1] * (count - 1))
        assert sum(s.ids.size for s in segs) == 64
        waits.append(_merges.slowdown(segs, usual))
        assert _merges.crowded(segs) == (count > 14)
    assert waits[:7] == pytest.approx([usual * _merges.LEAST_SHARE] * 7)
    assert waits[7:] == pytest.approx([usual * min(3.0, 1 + 2 * k / 7) for k in range(1, 10)])
    assert all(a < b for a, b in zip(waits[6:13], waits[7:14]))
    assert max(waits) == pytest.approx(usual * _merges.MOST_SHARE)


def test_an_appends_usual_time_is_the_recent_median_per_row():
    pace = _merges.Pace()
    assert pace.usual(1000, 0.02) == pytest.approx(0.02)
    for _ in range(6):
        pace.usual(1000, 0.02)
    # One append slowed by the machine barely moves the median: the next wait stays short.
    assert pace.usual(1000, 0.5) == pytest.approx(0.02)
    # Per row: twice the rows, twice the usual time.
    assert pace.usual(2000, 0.04) == pytest.approx(0.04)
    # Only the recent appends count: once they are all slower, so is the usual time.
    for _ in range(_merges.Pace.RECENT):
        last = pace.usual(1000, 0.1)
    assert last == pytest.approx(0.1)


def test_an_append_waits_while_a_merge_runs_and_not_when_none_does():
    lock = threading.RLock()
    merger = _merges.Merger(lock)
    segs = _segments_of([1, 1])  # a pair the policy merges
    with lock:
        # No merge running: even a usual time of 100 s waits nothing.
        began = time.monotonic()
        _merges.Merger(lock).after_append(lambda: segs, 1, 100.0)
        assert time.monotonic() - began < 10
    release = threading.Event()

    def held_merge(lane: int, job: _merges.Job) -> None:
        release.wait(30)
        with lock:
            merger.next_job(lane, ())

    with lock:
        merger.start(segs, held_merge, daemon=True)
        assert merger.running
        began = time.monotonic()
        merger.after_append(lambda: segs, 1, 0.3)
        waited = time.monotonic() - began
    # A merge held open: the append waited its usual time (once, below the settled bound),
    # then returned though the merge still runs.
    assert waited >= 0.3 * _merges.LEAST_SHARE
    assert merger.running
    release.set()
    with lock:
        merger.wait()
    assert not merger.running
