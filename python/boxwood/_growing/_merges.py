"""Background merges of a growing tree: one at a time, off the calling thread.

A change that leaves segments for the policy to merge (``next_run``) starts the merger, a
thread of the tree's own. It takes the run's segments as they stand (their live rows then)
and, without the tree's lock, builds the merged segment (the engine's build releases the
GIL) and, for a tree in a folder, writes and syncs its file. Then, holding the lock, it
swaps the segment list: the segments of the run's id range, as they are now (changed by
deletes and expiries meanwhile, or gone), are replaced by the merged segment with the rows
deleted since marked deleted in it; a tree in a folder replaces its manifest (the commit).
It then takes the next run the policy asks for, and stops when there is none.

A segment's rows form one id range, segments follow each other in id order, and no change
but a merge replaces segments by others of another id range while the merger runs
(``compact`` waits for it first), so the segments a commit replaces are exactly those its
id range covers. Until the commit, queries answer from the old segments; an append waits
only for its own segment, and for the merger only when the segments would outnumber
``most_segments(merging=True)``.

A merge that fails keeps the old segments (nothing is lost); the error is raised, as
:class:`MergeError`, by the tree's next call, and the next change starts merges again.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ._segments import Schema, Segment, merged, most_segments, next_run, with_deleted


class MergeError(RuntimeError):
    """A background merge failed; its segments were kept unmerged (its cause is chained)."""


@dataclass(frozen=True, eq=False)
class Job:
    """One merge: its input segments as they stood when it started, and their id range."""

    inputs: tuple[Segment, ...]
    first: int
    last: int

    @classmethod
    def of(cls, inputs: tuple[Segment, ...]) -> Job:
        return cls(inputs, int(inputs[0].ids[0]), int(inputs[-1].ids[-1]))

    def covers(self, seg: Segment) -> bool:
        return self.first <= int(seg.ids[0]) <= self.last


def build(job: Job, schema: Schema, write: Callable[[Segment], Segment] | None) -> Segment:
    """The merged segment of the job's inputs' live rows (its file written by `write` for a
    tree in a folder). Tests hold merges open by patching this function."""
    seg = merged(list(job.inputs), schema)
    return seg if write is None else write(seg)


def committed(
    job: Job, seg: Segment, segs: tuple[Segment, ...], schema: Schema
) -> tuple[Segment, ...] | None:
    """`segs` with the segments of the job's id range replaced by its merged segment `seg`,
    less the rows deleted from them since the merge started; None when none of them is
    left (all expired or deleted meanwhile)."""
    where = [i for i, s in enumerate(segs) if job.covers(s)]
    if not where:
        return None
    gone = _gone_since(job.inputs, tuple(segs[i] for i in where))
    out = with_deleted(seg, gone, schema) if gone.size else seg
    rest = (out,) if out is not None and out.live else ()
    return (*segs[: where[0]], *rest, *segs[where[-1] + 1 :])


def _gone_since(inputs: tuple[Segment, ...], now: tuple[Segment, ...]) -> np.ndarray:
    """The ids live in `inputs` but not in `now`, the segments of the same id range as they
    are now (ascending). Deletes and cut-through expiries keep a segment's tree and add to
    its deleted ids, so then only those additions are compared; a segment rebuilt (purged)
    or dropped meanwhile makes it compare the live ids, by searches in sorted arrays."""
    same_trees = len(now) == len(inputs) and all(a.tree is b.tree for a, b in zip(inputs, now))
    if same_trees:
        added = [np.setdiff1d(b.dead, a.dead, assume_unique=True) for a, b in zip(inputs, now)]
        return np.concatenate(added)
    was = np.concatenate([_live_ids(s) for s in inputs])
    still = np.concatenate([_live_ids(s) for s in now])
    if still.size == 0:
        return was
    pos = np.searchsorted(still, was).clip(max=still.size - 1)
    return was[still[pos] != was]


def _live_ids(seg: Segment) -> np.ndarray:
    if seg.dead.size == 0:
        return seg.ids
    return seg.ids[~np.isin(seg.ids, seg.dead, assume_unique=True)]


def crowded(segs: tuple[Segment, ...]) -> bool:
    """Whether an append must wait for the running merge: more segments than the policy
    keeps while one runs."""
    return len(segs) > most_segments(sum(int(s.ids.size) for s in segs), merging=True)


class Merger:
    """The merges of one tree: at most one thread, running one job at a time.

    Every method is called holding `lock`, the tree's lock (the one every change and every
    commit holds); waiting releases it.
    """

    def __init__(self, lock: threading.RLock) -> None:
        self._changed = threading.Condition(lock)
        self._thread: threading.Thread | None = None
        #: Set while ``compact`` waits: the merger takes no further job.
        self._held = False
        self._error: BaseException | None = None

    @property
    def running(self) -> bool:
        return self._thread is not None

    def start(self, target: Callable[[], None], *, daemon: bool) -> None:
        """Start the merger thread running `target` unless it runs already, or a failed
        merge's error waits to be raised (the next change starts it again)."""
        if self._thread is None and self._error is None:
            self._thread = threading.Thread(target=target, name="boxwood merge", daemon=daemon)
            self._thread.start()

    def next_job(self, segs: tuple[Segment, ...]) -> Job | None:
        """The merger's next job, from the segments now; None ends the thread."""
        run = None if self._held or self._error is not None else next_run(segs)
        if run is None:
            self._thread = None
            self._changed.notify_all()
            return None
        return Job.of(segs[run[0] : run[1]])

    def finished(self, error: BaseException | None = None) -> None:
        """The running job committed, was given up (`error` None), or failed."""
        if error is not None:
            self._error = error
            self._thread = None
        self._changed.notify_all()

    def wait(self, until: Callable[[], bool] = lambda: False) -> None:
        """Wait until the merger has stopped (no run left for the policy), or `until()`."""
        while self._thread is not None and not until():
            self._changed.wait()

    def wait_held(self) -> None:
        """Wait for the running job only, the merger taking no further one (until
        :meth:`release`)."""
        self._held = True
        self.wait()

    def release(self) -> None:
        self._held = False

    def raise_failed(self) -> None:
        """Raise a failed merge's error once, as :class:`MergeError`."""
        if self._error is not None:
            exc, self._error = self._error, None
            raise MergeError(f"a background merge failed: {exc!r}; its segments were kept") from exc

    @property
    def failed(self) -> bool:
        return self._error is not None
