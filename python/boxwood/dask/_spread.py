"""Exact order statistics of boxes across shards, driven from the client.

A box's points are spread over the shards its x range meets. Its count is the shards'
counts added up; its k-th smallest value (0 the smallest) is found from the shards' answers:

- **x**: the shards are x intervals (within a key, for a keyed tree), so in shard order a
  box's points come in x order: the k-th smallest x lies in the first shard whose running
  count passes k, at rank k less the points of the shards before it. One round.
- **y**: no such order across shards. Each shard keeps a range ``[lo, hi)`` of its own ranks
  of the box's y values that may hold the answer (at first all of them). A step asks every
  shard for :data:`CANDIDATES` values spread evenly over its range, its first and last among
  them, then every shard for how many of its box points lie below each candidate and at or
  below it. Added up, those say each candidate's place: one whose place spans k is the
  answer; otherwise no candidate lies between the largest one below the answer and the
  smallest one above, so each shard's range shrinks to the ranks between those two, less
  than ``1 / (CANDIDATES - 1)`` of it. A step is two rounds of tasks and costs each box
  ``O(shards² · CANDIDATES · log n)`` counting; about ``log(n) / log(CANDIDATES - 1) + 1``
  steps end every box (a range of at most :data:`CANDIDATES` ranks is offered whole).

Every step runs for all boxes at once, one task a shard.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from .._frames import pandas
from .._stats import Of
from ._tasks import answer_some, combine, shard_kth, shard_y_ranks

#: Values each shard offers a box in a step of the y search.
CANDIDATES = 8
#: At most this many (box, shard, shard, candidate) counts in one step: larger batches of
#: ranks are searched a slice at a time, so that the client's arrays stay within a few
#: hundred MB.
STEP_COUNTS = 1 << 24
#: More steps than a search of 2**64 points can take (it shrinks by CANDIDATES - 1 a step).
MAX_STEPS = 64


class ShardedBoxes:
    """A batch of boxes in the shards' engine numbers (a keyed tree's key codes last), with
    the shards each one can have points in and its count in each shard."""

    def __init__(
        self,
        client: Any,
        shards: list[Any],
        bounds: Sequence[np.ndarray],
        inclusive: str,
        first: np.ndarray,
        last: np.ndarray,
        tag: str,
    ) -> None:
        self._client, self._shards, self._bounds = client, shards, list(bounds)
        self._inclusive, self._tag, self._asked = inclusive, tag, 0
        self._routed = [np.flatnonzero((first <= s) & (s <= last)) for s in range(len(shards))]
        self.counts = self._counts()

    @property
    def size(self) -> int:
        return self._bounds[0].size

    def _submit(self, shard: int, task: Any, boxes: np.ndarray, *args: Any) -> Any:
        self._asked += 1
        return self._client.submit(
            task,
            self._shards[shard],
            [b[boxes] for b in self._bounds],
            *args,
            key=f"{self._tag}-{task.__name__}-{self._asked}-shard-{shard}",
        )

    def _answers(self, op: str) -> list[Any]:
        futures = [
            self._submit(s, answer_some, ids, ids, op, self._inclusive)
            for s, ids in enumerate(self._routed)
            if ids.size
        ]
        return self._client.gather(futures)

    def _counts(self) -> np.ndarray:
        """Each box's points in each shard: shards by boxes."""
        counts = np.zeros((len(self._shards), self.size), dtype=np.int64)
        shard_of = [s for s, ids in enumerate(self._routed) if ids.size]
        for s, (ids, part) in zip(shard_of, self._answers("count")):
            counts[s, ids] = part
        return counts

    def sums(self, weights: str) -> np.ndarray:
        """Each box's weight sum (int64 sums checked for overflow, as ``sum_boxes``)."""
        index = pandas().RangeIndex(self.size)
        return combine("sum", index, weights, *self._answers("sum")).to_numpy()

    def order_statistics(self, of: Of, ranks: np.ndarray, dtype: Any) -> np.ndarray:
        """The values (engine numbers of `dtype`) of the given ranks of axis `of`: boxes by
        ranks, a rank at or past its box's count answering 0."""
        box = np.repeat(np.arange(self.size), ranks.shape[1])
        rank = np.asarray(ranks, dtype=np.int64).reshape(-1)
        out: np.ndarray = np.zeros(rank.size, dtype=dtype)
        wanted = np.flatnonzero(rank < self.counts.sum(axis=0)[box])
        if of == "x":
            out[wanted] = self._kth_x(box[wanted], rank[wanted], dtype)
        else:
            per_slice = max(1024, STEP_COUNTS // (len(self._shards) ** 2 * CANDIDATES))
            for start in range(0, wanted.size, per_slice):
                some = wanted[start : start + per_slice]
                out[some] = self._kth_y(box[some], rank[some], dtype)
        return out.reshape(ranks.shape)

    def _kth_x(self, box: np.ndarray, rank: np.ndarray, dtype: Any) -> np.ndarray:
        running = np.cumsum(self.counts, axis=0)[:, box]
        shard = (running <= rank).sum(axis=0)
        before = np.where(shard > 0, running[np.maximum(shard - 1, 0), np.arange(box.size)], 0)
        return self._values(shard, box, rank - before, "x", dtype)

    def _values(
        self, shard: np.ndarray, box: np.ndarray, rank: np.ndarray, of: Of, dtype: Any
    ) -> np.ndarray:
        """The value of axis `of` at shard rank ``rank[i]`` of box ``box[i]`` in shard
        ``shard[i]``, one task a shard."""
        out: np.ndarray = np.zeros(box.size, dtype=dtype)
        places, futures = [], []
        for s in np.unique(shard).tolist():
            at = np.flatnonzero(shard == s)
            places.append(at)
            futures.append(self._submit(s, shard_kth, box[at], self._inclusive, of, rank[at]))
        for at, values in zip(places, self._client.gather(futures)):
            out[at] = values
        return out

    def _kth_y(self, box: np.ndarray, rank: np.ndarray, dtype: Any) -> np.ndarray:
        shards = len(self._shards)
        lo = np.zeros((shards, box.size), dtype=np.int64)
        hi = self.counts[:, box].copy()
        out: np.ndarray = np.zeros(box.size, dtype=dtype)
        pending = np.arange(box.size)
        for _ in range(MAX_STEPS):
            if pending.size == 0:
                return out
            found, values, below, above = self._narrow(
                box[pending], rank[pending], lo[:, pending], hi[:, pending], dtype
            )
            out[pending[found]] = values
            lo[:, pending], hi[:, pending] = below, above
            pending = pending[~found]
        raise RuntimeError(
            f"the y search left {pending.size} ranks unfound after {MAX_STEPS} steps"
        )

    def _narrow(
        self, box: np.ndarray, rank: np.ndarray, lo: np.ndarray, hi: np.ndarray, dtype: Any
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """One step of the y search: which ranks it found, their values, and every shard's
        narrowed range ``[lo, hi)`` (shards by ranks)."""
        shards, count = lo.shape
        width = hi - lo
        offered, valid = _offered_ranks(lo, width)  # (shards, CANDIDATES, ranks)
        at = np.nonzero(valid.transpose(0, 2, 1))  # (shard, rank, candidate) of each offer
        offers: np.ndarray = np.zeros((shards, count, CANDIDATES), dtype=dtype)
        ranks_offered = offered.transpose(0, 2, 1)[at]
        offers[at] = self._values(at[0], box[at[1]], ranks_offered, "y", dtype)
        # Candidates rank by rank: ranks by (shard offering, candidate).
        values = offers.transpose(1, 0, 2).reshape(count, shards * CANDIDATES)
        valid = valid.transpose(2, 0, 1).reshape(count, shards * CANDIDATES)
        below_each, at_or_below_each = self._places(box, values, valid, width, lo)
        below_all = sum(below_each)
        at_or_below_all = sum(at_or_below_each)
        k = rank[:, None]
        hit = valid & (below_all <= k) & (k < at_or_below_all)
        found = np.asarray(hit.any(axis=1))
        answer = values[found, hit[found].argmax(axis=1)]
        lower = valid & (at_or_below_all <= k)  # candidates below the answer
        upper = valid & (below_all > k)  # candidates above it
        info = np.finfo(dtype) if np.dtype(dtype).kind == "f" else np.iinfo(dtype)
        largest_lower = np.where(lower, values, info.min).argmax(axis=1)
        smallest_upper = np.where(upper, values, info.max).argmin(axis=1)
        rows = np.arange(count)
        new_lo, new_hi = lo.copy(), hi.copy()
        for s in range(shards):
            grow = lower.any(axis=1) & (width[s] > 0)
            new_lo[s, grow] = at_or_below_each[s][rows, largest_lower][grow]
            cut = upper.any(axis=1) & (width[s] > 0)
            new_hi[s, cut] = below_each[s][rows, smallest_upper][cut]
        return found, answer, new_lo, new_hi

    def _places(
        self,
        box: np.ndarray,
        values: np.ndarray,
        valid: np.ndarray,
        width: np.ndarray,
        lo: np.ndarray,
    ) -> tuple[list[np.ndarray], list[np.ndarray]]:
        """Each shard's count of the box's points below each candidate and at or below it
        (ranks by candidates). A shard whose range is empty has its ``lo`` points below
        every candidate and none at or above: the candidates lie strictly between its
        ranges' values, so it is not asked."""
        asked = {}
        for s in range(len(self._shards)):
            active = np.flatnonzero(width[s] > 0)
            if active.size == 0:
                continue
            row, column = np.nonzero(valid[active])
            task = self._submit(
                s, shard_y_ranks, box[active[row]], self._inclusive, values[active[row], column]
            )
            asked[s] = (active[row], column, task)
        answers = dict(zip(asked, self._client.gather([t for _, _, t in asked.values()])))
        below, at_or_below = [], []
        for s in range(len(self._shards)):
            less = np.broadcast_to(lo[s][:, None], values.shape).copy()
            most = less.copy()
            if s in asked:
                row, column, _ = asked[s]
                less[row, column], most[row, column] = answers[s]
            below.append(less)
            at_or_below.append(most)
        return below, at_or_below


def _offered_ranks(lo: np.ndarray, width: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The shard ranks each shard offers each rank's search (shards, CANDIDATES, ranks):
    its whole range when that holds at most CANDIDATES ranks, else CANDIDATES ranks spread
    evenly from its first to its last; and which of them are offered."""
    i = np.arange(CANDIDATES)[None, :, None]
    taken = np.minimum(width, CANDIDATES)[:, None, :]
    steps = np.maximum(taken - 1, 1)
    offered = lo[:, None, :] + (i * np.maximum(width - 1, 0)[:, None, :]) // steps
    return offered, i < taken
