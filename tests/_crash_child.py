"""The writer of the crash test (tests/test_growing_crash.py): a planned run of changes to a
growing tree's folder, counting in shared memory each change that has returned, until the
test kills it with SIGKILL."""

from __future__ import annotations

import os
import pickle
from typing import Any

import numpy as np

import boxwood


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


def run(folder: str, plan_path: str, start: int, done: Any, ready: Any) -> None:
    """Open `folder` (made on the first run) and carry out the plan from change `start`;
    ``done.value`` is the number of changes that have returned; ``ready`` is set once the
    folder is open."""
    with open(plan_path, "rb") as f:
        plan = pickle.load(f)
    if not os.path.exists(os.path.join(folder, "MANIFEST")):
        tree = boxwood.GrowingTree.open(folder, "int64", "float64", weights="int64")
    else:
        tree = boxwood.GrowingTree.open(folder)
    ready.set()
    for i in range(start, len(plan)):
        apply(tree, plan[i])
        done.value = i + 1
    np.zeros(1)  # the plan is done: the test then waits for the exit
