"""Background merges of a growing tree: off the calling thread, two at once.

A change that leaves segments for the policy to merge starts a merger thread on each idle
lane (``LANES``) the policy has a run for (:func:`free_run`: runs of segments no running
job covers). A job takes its run's segments as they stand (their live rows then) and,
without the tree's lock, builds the merged segment (the engine's build releases the GIL)
and, for a tree in a folder, writes and syncs its file. Then, holding the lock, it swaps the
segment list: the segments of the run's id range, as they are now (changed by deletes and
expiries meanwhile, or gone), are replaced by the merged segment with the rows deleted
since marked deleted in it; a tree in a folder replaces its manifest (the commit). The lane
then takes the next run the policy asks for, and its thread stops when there is none.

Two lanes, because one merge of the large old segments takes seconds at 10^7 rows: alone,
it let the appends' small segments pile up until appends had to wait for it. With a second
lane the small ones keep merging meanwhile. Each lane's engine work runs on a background
pool of its own, at a lower OS priority, so that merges use the cores the appends and
queries leave idle and never queue behind each other's tasks.

A segment's rows form one id range, segments follow each other in id order, running jobs
cover disjoint runs, and no change but a merge replaces segments by others of another id
range while merges run (``compact`` waits for them first), so the segments a commit
replaces are exactly those its id range covers. Until the commit, queries answer from the
old segments; an append waits for its own segment, then, while merges run, briefly for
them (:meth:`Merger.after_append`: as long as it usually takes itself, up to three times
that as the segments pass the settled bound), and until one commits only when the
segments would outnumber ``most_segments(merging=True)``.

A merge that fails keeps the old segments (nothing is lost); the error is raised, as
:class:`MergeError`, by the tree's next call, and the next change starts merges again.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np

from .._boxwood import BACKGROUND_POOLS, mark_background_thread
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
    """Whether an append must wait for the running merges: more segments than the policy
    keeps while merges run."""
    return len(segs) > most_segments(_rows(segs), merging=True)


#: The share of its usual time an append waits while merges run, however few the segments:
#: every append pays for the merges a little, so that the merges keep up with back-to-back
#: appends before the segments pile up. Each appended row is rebuilt about log2 of the
#: segments' size ratio times by merges, so merges need a few times the append's own work.
LEAST_SHARE = 1.0
#: The most an append waits, in shares of its usual time (reached at the crowded bound).
MOST_SHARE = 3.0


def slowdown(segs: tuple[Segment, ...], usual: float) -> float:
    """How long an append whose usual time is `usual` seconds waits for the running merges,
    at most, before it returns, leaving `segs`: ``LEAST_SHARE`` of `usual` up to the
    settled bound, then a share growing linearly with the segments past that bound, to
    ``MOST_SHARE`` at twice the bound (:func:`crowded`, where it also stops until a merge
    commits).

    Appends that outpace the merges so pay for them evenly, every append a little more as
    the merges fall behind, rather than one append a whole merge at a time: writers of
    log-structured stores slow down before they stop (common practice)."""
    rows = _rows(segs)
    calm, most = most_segments(rows, merging=False), most_segments(rows, merging=True)
    past = max(0, len(segs) - calm)
    return usual * min(MOST_SHARE, LEAST_SHARE + (MOST_SHARE - LEAST_SHARE) * past / (most - calm))


class Pace:
    """An append's usual time: the median time a row of the recent appends took (their own
    segment's build and, in a folder, its file) times its rows. A median, so that one
    append slowed by the machine does not make the next ones wait longer."""

    #: How many recent appends the median is taken over.
    RECENT = 16

    def __init__(self) -> None:
        self._per_row: deque[float] = deque(maxlen=self.RECENT)

    def usual(self, rows: int, took: float) -> float:
        """Record an append of `rows` rows that took `took` seconds; its usual time."""
        self._per_row.append(took / rows)
        return float(np.median(self._per_row)) * rows


def _rows(segs: tuple[Segment, ...]) -> int:
    return sum(int(s.ids.size) for s in segs)


def free_run(segs: tuple[Segment, ...], running: Iterable[Job]) -> tuple[int, int] | None:
    """The run ``segs[start:stop]`` the policy merges next among the segments no running
    job covers: :func:`next_run` within each stretch of them between running jobs, the
    newest stretch first (the newest segments are the small ones appends keep making)."""
    busy = [any(job.covers(s) for job in running) for s in segs]
    stop = len(segs)
    while stop > 0:
        start = stop
        while start > 0 and not busy[start - 1]:
            start -= 1
        run = next_run(segs[start:stop])
        if run is not None:
            return start + run[0], start + run[1]
        stop = start
        while stop > 0 and busy[stop - 1]:
            stop -= 1
    return None


#: How many merges may run at once, each on a thread (and an engine pool) of its own: while
#: one merges the large old segments, another keeps the new small ones few, so appends do
#: not wait for the large merge. The engine has a pool for each, up to ``BACKGROUND_POOLS``.
LANES = min(2, BACKGROUND_POOLS)


def _in_background(lane: int, target: Callable[[int, Job], None], job: Job) -> None:
    """Run `target` with its engine work on the engine's background pool `lane`, whose
    threads yield the cores to appends and queries (a merge sharing their pool made an
    append's own build wait behind its tasks)."""
    mark_background_thread(lane)
    target(lane, job)


class Merger:
    """The merges of one tree: up to ``LANES`` threads, each running one job at a time, on
    segments no other job covers.

    Every method is called holding `lock`, the tree's lock (the one every change and every
    commit holds); waiting releases it.
    """

    def __init__(self, lock: threading.RLock) -> None:
        self._changed = threading.Condition(lock)
        #: The job each busy lane runs.
        self._jobs: dict[int, Job] = {}
        #: Set while ``compact`` waits: no lane takes a further job.
        self._held = False
        self._error: BaseException | None = None
        self._pace = Pace()

    @property
    def running(self) -> bool:
        return bool(self._jobs)

    def start(
        self, segs: tuple[Segment, ...], target: Callable[[int, Job], None], *, daemon: bool
    ) -> None:
        """Start a merger thread, running ``target(lane, job)``, on each idle lane the
        policy has a run for, unless a failed merge's error waits to be raised (the next
        change starts them again)."""
        for lane in range(LANES):
            if lane in self._jobs:
                continue
            job = self._take(lane, segs)
            if job is None:
                return
            thread = threading.Thread(
                target=_in_background,
                args=(lane, target, job),
                name=f"boxwood merge {lane}",
                daemon=daemon,
            )
            try:
                thread.start()
            except BaseException:  # no thread: the job never runs, so no lane holds it
                del self._jobs[lane]
                raise

    def next_job(self, lane: int, segs: tuple[Segment, ...]) -> Job | None:
        """Lane `lane`'s job is committed (or given up): its next job, from the segments
        now; None ends its thread."""
        del self._jobs[lane]
        self._changed.notify_all()
        return self._take(lane, segs)

    def _take(self, lane: int, segs: tuple[Segment, ...]) -> Job | None:
        if self._held or self._error is not None:
            return None
        run = free_run(segs, self._jobs.values())
        if run is None:
            return None
        self._jobs[lane] = job = Job.of(segs[run[0] : run[1]])
        return job

    def failed_job(self, lane: int, error: BaseException) -> None:
        """Lane `lane`'s job failed, which ends its thread; `error` waits to be raised."""
        self._error = error
        self._jobs.pop(lane, None)
        self._changed.notify_all()

    def wait(self, until: Callable[[], bool] = lambda: False, timeout: float | None = None) -> None:
        """Wait until every lane has stopped (no run left for the policy), or `until()`, or
        `timeout` seconds have passed."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while self._jobs and not until():
            left = None if deadline is None else deadline - time.monotonic()
            if left is not None and left <= 0:
                return
            self._changed.wait(left)

    def after_append(self, segs: Callable[[], tuple[Segment, ...]], rows: int, took: float) -> None:
        """The wait of an append of `rows` rows that took `took` seconds, `segs()` giving
        the segments now: for the running merges up to :func:`slowdown`, then, while
        :func:`crowded`, until a merge commits."""
        delay = slowdown(segs(), self._pace.usual(rows, took))
        if self._jobs and delay > 0:
            self.wait(timeout=delay)
        self.wait(until=lambda: not crowded(segs()))

    def wait_held(self) -> None:
        """Wait for the running jobs only, no lane taking a further one (until
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
