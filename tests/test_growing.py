"""GrowingTree: appends, deletes, expiry and compaction against references outside it.

The stateful test drives random appends, deletes, expiries, compactions and queries and
checks every answer against the pure-Python reference (tests/reference.py: every live point
against every box) over the rows that are live by a plain list kept beside the tree; counts
are checked against SQLite too (a plain table with the same inserts and deletes, counted with
``WHERE x BETWEEN ... AND y BETWEEN ...``), grids against ``numpy.histogram2d``.
"""

from __future__ import annotations

import math
import os
import sqlite3

import numpy as np
import pandas as pd
import pytest
from hypothesis import settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, precondition, rule

import boxwood
import reference as ref

LAYOUTS = ("fast", "compact")

_X = st.integers(-20, 20)
_Y = st.integers(-5, 5)
_W = st.integers(-1000, 1000)
_BOUND = st.one_of(st.integers(-22, 22), st.sampled_from([-math.inf, math.inf, 2.5, -0.5]))


class _Growing(RuleBasedStateMachine):
    """A growing tree and, beside it, the rows that should be live and a SQLite table."""

    layout = "compact"

    @initialize()
    def make(self) -> None:
        self.tree = boxwood.GrowingTree("int64", "float64", weights="int64", layout=self.layout)
        self.x: list[int] = []
        self.y: list[float] = []
        self.w: list[int] = []
        self.alive: list[bool] = []
        # Outside reference: SQLite, a plain table with the same inserts and deletes.
        self.db = sqlite3.connect(":memory:")
        self.db.execute("CREATE TABLE p (id INTEGER PRIMARY KEY, x INTEGER, y REAL, w INTEGER)")

    def _live(self) -> list[int]:
        return [i for i, a in enumerate(self.alive) if a]

    @rule(rows=st.lists(st.tuples(_X, _Y, _W), max_size=40))
    def append(self, rows) -> None:
        x = np.array([r[0] for r in rows], dtype=np.int64)
        y = np.array([float(r[1]) for r in rows])
        w = np.array([r[2] for r in rows], dtype=np.int64)
        ids = self.tree.append(x, y, weights=w)
        first = len(self.x)
        assert ids.dtype == np.int64 and ids.tolist() == list(range(first, first + len(rows)))
        self.x += x.tolist()
        self.y += y.tolist()
        self.w += w.tolist()
        self.alive += [True] * len(rows)
        self.db.executemany(
            "INSERT INTO p VALUES (?, ?, ?, ?)",
            [(first + i, r[0], float(r[1]), r[2]) for i, r in enumerate(rows)],
        )

    @precondition(lambda self: any(self.alive))
    @rule(data=st.data())
    def delete(self, data) -> None:
        live = self._live()
        picked = data.draw(st.lists(st.sampled_from(live), unique=True, min_size=1, max_size=8))
        self.tree.delete(picked)
        for i in picked:
            self.alive[i] = False
        self.db.executemany("DELETE FROM p WHERE id = ?", [(i,) for i in picked])

    @precondition(lambda self: len(self.x) > 0)
    @rule(data=st.data())
    def delete_refused(self, data) -> None:
        dead = [i for i, a in enumerate(self.alive) if not a] + [len(self.x) + 3, -1]
        bad = data.draw(st.sampled_from(dead))
        before = len(self.tree)
        with pytest.raises(KeyError, match=str(bad)):
            self.tree.delete([*self._live()[:2], bad])
        assert len(self.tree) == before  # nothing changed

    @rule(bound=_BOUND)
    def expire(self, bound) -> None:
        gone = self.tree.expire(bound)
        expected = [i for i in self._live() if self.x[i] < bound]
        assert gone == len(expected)
        for i in expected:
            self.alive[i] = False
        self.db.execute("DELETE FROM p WHERE x < ?", (bound,))

    @rule()
    def compact(self) -> None:
        self.tree.compact()
        assert len(self.tree.segments) <= 1
        assert all(s.deleted == 0 for s in self.tree.segments)

    @rule(a=_BOUND, b=_BOUND, c=_BOUND, d=_BOUND, inclusive=st.sampled_from(ref.INCLUSIVE))
    def query(self, a, b, c, d, inclusive) -> None:
        live = self._live()
        xs = np.array([self.x[i] for i in live], dtype=np.int64)
        ys = np.array([self.y[i] for i in live], dtype=np.float64)
        ws = np.array([self.w[i] for i in live], dtype=np.int64)
        # Reference: every live point against the box (tests/reference.py).
        assert self.tree.count(a, b, c, d, inclusive=inclusive) == ref.ref_count(
            xs, ys, a, b, c, d, inclusive
        )
        assert self.tree.sum(a, b, c, d, inclusive=inclusive) == ref.ref_sum(
            xs, ys, ws, a, b, c, d, inclusive
        )
        (rows,) = ref.ref_rows(xs, ys, a, b, c, d, inclusive)
        offsets, got = self.tree.report(a, b, c, d, inclusive=inclusive)
        assert offsets.tolist() == [0, len(rows)]
        assert got.tolist() == [live[r] for r in rows]

    @rule(a=st.integers(-22, 22), b=st.integers(-22, 22), c=_Y, d=_Y)
    def sqlite_count(self, a, b, c, d) -> None:
        # Outside reference: SQLite's BETWEEN (both edges closed) over the same rows.
        (expected,) = self.db.execute(
            "SELECT COUNT(*) FROM p WHERE x BETWEEN ? AND ? AND y BETWEEN ? AND ?",
            (a, b, c, d),
        ).fetchone()
        assert self.tree.count(a, b, c, d) == expected

    @rule()
    def batch_and_grid(self) -> None:
        lo = np.arange(-21, 21, 6)
        counts = self.tree.count(lo, lo + 7, -3.0, 3.0)
        live = self._live()
        xs = np.array([self.x[i] for i in live], dtype=np.int64)
        ys = np.array([self.y[i] for i in live], dtype=np.float64)
        # Outside reference: numpy masks.
        expected = [int(((xs >= a) & (xs <= a + 7) & (ys >= -3) & (ys <= 3)).sum()) for a in lo]
        assert counts.tolist() == expected
        edges_x, edges_y = np.arange(-20, 22, 5), np.arange(-5, 6, 2)
        hist, _, _ = np.histogram2d(xs, ys, bins=[edges_x, edges_y])  # numpy's own bins
        assert self.tree.grid(edges_x, edges_y).tolist() == hist.astype(np.int64).tolist()

    @invariant()
    def segments_stay_few(self) -> None:
        # Checked while merges may run: appends wait for the merger only past twice the
        # settled bound (below); deletes and expiries only remove segments.
        segments = self.tree.segments
        rows = sum(s.rows + s.deleted for s in segments)
        assert len(segments) <= 2 * max(1, math.floor(math.log2(rows + 1)) + 1)
        assert len(self.tree) == sum(self.alive)

    @rule()
    def settle(self) -> None:
        self.tree.wait_for_merges()
        segments = self.tree.segments
        rows = sum(s.rows + s.deleted for s in segments)
        # The logarithmic method's bound once merges settle (Bentley and Saxe 1980, from
        # memory): sizes fall by at least half from each segment to the next.
        assert len(segments) <= max(1, math.floor(math.log2(rows + 1)) + 1)
        assert all(a.rows >= 2 * b.rows for a, b in zip(segments, segments[1:]))


class _GrowingFast(_Growing):
    layout = "fast"


TestGrowingCompact = _Growing.TestCase
TestGrowingFast = _GrowingFast.TestCase
TestGrowingCompact.settings = settings(max_examples=40, stateful_step_count=30, deadline=None)
TestGrowingFast.settings = settings(max_examples=40, stateful_step_count=30, deadline=None)


# ---------------------------------------------------------------- examples


def test_keyed_growing_tree_answers_per_key_like_pandas_masks():
    g = boxwood.GrowingTree("float64", "int64", by="dock")
    docks = np.array(["east", "west", "east", "north", "west", "east"])
    x = np.arange(6.0)
    y = np.array([1, 2, 3, 1, 2, 3])
    g.append(x[:3], y[:3], by=docks[:3])
    g.append(pd.DataFrame({"x": x[3:], "y": y[3:], "dock": docks[3:]}))
    g.delete([2])
    alive = np.array([True, True, False, True, True, True])
    for key in ("east", "west", "north", "south"):
        # Outside reference: numpy masks over the live rows.
        mask = alive & (docks == key) & (x >= 0) & (x <= 5) & (y >= 1) & (y <= 3)
        assert g.count(0, 5, 1, 3, by=key) == mask.sum()
        assert g.report(0, 5, 1, 3, by=key)[1].tolist() == np.flatnonzero(mask).tolist()
    assert g.count(0, 5, 1, 3, by=["east", "west"]).tolist() == [2, 2]
    with pytest.raises(ValueError, match="keys"):
        g.count(0, 5, 1, 3)


def test_empty_trees_answer_zero_in_the_bounds_shape():
    g = boxwood.GrowingTree("datetime64[ns]", "float64", weights="float64")
    assert g.count("2025-01-01", "2025-02-01", 0, 1) == 0
    assert g.count(np.array(["2025-01-01"] * 3, dtype="datetime64[ns]"), np.inf, 0, 1).shape == (3,)
    assert g.sum("2025-01-01", "2025-02-01", 0, 1) == 0.0
    assert g.report("2025-01-01", "2025-02-01", 0, 1)[0].tolist() == [0, 0]
    keyed = boxwood.GrowingTree("int64", "int64", by="k")
    assert keyed.count([0, 1], 5, 0, 5, by="a").tolist() == [0, 0]


def test_time_axis_expiry_drops_whole_segments_and_cuts_the_boundary_one():
    start = np.datetime64("2025-03-01T00:00", "ns")
    g = boxwood.GrowingTree("datetime64[ns]", "int64")
    hours = [start + np.timedelta64(h, "h") for h in range(24)]
    for h in range(0, 24, 4):
        g.append(np.array(hours[h : h + 4]), np.arange(4))
    assert g.expire(np.datetime64("2025-03-01T10:30")) == 11
    assert len(g) == 13
    ids = g.report(start, start + np.timedelta64(1, "D"), 0, 3)[1]
    assert ids.tolist() == list(range(11, 24))
    with pytest.raises(TypeError):
        g.expire(5)  # a number is not a time


def test_from_tree_keeps_the_trees_rows_as_ids_and_merges_from_its_columns():
    rng = np.random.default_rng(3)
    x, y = rng.integers(0, 100, 500), rng.random(500)
    w = rng.integers(0, 10, 500)
    tree = boxwood.RangeTree(x, y, weights=w, layout="fast")
    g = boxwood.GrowingTree.from_tree(tree)
    assert g.layout == "fast" and len(g) == 500
    assert g.append([5, 6], [0.5, 0.5], weights=[1, 2]).tolist() == [500, 501]
    g.delete(np.arange(0, 500, 7))
    g.compact()
    xs, ys, ws = np.append(x, [5, 6]), np.append(y, [0.5, 0.5]), np.append(w, [1, 2])
    alive = np.ones(502, bool)
    alive[np.arange(0, 500, 7)] = False
    m = alive & (xs >= 3) & (xs <= 60) & (ys >= 0.1) & (ys <= 0.9)  # numpy masks
    assert g.count(3, 60, 0.1, 0.9) == m.sum()
    assert g.sum(3, 60, 0.1, 0.9) == ws[m].sum()
    assert g.report(3, 60, 0.1, 0.9)[1].tolist() == np.flatnonzero(m).tolist()


def test_bad_calls_raise_and_change_nothing():
    g = boxwood.GrowingTree("float64", "float64")
    g.append([1.0, 2.0], [1.0, 2.0])
    with pytest.raises(KeyError, match="row 7"):
        g.delete([0, 7])
    with pytest.raises(KeyError, match="twice"):
        g.delete([1, 1])
    with pytest.raises(TypeError, match="integers"):
        g.delete([0.5])
    with pytest.raises(TypeError, match="int64"):
        g.append(np.array([1, 2]), [1.0, 2.0])
    with pytest.raises(ValueError, match="without weights"):
        g.append([1.0], [1.0], weights=[1])
    with pytest.raises(ValueError, match="rows"):
        g.append([1.0, 2.0], [1.0])
    assert len(g) == 2 and g.next_id == 2
    assert g.count(-np.inf, np.inf, -np.inf, np.inf) == 2


def test_integer_sums_need_only_the_live_rows_total_to_fit_in_int64():
    # Outside reference: Python's arbitrary-precision integers summing the live weights.
    big = 2**62
    weights = [big, big, big - 1, -big]
    tree = boxwood.RangeTree(np.arange(4.0), np.arange(4.0), weights=np.array(weights))
    g = boxwood.GrowingTree.from_tree(tree)
    # Segments of 4, 2 and 1 rows, each at least twice the next: the policy merges none.
    g.append([9.0, 9.5], [9.0, 9.5], weights=[10, 0])  # the first's total plus this one's
    g.append([10.0], [10.0], weights=[-20])  # passes int64, the whole does not
    assert [s.rows for s in g.segments] == [4, 2, 1]
    live = weights + [10, 0, -20]
    assert g.sum(-1, 99, -1, 99) == sum(live) == 2**63 - 11
    lo = np.array([-1.0, 0.5, 1.5])
    want = [sum(w for x, w in enumerate([*weights, 0, 0]) if x >= a) + (10 - 20) for a in lo]
    assert g.sum(lo, 99, -1, 99).tolist() == want
    g.delete([3])  # now the live total, 3 * 2**62 - 1 with the rest, passes int64
    with pytest.raises(OverflowError, match="does not fit in int64"):
        g.sum(-1, 99, -1, 99)


def test_a_segment_whose_total_with_its_deleted_rows_passes_int64_sums_its_live_rows():
    # Outside reference: Python's arbitrary-precision integers summing the live weights.
    big = 2**62
    weights = [big, big, big - 1]  # one tree's total, 3 * 2**62 - 1, passes int64
    tree = boxwood.RangeTree(np.arange(3.0), np.arange(3.0), weights=np.array(weights))
    with pytest.raises(OverflowError):
        tree.sum(0, 2, 0, 2)
    g = boxwood.GrowingTree.from_tree(tree)
    g.delete([1])
    assert len(g.segments) == 1 and g.segments[0].deleted == 1
    assert g.sum(0, 2, 0, 2) == big + big - 1 == 2**63 - 1
    lo = np.array([[0.0], [1.0], [2.5]])  # x = y at every point: y_hi cuts x too
    got = g.sum(lo, 2, 0, [2, 1])
    assert got.dtype == np.int64 and got.shape == (3, 2)
    want = [
        [sum(w for x, w in [(0, big), (2, big - 1)] if a <= x <= b) for b in (2, 1)]
        for a in lo[:, 0]
    ]
    assert got.tolist() == want


def test_frames_joins_and_boxes():
    points = pd.DataFrame({"t": [0.0, 1.0, 2.0, 3.0], "v": [1, 2, 3, 4], "tag": list("abcd")})
    g = boxwood.GrowingTree("float64", "int64", names=("t", "v", "w"))
    g.append(points.iloc[:2])
    g.append(points.iloc[2:])
    g.delete([1])
    boxes = pd.DataFrame({"x_lo": [0, 2], "x_hi": [2, 3], "y_lo": [0, 0], "y_hi": [9, 9]})
    assert g.count_boxes(boxes).tolist() == [2, 2]
    assert g.report_boxes(boxes)["row"].tolist() == [0, 2, 2, 3]
    joined = g.box_join(points, boxes)
    assert joined["tag"].tolist() == ["a", "c", "c", "d"]
    assert joined["x_lo"].tolist() == [0, 0, 2, 2]
    # Outside reference: pandas' own cross join filtered by the boxes.
    cross = points.drop(index=1).merge(boxes, how="cross")
    inside = cross[(cross.t >= cross.x_lo) & (cross.t <= cross.x_hi)]
    assert len(joined) == len(inside)


# ---------------------------------------------------------------- kept in a folder


class _GrowingInFolder(_Growing):
    """The same machine on a tree kept in a folder, closed and opened again now and then."""

    @initialize()
    def make(self) -> None:
        import tempfile

        super().make()
        self.folder = tempfile.mkdtemp(prefix="boxwood-growing-")
        self.tree = boxwood.GrowingTree.open(
            self.folder, "int64", "float64", weights="int64", layout=self.layout
        )

    @rule()
    def reopen(self) -> None:
        self.tree.close()
        self.tree = boxwood.GrowingTree.open(self.folder)

    @rule()
    def reader_sees_the_committed_state(self) -> None:
        with boxwood.GrowingTree.open(self.folder, readonly=True) as reader:
            everything = (-math.inf, math.inf, -math.inf, math.inf)
            assert reader.report(*everything)[1].tolist() == self._live()
            assert reader.next_id == len(self.x)

    def teardown(self) -> None:
        import shutil

        self.tree.close()
        shutil.rmtree(self.folder, ignore_errors=True)


TestGrowingInFolder = _GrowingInFolder.TestCase
TestGrowingInFolder.settings = settings(max_examples=15, stateful_step_count=20, deadline=None)


def _written(folder) -> boxwood.GrowingTree:
    g = boxwood.GrowingTree.open(folder, "float64", "int64", weights="float64")
    g.append([1.0, 2.0, 3.0], [1, 2, 3], weights=[0.5, 0.25, 2.0])
    g.append([4.0], [4], weights=[1.0])
    g.delete([1])
    return g


def test_one_writer_many_readers(tmp_path):
    folder = tmp_path / "g"
    writer = _written(folder)
    with pytest.raises(boxwood.FolderLockedError, match="readonly=True"):
        boxwood.GrowingTree.open(folder)
    reader = boxwood.GrowingTree.open(folder, readonly=True)
    with pytest.raises(boxwood.ReadOnlyError):
        reader.append([9.0], [9], weights=[1.0])
    writer.append([5.0], [5], weights=[1.0])
    assert reader.count(0, 10, 0, 10) == 3  # its snapshot, until it refreshes
    reader.refresh()
    assert reader.count(0, 10, 0, 10) == 4
    writer.compact()
    reader.refresh()
    assert reader.report(0, 10, 0, 10)[1].tolist() == [0, 2, 3, 4]
    writer.close()
    with boxwood.GrowingTree.open(folder) as again:  # the lock went with close()
        assert again.sum(0, 10, 0, 10) == 0.5 + 2.0 + 1.0 + 1.0


def test_leftovers_of_an_interrupted_change_are_deleted_on_open(tmp_path):
    folder = tmp_path / "g"
    _written(folder).close()
    before = sorted(os.listdir(folder))
    (folder / "seg-00000099.boxwood").write_bytes(b"half a segment")
    (folder / ".MANIFEST.123.partial").write_bytes(b"half a manifest")
    (folder / "notes.txt").write_text("not ours")  # files not of the folder's kinds stay
    with boxwood.GrowingTree.open(folder) as g:
        assert len(g) == 3
    assert sorted(os.listdir(folder)) == sorted([*before, "notes.txt"])


def test_damaged_or_unknown_folders_are_refused_clearly(tmp_path):
    folder = tmp_path / "g"
    _written(folder).close()
    manifest = folder / "MANIFEST"
    good = manifest.read_bytes()
    head, body = good.split(b"\n", 1)
    manifest.write_bytes(head.replace(b" 1 ", b" 7 ", 1) + b"\n" + body)
    with pytest.raises(boxwood.UnsupportedFolderError, match="version 7"):
        boxwood.GrowingTree.open(folder, readonly=True)
    manifest.write_bytes(good[:-5] + b"xxxxx")
    with pytest.raises(boxwood.CorruptFolderError, match="checksum"):
        boxwood.GrowingTree.open(folder, readonly=True)
    manifest.write_bytes(b"hello\n")
    with pytest.raises(boxwood.CorruptFolderError, match="not a growing tree"):
        boxwood.GrowingTree.open(folder, readonly=True)
    manifest.write_bytes(good)
    segment = sorted(folder.glob("seg-*"))[0]
    data = bytearray(segment.read_bytes())
    data[200] ^= 0xFF
    segment.write_bytes(bytes(data))
    with pytest.raises(boxwood.IndexFileError):
        g = boxwood.GrowingTree.open(folder, readonly=True)
        g.report(-math.inf, math.inf, -math.inf, math.inf)
    with pytest.raises(ValueError, match="pass x and y"):
        boxwood.GrowingTree.open(tmp_path / "empty")
    with pytest.raises(FileNotFoundError):
        boxwood.GrowingTree.open(tmp_path / "empty2", readonly=True)
