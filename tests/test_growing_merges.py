"""Background merges of a growing tree: queries during merges, changes that arrive during a
merge, failed merges, shutdown, and the folder's files while a merge is in flight.

Every answer is checked against numpy masks over the rows that should be live (the outside
reference), kept beside the tree as plain arrays.
"""

from __future__ import annotations

import math
import os
import threading

import numpy as np
import pytest

import boxwood
from boxwood._growing import _folder, _merges, _segments


class _Rows:
    """The appended rows and which are live: the reference the tree is checked against."""

    def __init__(self) -> None:
        self.x = np.zeros(0, np.int64)
        self.y = np.zeros(0, np.float64)
        self.w = np.zeros(0, np.int64)
        self.alive = np.zeros(0, bool)

    def append(self, tree: boxwood.GrowingTree, rng: np.random.Generator, n: int) -> None:
        x = rng.integers(0, 1000, n)
        y = rng.random(n).round(3)
        w = rng.integers(-100, 100, n)
        ids = tree.append(x, y, weights=w)
        assert ids.tolist() == list(range(self.x.size, self.x.size + n))
        self.x, self.y = np.concatenate([self.x, x]), np.concatenate([self.y, y])
        self.w, self.alive = np.concatenate([self.w, w]), np.concatenate([self.alive, [True] * n])

    def delete(self, tree: boxwood.GrowingTree, ids: np.ndarray) -> None:
        tree.delete(ids)
        self.alive[ids] = False

    def expire(self, tree: boxwood.GrowingTree, bound: int) -> None:
        gone = self.alive & (self.x < bound)
        assert tree.expire(bound) == int(gone.sum())
        self.alive &= ~gone

    def check(self, tree: boxwood.GrowingTree, rng: np.random.Generator) -> None:
        live = np.flatnonzero(self.alive)
        assert tree.report(-math.inf, math.inf, -math.inf, math.inf)[1].tolist() == live.tolist()
        for _ in range(5):
            a, b = sorted(rng.integers(0, 1000, 2).tolist())
            c, d = sorted(rng.random(2).tolist())
            # Outside reference: numpy masks over the live rows.
            inside = self.alive & (self.x >= a) & (self.x <= b) & (self.y >= c) & (self.y <= d)
            assert tree.count(a, b, c, d) == int(inside.sum())
            assert tree.sum(a, b, c, d) == int(self.w[inside].sum())
            assert tree.report(a, b, c, d)[1].tolist() == np.flatnonzero(inside).tolist()


class _Gate:
    """Holds every merge's build until opened (patched into the merge module)."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch) -> None:
        self.open_ = threading.Event()
        self.started = threading.Event()
        real = _merges.build

        def held(job, schema, write):
            self.started.set()
            assert self.open_.wait(30)
            return real(job, schema, write)

        monkeypatch.setattr(_merges, "build", held)


def _held_merge(monkeypatch, rng, sizes: tuple[int, int], folder=None):
    """A tree (in `folder`, or in memory) given two appends of `sizes` rows, which the
    policy merges, and that merge held open by a gate until ``gate.open_`` is set."""
    rows, gate = _Rows(), _Gate(monkeypatch)
    tree = _tree(folder)
    for n in sizes:
        rows.append(tree, rng, n)
    assert gate.started.wait(30)
    return rows, gate, tree


def _tree(folder=None) -> boxwood.GrowingTree:
    if folder is None:
        return boxwood.GrowingTree("int64", "float64", weights="int64")
    if os.path.exists(os.path.join(folder, "MANIFEST")):
        return boxwood.GrowingTree.open(folder)
    return boxwood.GrowingTree.open(folder, "int64", "float64", weights="int64")


def _closed_and_reopened(tree, folder, rows: _Rows, rng) -> None:
    """Close `tree`, open its folder again: the same answers, and a folder that verifies."""
    tree.close()
    with _tree(folder) as again:
        rows.check(again, rng)
    assert boxwood.verify_folder(str(folder)).live_rows == int(rows.alive.sum())


@pytest.mark.parametrize("in_folder", [False, True])
def test_changes_during_a_merge_reach_the_merged_segment(tmp_path, monkeypatch, in_folder):
    rng = np.random.default_rng(1)
    rows, gate, tree = _held_merge(
        monkeypatch, rng, (300, 200), tmp_path / "g" if in_folder else None
    )  # 300 < 2 * 200: these two merge
    assert len(tree.segments) == 2  # the merge is held: queries see the old segments
    rows.check(tree, rng)
    # Meanwhile: deletes in both merging segments, an expiry cutting through them, appends.
    rows.delete(tree, np.array([3, 17, 299, 300, 450]))
    rows.expire(tree, 100)
    rows.append(tree, rng, 20)
    rows.delete(tree, np.array([501, 10 + int(np.flatnonzero(rows.alive[10:])[0])]))
    rows.check(tree, rng)
    gate.open_.set()
    tree.wait_for_merges()
    rows.check(tree, rng)
    assert sum(s.rows for s in tree.segments) == int(rows.alive.sum())
    if in_folder:
        _closed_and_reopened(tree, tmp_path / "g", rows, rng)


def test_a_merge_whose_rows_all_expired_meanwhile_is_dropped(monkeypatch):
    rng = np.random.default_rng(2)
    rows, gate, tree = _held_merge(monkeypatch, rng, (30, 20))
    rows.expire(tree, 1001)
    rows.append(tree, rng, 5)
    gate.open_.set()
    tree.wait_for_merges()
    rows.check(tree, rng)
    assert [s.rows for s in tree.segments] == [5]


def test_queries_during_merges_answer_for_a_committed_state():
    """A thread queries while the main thread appends and deletes (merges running in the
    background): every answer is the reference's for one of the states the changes made."""
    rng = np.random.default_rng(3)
    rows, tree = _Rows(), _tree()
    box = (100, 700, 0.2, 0.9)
    states: list[tuple[tuple[int, ...], int]] = []

    def record() -> None:
        inside = rows.alive & (rows.x >= box[0]) & (rows.x <= box[1])
        inside &= (rows.y >= box[2]) & (rows.y <= box[3])
        states.append((tuple(np.flatnonzero(inside).tolist()), int(rows.w[inside].sum())))

    record()
    seen: list[tuple[tuple[int, ...], int, int]] = []
    stop = threading.Event()

    def query() -> None:
        while not stop.is_set():
            ids = tuple(tree.report(*box)[1].tolist())
            seen.append((ids, tree.count(*box), len(tree.segments)))

    rows.append(tree, rng, 20000)
    record()
    reader = threading.Thread(target=query)
    reader.start()
    for step in range(40):
        rows.append(tree, rng, int(rng.integers(500, 4000)))
        record()
        if step % 3 == 0:
            live = np.flatnonzero(rows.alive)
            rows.delete(tree, rng.choice(live, 50, replace=False))
            record()
    tree.wait_for_merges()
    stop.set()
    reader.join()
    reports = {s[0] for s in states}
    counts = {len(s[0]) for s in states}
    assert len(seen) > 10
    assert all(ids in reports for ids, _, _ in seen)  # never a mixture of two states
    assert all(count in counts for _, count, _ in seen)
    assert tuple(tree.report(*box)[1].tolist()) == states[-1][0]
    assert tree.sum(*box) == states[-1][1]
    rows.check(tree, rng)


def test_the_policy_keeps_segments_logarithmic():
    rng = np.random.default_rng(4)
    rows, tree = _Rows(), _tree()
    for _ in range(120):
        rows.append(tree, rng, int(rng.integers(1, 400)))
    tree.wait_for_merges()
    sizes = [s.rows for s in tree.segments]
    # The logarithmic method's bound (Bentley and Saxe 1980, from memory): each segment
    # at least twice the next, so at most log2(n) + 1 of them.
    assert all(a >= 2 * b for a, b in zip(sizes, sizes[1:]))
    assert len(sizes) <= math.floor(math.log2(sum(sizes))) + 1
    rows.check(tree, rng)


def test_a_failed_merge_is_raised_by_the_next_call_and_loses_nothing(tmp_path, monkeypatch):
    rng = np.random.default_rng(5)
    rows, tree = _Rows(), _tree(tmp_path / "g")
    failed = threading.Event()

    def broken(job, schema, write):
        failed.set()
        raise MemoryError("no room for the merged segment")

    monkeypatch.setattr(_merges, "build", broken)
    rows.append(tree, rng, 30)
    rows.append(tree, rng, 20)
    assert failed.wait(30)
    with tree._lock:  # the merger records the error holding the lock, then stops
        tree._merges.wait()
    with pytest.raises(boxwood.MergeError, match="no room") as caught:
        tree.count(0, 1000, 0, 1)
    assert isinstance(caught.value.__cause__, MemoryError)
    rows.check(tree, rng)  # raised once; the segments were kept
    assert len(tree.segments) == 2
    monkeypatch.undo()
    rows.append(tree, rng, 5)  # the next change starts merges again
    tree.wait_for_merges()
    assert [s.rows for s in tree.segments] == [50, 5]
    _closed_and_reopened(tree, tmp_path / "g", rows, rng)


def test_a_failed_merge_is_raised_by_a_change_which_then_does_nothing(monkeypatch):
    rng = np.random.default_rng(9)
    rows, tree = _Rows(), _tree()
    monkeypatch.setattr(_merges, "build", lambda *a: 1 / 0)
    rows.append(tree, rng, 30)
    rows.append(tree, rng, 20)
    with tree._lock:
        tree._merges.wait()
    with pytest.raises(boxwood.MergeError) as caught:
        tree.delete([0])
    assert isinstance(caught.value.__cause__, ZeroDivisionError)
    rows.check(tree, rng)  # row 0 still live: the call that raised changed nothing
    monkeypatch.undo()
    rows.delete(tree, np.array([0]))
    tree.wait_for_merges()
    rows.check(tree, rng)


def test_close_and_compact_wait_for_a_running_merge(tmp_path, monkeypatch):
    rng = np.random.default_rng(6)
    for ending in ("close", "compact"):
        folder = tmp_path / ending
        rows, gate, tree = _held_merge(monkeypatch, rng, (30, 20), folder)
        ended = threading.Event()

        def end(tree=tree, ending=ending, ended=ended):
            getattr(tree, ending)()
            ended.set()

        ender = threading.Thread(target=end)
        ender.start()
        assert not ended.wait(0.2)  # held by the merge
        gate.open_.set()
        ender.join(30)
        assert ended.is_set() and not tree._merges.running
        if ending == "compact":
            assert [s.rows for s in tree.segments] == [50]
            tree.close()
        with _tree(folder) as again:
            rows.check(again, rng)
            assert [s.rows for s in again.segments] == [50]
        (only,) = _folder.Folder(str(folder), readonly=True).read().segments
        # Nothing stray: the merged segment's file alone.
        assert [n for n in os.listdir(folder) if n.startswith("seg-")] == [only.name]


def test_a_merged_file_written_before_its_commit_survives_other_commits(tmp_path, monkeypatch):
    """The merged segment's file is written and synced on the merge's thread; commits of
    other changes meanwhile clean the folder but keep it (and its temporary file)."""
    rng = np.random.default_rng(8)
    rows, written, release = _Rows(), threading.Event(), threading.Event()
    real = _folder.Folder.write_pending

    def held(self, seg):
        out = real(self, seg)
        written.set()
        assert release.wait(30)
        return out

    monkeypatch.setattr(_folder.Folder, "write_pending", held)
    tree = _tree(tmp_path / "g")
    rows.append(tree, rng, 30)
    rows.append(tree, rng, 20)
    assert written.wait(30)
    rows.append(tree, rng, 3)
    rows.delete(tree, np.array([1, 40]))
    release.set()
    tree.wait_for_merges()
    tree.close()
    with _tree(tmp_path / "g") as again:
        rows.check(again, rng)
        assert [s.rows for s in again.segments] == [48, 3]
    assert boxwood.verify_folder(str(tmp_path / "g")).live_rows == int(rows.alive.sum())


def test_most_rows_deleted_during_a_merge_purge_the_merged_segment(monkeypatch):
    rng = np.random.default_rng(10)
    rows, gate, tree = _held_merge(monkeypatch, rng, (40, 30))
    rows.delete(tree, np.arange(5, 60))  # 55 of the merge's 70 rows
    gate.open_.set()
    tree.wait_for_merges()
    # More than half deleted: the commit rebuilds the merged segment without them.
    assert [(s.rows, s.deleted) for s in tree.segments] == [(15, 0)]
    rows.check(tree, rng)


def test_snapshots_pickles_and_readers_taken_during_a_merge(tmp_path, monkeypatch):
    import pickle

    rng = np.random.default_rng(11)
    rows, gate, tree = _held_merge(monkeypatch, rng, (300, 200), tmp_path / "g")
    reader = boxwood.GrowingTree.open(tmp_path / "g", readonly=True)
    frozen, shipped = tree.snapshot(), pickle.loads(pickle.dumps(tree))
    before = _Rows.__new__(_Rows)
    before.x, before.y, before.w, before.alive = rows.x, rows.y, rows.w, rows.alive.copy()
    rows.delete(tree, np.array([0, 350]))
    tree.refresh()  # a writer is at its own latest state: nothing to read, nothing lost
    rows.check(tree, rng)
    gate.open_.set()
    tree.wait_for_merges()
    assert [s.rows for s in tree.segments] == [498]
    for view in (frozen, shipped, reader):  # the state when each was taken
        before.check(view, rng)
        assert len(view.segments) == 2
    reader.refresh()
    rows.check(reader, rng)
    assert [s.rows for s in reader.segments] == [498]
    reader.close()
    tree.close()


def test_appends_wait_for_the_merger_only_past_twice_the_settled_bound(monkeypatch):
    rng = np.random.default_rng(12)
    rows, gate, tree = _held_merge(monkeypatch, rng, (64, 64))
    appended = threading.Event()
    stop = threading.Event()

    def keep_appending() -> None:
        while not stop.is_set():
            rows.append(tree, rng, 1)
            appended.set()

    # Until the policy's bound while merging, appends return while the merge is held (no
    # wait): 1-row segments pile up.
    while len(tree.segments) + 1 <= _segments.most_segments(tree.next_id + 1, merging=True):
        rows.append(tree, rng, 1)
    assert gate.open_.is_set() is False and len(tree.segments) > 2
    appender = threading.Thread(target=keep_appending)
    appender.start()
    assert not appended.wait(0.2)  # the next append waits for the held merge
    gate.open_.set()
    assert appended.wait(30)
    stop.set()
    appender.join(30)
    tree.wait_for_merges()
    rows.check(tree, rng)


def test_rows_gone_during_a_merge_are_found_by_both_ways_of_comparing():
    """The commit's ids gone since the merge started, against numpy's set difference of the
    live ids then and now: after deletes only (the trees kept), and after a purge."""
    tree = boxwood.GrowingTree("int64", "float64")
    schema = tree._schema
    segs = []
    for first, n in ((0, 400), (400, 100)):
        ids = np.arange(first, first + n)
        cols = _segments.Columns(ids, ids / 7.0, None, None, ids)
        segs.append(_segments.make_segment(cols, schema))
    segs[0] = _segments.with_deleted(segs[0], np.arange(0, 400, 7), schema)
    inputs = tuple(segs)
    deleted = set(range(0, 400, 7))
    now = list(inputs)
    for more in (range(1, 300, 5), range(2, 380)):  # the second purges segment 0
        gone = np.array(sorted(set(more) - deleted))
        deleted |= set(more)
        now[0] = _segments.with_deleted(now[0], gone, schema)
        want = np.setdiff1d(_live(inputs), _live(now))  # numpy's set difference
        assert _merges._gone_since(inputs, tuple(now)).tolist() == want.tolist()
        assert (now[0].tree is inputs[0].tree) == (more.start == 1)  # both ways were taken


def _live(segs) -> np.ndarray:
    return np.concatenate([s.ids[~np.isin(s.ids, s.dead)] for s in segs])


@pytest.mark.skipif(not os.path.isdir("/proc/self/task"), reason="reads Linux's /proc")
def test_merges_run_on_background_threads_of_lower_priority(monkeypatch):
    rng = np.random.default_rng(7)
    ours = os.getpriority(os.PRIO_PROCESS, 0)
    mergers: dict[int, int] = {}
    real = _merges.build

    def noted(job, schema, write):
        tid = threading.get_native_id()
        mergers[tid] = _niceness(tid)
        return real(job, schema, write)

    monkeypatch.setattr(_merges, "build", noted)
    rows, tree = _Rows(), _tree()
    for n in (300, 200, 150, 100):
        rows.append(tree, rng, n)
    tree.wait_for_merges()
    rows.check(tree, rng)
    # The engine's background pools: their threads named boxwood-bg<pool>-<thread>, at
    # niceness 19 (field 19 of /proc's stat, after the parenthesised name), the lowest
    # priority; and the merger threads themselves (the thread that ran a merge's build).
    nice = {}
    for tid in os.listdir("/proc/self/task"):
        with open(f"/proc/self/task/{tid}/comm") as f:
            name = f.read().strip()
        if name.startswith("boxwood-bg"):
            nice[name] = _niceness(tid)
    assert nice, "no background pool thread found"
    assert set(nice.values()) == {19}
    assert mergers and set(mergers.values()) == {19}
    assert os.getpriority(os.PRIO_PROCESS, 0) == ours  # the caller's own is untouched


def _niceness(tid) -> int:
    with open(f"/proc/self/task/{tid}/stat") as f:
        return int(f.read().rsplit(")", 1)[1].split()[16])


def test_a_second_merge_runs_beside_a_held_one_on_newer_segments(monkeypatch):
    rng = np.random.default_rng(8)
    rows, gate, tree = _held_merge(monkeypatch, rng, (300, 200))
    started = []
    held = _merges.build

    def counted(job, schema, write):
        started.append((job.first, job.last))
        return held(job, schema, write)

    monkeypatch.setattr(_merges, "build", counted)
    rows.append(tree, rng, 100)
    rows.append(tree, rng, 60)  # 100 < 2 * 60: the second lane merges these two
    deadline = threading.Event()
    for _ in range(300):
        if started:
            break
        deadline.wait(0.1)
    assert started == [(500, 659)]  # the newer run, beside the held one (ids 0..499)
    assert len(tree.segments) == 4
    rows.check(tree, rng)
    gate.open_.set()
    tree.wait_for_merges()
    rows.check(tree, rng)
    assert [s.rows for s in tree.segments] == [500, 160]


def test_every_merge_lane_has_an_engine_pool_and_no_other_pool_is_taken():
    from boxwood import _boxwood

    assert 1 <= _merges.LANES <= _boxwood.BACKGROUND_POOLS
    errors: list[BaseException] = []

    def mark_each() -> None:  # on a thread of its own: marking lowers its priority
        try:
            for lane in range(_merges.LANES):
                _boxwood.mark_background_thread(lane)
            _boxwood.mark_background_thread(None)
            with pytest.raises(ValueError, match="out of range"):
                _boxwood.mark_background_thread(_boxwood.BACKGROUND_POOLS)
        except BaseException as exc:
            errors.append(exc)

    thread = threading.Thread(target=mark_each)
    thread.start()
    thread.join(30)
    assert not thread.is_alive() and errors == []
