"""A growing tree's frozen views: snapshots, pickles, one static tree of its live rows, live
ranges, and the full check of a folder (``boxwood.verify_folder``).

Answers are checked against the pure-Python reference (tests/reference.py: every live point
against every box) over the rows a plain list says are live, and against SQLite (a table
with the same inserts and deletes, counted with ``WHERE x BETWEEN ... AND y BETWEEN ...``).
"""

from __future__ import annotations

import hashlib
import json
import math
import pickle
import sqlite3

import numpy as np
import pytest

import boxwood
import reference as ref
from boxwood._growing._segments import Columns, build_tree

INF = math.inf
BOXES = [(-INF, INF, -INF, INF), (0, 40, 2, 7), (10, 10, -INF, 5), (55, 90, 0, 3.5)]


def _history(rng, layout="compact"):
    """A tree after appends, deletes and an expiry, and the same rows as plain arrays: x, y,
    weights of every row appended, and which are live."""
    g = boxwood.GrowingTree("int64", "float64", weights="int64", layout=layout)
    x, y, w = [], [], []
    for _ in range(6):
        n = int(rng.integers(5, 40))
        xs = rng.integers(0, 100, n)
        ys = rng.integers(0, 10, n).astype(np.float64)
        ws = rng.integers(-100, 100, n)
        g.append(xs, ys, weights=ws)
        x += xs.tolist()
        y += ys.tolist()
        w += ws.tolist()
    live = np.ones(len(x), dtype=bool)
    gone = rng.choice(len(x), size=len(x) // 5, replace=False)
    g.delete(gone)
    live[gone] = False
    assert g.expire(8) == int((live & (np.array(x) < 8)).sum())
    live &= np.array(x) >= 8
    return g, (np.array(x), np.array(y), np.array(w)), live


def _check_like_reference(tree, columns, live) -> None:
    x, y, w = columns
    ids = np.flatnonzero(live)
    for box in BOXES:
        # Reference: every live point against every box (tests/reference.py).
        assert tree.count(*box) == ref.ref_count(x[ids], y[ids], *box)
        assert tree.sum(*box) == ref.ref_sum(x[ids], y[ids], w[ids], *box)
        rows = ref.ref_rows(x[ids], y[ids], *box)[0]
        assert tree.report(*box)[1].tolist() == ids[rows].tolist()


@pytest.mark.parametrize("layout", ["fast", "compact"])
def test_a_snapshot_keeps_answering_for_the_rows_it_was_taken_of(layout):
    rng = np.random.default_rng(3)
    g, columns, live = _history(rng, layout)
    snap = g.snapshot()
    assert isinstance(snap, boxwood.GrowingSnapshot) and len(snap) == live.sum()
    g.append([50, 51], [5.0, 6.0], weights=[1, 2])
    g.delete(np.flatnonzero(live)[:3])
    g.compact()
    _check_like_reference(snap, columns, live)  # the state when it was taken
    assert snap.next_id == columns[0].size
    for change in (
        lambda: snap.append([1], [1.0], weights=[1]),
        lambda: snap.delete([int(np.flatnonzero(live)[-1])]),
        lambda: snap.expire(50),
        lambda: snap.compact(),
    ):
        with pytest.raises(boxwood.ReadOnlyError, match="snapshot"):
            change()
    _check_like_reference(snap, columns, live)  # and nothing changed


def test_pickles_copy_a_tree_in_memory_and_freeze_a_folder_or_a_snapshot(tmp_path):
    rng = np.random.default_rng(5)
    g, columns, live = _history(rng)
    copy = pickle.loads(pickle.dumps(g))
    assert type(copy) is boxwood.GrowingTree and copy.folder is None
    _check_like_reference(copy, columns, live)
    copy.append([60], [1.0], weights=[7])  # a copy: it changes, the original does not
    assert copy.next_id == g.next_id + 1 and len(copy) == len(g) + 1
    frozen = pickle.loads(pickle.dumps(g.snapshot()))
    assert type(frozen) is boxwood.GrowingSnapshot
    _check_like_reference(frozen, columns, live)

    folder = tmp_path / "g"
    x, y, w = columns
    with boxwood.GrowingTree.open(folder, "int64", "float64", weights="int64") as writer:
        writer.append(x, y, weights=w)
        writer.delete(np.flatnonzero(~live))
        pickled = pickle.dumps(writer)
        assert b"LOCK" not in pickled
        writer.append([70], [2.0], weights=[3])  # after the pickle: not in it
    reader = boxwood.GrowingTree.open(folder, readonly=True)
    for source in (pickled, pickle.dumps(reader)):
        seen = pickle.loads(source)
        assert type(seen) is boxwood.GrowingSnapshot and seen.folder is None
        with pytest.raises(boxwood.ReadOnlyError):
            seen.append([1], [1.0], weights=[1])
    _check_like_reference(pickle.loads(pickled), columns, live)
    assert len(pickle.loads(pickle.dumps(reader))) == live.sum() + 1
    # A second writer can open the folder while the unpickled views live: they hold no lock.
    with boxwood.GrowingTree.open(folder) as again:
        assert len(again) == live.sum() + 1


def test_a_pickle_of_an_unknown_version_is_refused():
    g = boxwood.GrowingTree("int64", "int64")
    g.append([1], [2])
    func, args = g.__reduce__()
    with pytest.raises(boxwood.UnsupportedFolderError, match="version 99"):
        func(99, *args[1:])


def test_to_tree_answers_like_the_growing_tree_with_its_ids():
    rng = np.random.default_rng(9)
    g, columns, live = _history(rng)
    static = g.to_tree()
    assert isinstance(static, boxwood.RangeTree) and len(static) == live.sum()
    _check_like_reference(static, columns, live)
    x, y, _ = columns
    ids = np.flatnonzero(live)
    # Reference: numpy.median and numpy.max over the live rows in the box.
    inside = (x[ids] >= 10) & (x[ids] <= 80)
    assert static.quantile(10, 80, -INF, INF, 0.5) == np.median(y[ids][inside])
    assert static.max(10, 80, -INF, INF, of="x") == x[ids][inside].max()
    g.compact()
    assert g.to_tree() is g.to_tree()  # one segment, nothing deleted: its own tree
    assert len(boxwood.GrowingTree("int64", "int64").to_tree()) == 0


def test_live_ranges_leave_out_deleted_and_expired_rows():
    g = boxwood.GrowingTree("datetime64[s]", "int64", names=("start", "km", "w"))
    t = np.datetime64("2026-01-05T08:00:00", "s") + np.arange(6).astype("timedelta64[h]")
    assert g.x_range is None and g.y_range is None
    g.append(t, [5, 1, 9, 4, 7, 3])
    g.delete([2, 5])  # the largest y and the latest time
    assert g.x_range == (t[0], t[4]) and g.y_range == (1, 7)
    g.expire(t[2])
    # Reference: numpy min and max over the rows still live (3 and 4).
    assert g.x_range == (t[3:5].min(), t[3:5].max()) and g.y_range == (4, 7)
    assert (g.x_name, g.y_name) == ("start", "km")


def _sqlite_counts(columns, live, boxes):
    x, y, _ = columns
    db = sqlite3.connect(":memory:")
    db.execute("CREATE TABLE p (id INTEGER, x INTEGER, y REAL)")
    db.executemany("INSERT INTO p VALUES (?, ?, ?)", zip(range(x.size), x.tolist(), y.tolist()))
    db.executemany("DELETE FROM p WHERE id = ?", [(int(i),) for i in np.flatnonzero(~live)])
    sql = "SELECT COUNT(*) FROM p WHERE x BETWEEN ? AND ? AND y BETWEEN ? AND ?"
    return [db.execute(sql, (a, b, c, d)).fetchone()[0] for a, b, c, d in boxes]


def test_verify_folder_passes_a_good_folder_and_matches_sqlite(tmp_path):
    rng = np.random.default_rng(11)
    g, columns, live = _history(rng)
    x, y, w = columns
    folder = tmp_path / "g"
    with boxwood.GrowingTree.open(folder, "int64", "float64", weights="int64") as writer:
        for part in np.array_split(np.arange(x.size), 5):
            writer.append(x[part], y[part], weights=w[part])
        writer.delete(np.flatnonzero(~live))
        writer.wait_for_merges()
        segments = writer.segments
    check = boxwood.verify_folder(folder)
    assert check.live_rows == live.sum() and check.deleted_rows == sum(s.deleted for s in segments)
    assert check.segments == len(segments) and check.next_id == x.size and not check.leftovers
    finite = [(0, 40, 2, 7), (10, 10, -1e9, 5), (55, 90, 0, 3.5)]
    reader = boxwood.GrowingTree.open(folder, readonly=True)
    # Outside reference: SQLite, the same inserts and deletes.
    assert [reader.count(*b) for b in finite] == _sqlite_counts(columns, live, finite)


def _rewrite_manifest(folder, change) -> None:
    path = folder / "MANIFEST"
    head, body = path.read_bytes().split(b"\n", 1)
    manifest = json.loads(body)
    change(manifest)
    body = json.dumps(manifest, sort_keys=True).encode()
    words = head.decode().split(" ")
    words[-1] = hashlib.sha256(body).hexdigest()
    path.write_bytes(" ".join(words).encode() + b"\n" + body)


def _two_segments(folder):
    with boxwood.GrowingTree.open(folder, "int64", "int64", weights="int64") as g:
        g.append(np.arange(40), np.arange(40) % 7, weights=np.arange(40))
        g.append([100, 101, 102], [1, 2, 3], weights=[1, 2, 3])
        g.delete([3, 4])
        assert len(g.segments) == 2


def test_verify_folder_refuses_what_opening_does_not_see(tmp_path):
    folder = tmp_path / "g"
    _two_segments(folder)
    boxwood.verify_folder(folder)

    # Segments named out of id order: the manifest's checksum is right, the ids are not.
    _rewrite_manifest(folder, lambda m: m["segments"].reverse())
    with pytest.raises(boxwood.CorruptFolderError, match="not after the id"):
        boxwood.verify_folder(folder)
    _rewrite_manifest(folder, lambda m: m["segments"].reverse())
    _rewrite_manifest(folder, lambda m: m.update(next_id=10))
    with pytest.raises(boxwood.CorruptFolderError, match="gives out ids from 10"):
        boxwood.verify_folder(folder)
    _rewrite_manifest(folder, lambda m: m.update(next_id=43))
    boxwood.verify_folder(folder)

    # A deleted-rows file with the right ids but other points: counts would subtract wrongly.
    reader = boxwood.GrowingTree.open(folder, readonly=True)
    schema = reader._schema
    (dead_name,) = [n.name for n in folder.glob("dead-*")]
    other = Columns(
        np.array([3, 5]), np.array([3, 4]), np.array([3, 4]), None, np.array([3, 4], np.int64)
    )
    build_tree(other, schema).save(folder / dead_name)
    with pytest.raises(boxwood.CorruptFolderError, match="differ"):
        boxwood.verify_folder(folder)


def test_verify_folder_finds_damage_a_plain_open_leaves_for_later(tmp_path):
    folder = tmp_path / "g"
    _two_segments(folder)
    segment = sorted(folder.glob("seg-*"))[0]
    data = bytearray(segment.read_bytes())
    data[len(data) // 2] ^= 0x40
    segment.write_bytes(bytes(data))
    with boxwood.GrowingTree.open(folder, readonly=True) as g:  # a count reads no damaged part
        assert g.count(-INF, INF, -INF, INF) == 43 - 2
    with pytest.raises(boxwood.IndexFileError):
        boxwood.verify_folder(folder)
    with pytest.raises(FileNotFoundError, match="no MANIFEST"):
        boxwood.verify_folder(tmp_path)


def test_keyed_trees_know_their_x_range_and_expire_by_it():
    """A keyed tree's x keys ascend within each key's run only: its range, and the expiry
    that drops whole segments by it, must take every run's ends."""
    x = np.array([0, 10, 60, 5, 30])
    key = np.array(["north", "south", "north", "south", "east"], dtype=object)
    tree = boxwood.RangeTree(x, np.arange(5.0), by=key)
    assert tree.x_range == (x.min(), x.max())  # numpy's min and max
    g = boxwood.GrowingTree("int64", "float64", by="dock")
    g.append(x, np.arange(5.0), by=key)
    assert g.x_range == (0, 60)
    assert g.expire(20) == int((x < 20).sum())
    # Reference: every live point (x at or above the bound) against the whole plane.
    live = np.flatnonzero(x >= 20)
    assert g.report(-INF, INF, -INF, INF, by=key[live])[1].tolist() == live.tolist()
