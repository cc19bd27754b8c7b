"""Exact order statistics of boxes across shards, driven from the client.

A box's points are spread over the shards its x range meets. Its count is the shards'
counts added up; its k-th smallest value (0 the smallest) is found from the shards' answers:

- **x**: the shards are x intervals (within a key, for a keyed tree), so in shard order a
  box's points come in x order: the k-th smallest x lies in the first shard whose running
  count passes k, at rank k less the points of the shards before it. One round.
- **y**: no such order across shards. Each shard keeps a range ``[lo, hi)`` of its own ranks
  of the box's y values that may hold the answer (at first all of them). A step asks every
  shard for :data:`OFFERS` values spread evenly over its range, its first and last among
  them, each standing for its share of the range; takes as pivots the smallest offer and
  the first past each of :data:`PIVOTS` even steps of the offers' weight in value order
  (all offers when they are few); then asks every shard how many of its box points lie
  below each pivot and at or below it. Added up, those give each pivot's place: one whose
  place spans k is the answer; otherwise no pivot lies between the largest one below the
  answer and the smallest one above, so every shard's range shrinks to the ranks between
  those two. Between two pivots lie offers of at most ``1 / PIVOTS`` of the weight and,
  for each shard, one gap between its offers: about ``2 / 15`` of the points left in the
  ranges (plus the few offers between the two pivots), so a step shrinks them about seven
  times. A step is two rounds of tasks costing each box ``O(shards · log n)``: ``OFFERS``
  order statistics and ``2 · (PIVOTS + 1)`` counts a shard. A box of 10^7 points ends in
  about 8 steps.

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
OFFERS = 16
#: Pivots taken at even steps of the offers' weight, which every shard counts.
PIVOTS = 16
#: Values counted in a step at most: all the offers when they are this few (so that a
#: search whose ranges hold few points ends), else the PIVOTS + 1 pivots.
KEPT = 2 * (PIVOTS + 1)
#: At most this many (rank, shard, value) entries in one step: larger batches of ranks are
#: searched a slice at a time, so that the client's arrays stay within a few hundred MB.
STEP_ENTRIES = 1 << 24
#: More steps than a search of 2**64 points can take.
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
            per_slice = max(1024, STEP_ENTRIES // (len(self._shards) * (OFFERS + KEPT)))
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
        offered, valid = _offered_ranks(lo, width)  # (shards, OFFERS, ranks)
        at = np.nonzero(valid.transpose(0, 2, 1))  # (shard, rank, offer) of each offer
        offers: np.ndarray = np.zeros((shards, count, OFFERS), dtype=dtype)
        ranks_offered = offered.transpose(0, 2, 1)[at]
        offers[at] = self._values(at[0], box[at[1]], ranks_offered, "y", dtype)
        # Each offer stands for its share of its shard's range; ranks by (shard, offer).
        share = width / np.maximum(np.minimum(width, OFFERS), 1)
        weights = np.broadcast_to(share.T[:, :, None], (count, shards, OFFERS))
        values, chosen = _pivots(
            offers.transpose(1, 0, 2).reshape(count, shards * OFFERS),
            weights.reshape(count, shards * OFFERS),
            valid.transpose(2, 0, 1).reshape(count, shards * OFFERS),
        )
        below_each, at_or_below_each = self._places(box, values, chosen, width, lo)
        below_all = sum(below_each)
        at_or_below_all = sum(at_or_below_each)
        k = rank[:, None]
        hit = chosen & (below_all <= k) & (k < at_or_below_all)
        found = np.asarray(hit.any(axis=1))
        answer = values[found, hit[found].argmax(axis=1)]
        # The pivots below the answer and above it. Counts grow with the value (pivots with
        # the same count have no point between them), so the largest pivot below is the
        # one with the most points at or below it, and the smallest above the one with the
        # fewest below it.
        lower = chosen & (at_or_below_all <= k)
        upper = chosen & (below_all > k)
        largest_lower = np.where(lower, at_or_below_all, -1).argmax(axis=1)
        smallest_upper = np.where(upper, below_all, np.iinfo(np.int64).max).argmin(axis=1)
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
        """Each shard's count of the box's points below each pivot and at or below it
        (ranks by pivots). A shard whose range is empty has its ``lo`` points below
        every pivot and none at or above: the pivots lie strictly between its
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
    """The shard ranks each shard offers each rank's search (shards, OFFERS, ranks): its
    whole range when that holds at most OFFERS ranks, else OFFERS ranks spread evenly from
    its first to its last; and which of them are offered."""
    i = np.arange(OFFERS)[None, :, None]
    taken = np.minimum(width, OFFERS)[:, None, :]
    steps = np.maximum(taken - 1, 1)
    offered = lo[:, None, :] + (i * np.maximum(width - 1, 0)[:, None, :]) // steps
    return offered, i < taken


def _pivots(
    values: np.ndarray, weights: np.ndarray, valid: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The values every shard counts (ranks by :data:`KEPT`) and which are pivots: all the
    offers when they are at most KEPT, else the smallest offer and the first offer past
    each of PIVOTS even steps of the offers' weight in value order."""
    count = values.shape[0]
    order = np.argsort(np.where(valid, values, values.max(initial=0)), axis=1, kind="stable")
    values = np.take_along_axis(values, order, axis=1)
    valid = np.take_along_axis(valid, order, axis=1)
    total = np.cumsum(np.where(valid, np.take_along_axis(weights, order, axis=1), 0), axis=1)
    step = np.floor(total * PIVOTS / np.maximum(total[:, -1:], 1))
    before = np.concatenate([np.full((count, 1), -1.0), step[:, :-1]], axis=1)
    few = valid.sum(axis=1, keepdims=True) <= KEPT
    marked = valid & (few | (step != before))
    slot = np.cumsum(marked, axis=1) - 1
    row, column = np.nonzero(marked)
    pivots = np.zeros((count, KEPT), dtype=values.dtype)
    chosen = np.zeros((count, KEPT), dtype=bool)
    pivots[row, slot[row, column]] = values[row, column]
    chosen[row, slot[row, column]] = True
    return pivots, chosen
