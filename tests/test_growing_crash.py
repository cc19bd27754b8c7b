"""Crash tests: a writer killed with SIGKILL at random moments leaves its folder at the last
change that returned (or the one in flight, if it committed), never anything in between.

A planned run of appends, deletes, expiries and compactions (merges included) is carried
out by a child process, killed at a random moment, started again from where the folder
stands, killed again, and so on. After each kill the folder is opened as a writer (which
deletes what the killed change left behind), its live rows and next id must equal the
plan's state after the changes that returned or after one more, and its answers must equal
numpy masks over that state (the outside reference), ``boxwood verify`` passes on the
folder as the kill left it (every file fully verified, ids consistent across segments) and
no file is left that the manifest does not name.

``BOXWOOD_CRASH_KILLS`` sets the number of kills (default 200), and
``BOXWOOD_CRASH_MERGE_KILLS`` those of the test that kills the writer while a background
merge runs (default 60). The folder lives in memory (``/dev/shm``) when the machine has it:
a killed process loses nothing the kernel holds, so a process kill tests the order of
writes and renames whether or not the syncs reach a disk, and in memory they cost nothing.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import pathlib
import pickle
import random
import shutil
import signal
import tempfile

import numpy as np
import pytest

import boxwood
from _crash_child import run
from boxwood import cli

KILLS = int(os.environ.get("BOXWOOD_CRASH_KILLS", "200"))
#: Kills while a background merge runs, in a test of their own.
MERGE_KILLS = int(os.environ.get("BOXWOOD_CRASH_MERGE_KILLS", "60"))


def _plan(seed: int, changes: int, most_rows: int = 60):
    """The changes, and the state after each: (next id, live ids) for 0..changes. Appends
    add 1 to `most_rows` rows."""
    rng = np.random.default_rng(seed)
    x, y, w = [], [], []
    live: set[int] = set()
    states = [(0, ())]
    plan = []
    cutoff = 0
    for _ in range(changes):
        roll = rng.random()
        if roll < 0.55 or not live:
            n = int(rng.integers(1, most_rows))
            first = len(x)
            xs = (np.arange(first, first + n) // 4 + rng.integers(0, 5, n)).astype(np.int64)
            ys = rng.random(n).round(2)
            ws = rng.integers(-50, 50, n).astype(np.int64)
            plan.append(("append", xs, ys, ws))
            x += xs.tolist()
            y += ys.tolist()
            w += ws.tolist()
            live.update(range(first, first + n))
        elif roll < 0.85:
            pool = sorted(live)
            k = int(rng.integers(1, min(20, len(pool)) + 1))
            picked = sorted(int(v) for v in rng.choice(pool, size=k, replace=False))
            plan.append(("delete", np.array(picked, dtype=np.int64)))
            live.difference_update(picked)
        elif roll < 0.95:
            cutoff = max(cutoff, len(x) // 4 - 40)
            plan.append(("expire", cutoff))
            live = {i for i in live if x[i] >= cutoff}
        else:
            plan.append(("compact",))
        states.append((len(x), tuple(sorted(live))))
    return plan, states, (np.array(x), np.array(y), np.array(w))


def _state_of(tree: boxwood.GrowingTree):
    ids = tree.report(-np.inf, np.inf, -np.inf, np.inf)[1]
    return tree.next_id, tuple(ids.tolist())


def _check_answers(tree, live, columns, rng) -> None:
    x, y, w = columns
    ids = np.array(live, dtype=np.int64)
    for _ in range(3):
        a, b = sorted(rng.integers(0, max(1, x.size // 4 + 5), 2).tolist())
        c, d = sorted(rng.random(2).tolist())
        # Outside reference: numpy masks over the plan's live rows.
        inside = (x[ids] >= a) & (x[ids] <= b) & (y[ids] >= c) & (y[ids] <= d)
        assert tree.count(a, b, c, d) == int(inside.sum())
        assert tree.sum(a, b, c, d) == int(w[ids][inside].sum())
        assert tree.report(a, b, c, d)[1].tolist() == ids[inside].tolist()


def _no_strays(folder: str, tree: boxwood.GrowingTree, verify: bool) -> None:
    named = {"MANIFEST", "LOCK"}
    from boxwood._growing._folder import Folder

    snap = Folder(folder, readonly=True).read()
    for s in snap.segments:
        named.update(n for n in (s.name, s.dead_name) if n)
        if verify:
            boxwood.load(os.path.join(folder, s.name), verify="full")
    assert set(os.listdir(folder)) == named


@pytest.fixture
def folder_root(tmp_path):
    if not os.path.isdir("/dev/shm"):
        yield tmp_path
        return
    root = tempfile.mkdtemp(prefix="boxwood-crash-", dir="/dev/shm")
    try:
        yield pathlib.Path(root)
    finally:
        shutil.rmtree(root, ignore_errors=True)


def _planned(tmp_path, seed: int, changes: int, most_rows: int = 60):
    plan, states, columns = _plan(seed, changes, most_rows)
    plan_path = str(tmp_path / "plan.pickle")
    with open(plan_path, "wb") as f:
        pickle.dump(plan, f)
    ctx = mp.get_context("forkserver")
    ctx.set_forkserver_preload(["boxwood", "_crash_child"])
    return plan, states, columns, plan_path, ctx


def _check_after_kill(folder, plan, states, returned, columns, check_rng, verify) -> int:
    """Check the folder a killed writer left after `returned` changes had returned; returns
    how many changes it holds (`returned`, or one more if the change in flight committed)."""
    # As the kill left it (before a writer deletes its leftovers): every file fully
    # verified, the ids consistent across segments.
    assert cli.main(["verify", "-q", folder]) == 0, f"boxwood verify after {returned} changes"
    with boxwood.GrowingTree.open(folder) as tree:
        got = _state_of(tree)
        if returned < len(plan) and got == states[returned + 1] != states[returned]:
            returned += 1  # the change in flight had committed before the kill
        assert got == states[returned], f"after {returned} changes"
        _check_answers(tree, states[returned][1], columns, check_rng)
        _no_strays(folder, tree, verify=verify)
    return returned


def test_a_killed_writer_leaves_the_last_returned_change(tmp_path, folder_root):
    plan, states, columns, plan_path, ctx = _planned(tmp_path, 14, max(400, 8 * KILLS))
    folder = str(folder_root / "growing")
    rng = random.Random(14)
    check_rng = np.random.default_rng(14)
    start, kills, in_flight_committed = 0, 0, 0
    while kills < KILLS and start < len(plan):
        # No lock: a writer killed while holding it would leave it held for good.
        done, ready = ctx.Value("i", start, lock=False), ctx.Event()
        child = ctx.Process(target=run, args=(folder, plan_path, start, done, ready))
        child.start()
        if rng.random() < 0.9:  # most kills among the changes, some while opening
            ready.wait(10)
        child.join(rng.uniform(0.0, 0.005))
        if child.is_alive():
            child.kill()
            kills += 1
        child.join()
        returned = done.value
        if not os.path.exists(os.path.join(folder, "MANIFEST")):
            assert returned == 0  # killed before the folder's first commit
            continue
        start = _check_after_kill(
            folder, plan, states, returned, columns, check_rng, kills % 20 == 0
        )
        in_flight_committed += start > returned
    assert kills >= min(KILLS, 1)
    print(f"{kills} kills, {start} of {len(plan)} changes, {in_flight_committed} in flight")


def test_a_writer_killed_during_merges_leaves_the_last_returned_change(tmp_path, folder_root):
    """Kills while a background merge runs: at random moments after one starts building
    (building, writing its file, committing), and by the writer itself as a merge starts
    and once its file is written and synced but not yet committed (an unnamed file the
    next open deletes). Appends of up to 3,000 rows make merges of some milliseconds."""
    plan, states, columns, plan_path, ctx = _planned(tmp_path, 15, 60 * MERGE_KILLS, 3000)
    folder = str(folder_root / "growing")
    rng = random.Random(15)
    check_rng = np.random.default_rng(15)
    start, kills = 0, {"random": 0, "build": 0, "written": 0}
    while sum(kills.values()) < MERGE_KILLS and start < len(plan):
        kill_at = rng.choice([None, None, "build", "written"])
        done, ready, merging = ctx.Value("i", start, lock=False), ctx.Event(), ctx.Event()
        args = (folder, plan_path, start, done, ready, merging, kill_at)
        child = ctx.Process(target=run, args=args)
        child.start()
        while kill_at is None and child.is_alive() and not merging.wait(0.05):
            pass  # until a merge starts building (or the plan is done)
        if kill_at is None and merging.is_set():
            child.join(rng.uniform(0.0, 0.01))
            if child.is_alive():
                child.kill()
                kills["random"] += 1
        child.join(60)
        assert not child.is_alive()
        if kill_at is not None and child.exitcode == -signal.SIGKILL:
            kills[kill_at] += 1
        returned = done.value
        if not os.path.exists(os.path.join(folder, "MANIFEST")):
            assert returned == 0
            continue
        start = _check_after_kill(
            folder, plan, states, returned, columns, check_rng, sum(kills.values()) % 10 == 0
        )
    # Each kind of kill happened (the plan is long enough for them all).
    assert min(kills.values()) >= 1 and sum(kills.values()) >= MERGE_KILLS, kills
    print(f"kills during merges {kills}, {start} of {len(plan)} changes")


def test_readers_in_another_process_see_committed_states_only(tmp_path, folder_root):
    plan, states, columns, plan_path, ctx = _planned(tmp_path, 7, 300)
    folder = str(folder_root / "growing")
    done, ready = ctx.Value("i", 0, lock=False), ctx.Event()
    writer = ctx.Process(target=run, args=(folder, plan_path, 0, done, ready))
    writer.start()
    assert ready.wait(30)
    committed = {s: i for i, s in enumerate(states)}
    seen = []
    check_rng = np.random.default_rng(7)
    with boxwood.GrowingTree.open(folder, readonly=True) as reader:
        while writer.is_alive() or not seen or seen[-1] < len(plan):
            reader.refresh()
            state = _state_of(reader)
            # Every snapshot is the state after some whole number of changes, in order.
            assert state in committed, "a reader saw a state no change committed"
            seen.append(committed[state])
            _check_answers(reader, state[1], columns, check_rng)
            if not writer.is_alive() and seen[-1] < len(plan):
                reader.refresh()
                seen.append(committed[_state_of(reader)])
                break
    writer.join()
    assert writer.exitcode == 0
    assert seen == sorted(seen) and seen[-1] == len(plan)
    assert len(set(seen)) > 3  # the reader did read while the writer wrote
