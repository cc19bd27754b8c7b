"""The writer of the crash tests (tests/test_growing_crash.py): a planned run of changes to a
growing tree's folder, counting in shared memory each change that has returned, until the
test kills it with SIGKILL (or it kills itself at a chosen moment of a merge)."""

from __future__ import annotations

import os
import pickle
import signal
from typing import Any

import numpy as np

import boxwood
from boxwood._growing import _merges


def apply(tree: boxwood.GrowingTree, op: tuple) -> None:
    kind = op[0]
    if kind == "append":
        _, x, y, w = op
        tree.append(x, y, weights=w)
    elif kind == "delete":
        tree.delete(op[1])
    elif kind == "expire":
        tree.expire(op[1])
    elif kind == "compact":
        tree.compact()
    else:
        raise ValueError(kind)


def run(
    folder: str,
    plan_path: str,
    start: int,
    done: Any,
    ready: Any,
    merging: Any = None,
    kill_at: str | None = None,
) -> None:
    """Open `folder` (made on the first run) and carry out the plan from change `start`;
    ``done.value`` is the number of changes that have returned; ``ready`` is set once the
    folder is open. With `merging` (an event), it is set when a background merge starts
    building; `kill_at` ``"build"`` or ``"written"`` makes the process kill itself with
    SIGKILL as a merge starts building, or once the merged segment's file is written and
    synced but not yet committed."""
    with open(plan_path, "rb") as f:
        plan = pickle.load(f)
    if merging is not None:
        _watch_merges(merging, kill_at)
    if not os.path.exists(os.path.join(folder, "MANIFEST")):
        tree = boxwood.GrowingTree.open(folder, "int64", "float64", weights="int64")
    else:
        tree = boxwood.GrowingTree.open(folder)
    ready.set()
    for i in range(start, len(plan)):
        apply(tree, plan[i])
        done.value = i + 1
    tree.close()  # waits for the merges
    np.zeros(1)  # the plan is done: the test then waits for the exit


def _watch_merges(merging: Any, kill_at: str | None) -> None:
    real = _merges.build

    def build(job, schema, write):
        merging.set()
        if kill_at == "build":
            os.kill(os.getpid(), signal.SIGKILL)

        def written(seg):
            out = write(seg)
            if kill_at == "written":
                os.kill(os.getpid(), signal.SIGKILL)
            return out

        return real(job, schema, None if write is None else written)

    _merges.build = build  # this process's own module: the child is the test's writer
