"""`BroadcastTree`: one small tree copied to every worker, answering Dask DataFrames of boxes.

See :func:`broadcast` and the example in :mod:`boxwood.dask`. The tree is a static
:class:`boxwood.RangeTree` or a growing tree's :class:`boxwood.GrowingSnapshot` (a frozen
view of its live rows, which pickles as its segments' trees); a growing tree itself changes,
so it is refused with the advice to broadcast its snapshot.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Any

import dask.dataframe as dd

from .._bounds import Inclusive, document_bounds
from .._growing import GrowingSnapshot, GrowingTree
from .._tree import RangeTree
from ._common import client_of, new_token
from ._tasks import broadcast_answer


class BroadcastTree:
    """One tree copied to every worker, answering Dask DataFrames of boxes partition by
    partition (a pandas DataFrame of boxes is answered here, by the tree itself). A keyed
    tree's boxes name their key columns with ``by=``, as for the tree's own methods."""

    def __init__(self, tree: RangeTree | GrowingSnapshot, client: Any) -> None:
        if isinstance(tree, GrowingTree) and not isinstance(tree, GrowingSnapshot):
            raise TypeError(
                "a GrowingTree changes after it is copied: broadcast tree.snapshot(), a frozen "
                "view of its live rows"
            )
        if not isinstance(tree, (RangeTree, GrowingSnapshot)):
            raise TypeError(
                f"tree must be a boxwood.RangeTree or a GrowingSnapshot, got {type(tree).__name__}"
            )
        self.tree = tree
        self._client = client
        # Every worker holds a copy, so losing one worker loses no tree.
        self.future = client.scatter(tree, broadcast=True, hash=False)

    @document_bounds
    def count_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """Points in each box, as :meth:`boxwood.RangeTree.count_boxes`; for a Dask DataFrame
        of boxes a Dask Series, partition by partition.

        {frame bounds}
        {frame by}
        """
        kw = {"inclusive": inclusive, "by": by}
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "count", kw)

    @document_bounds
    def sum_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """Weight sum of each box, as :meth:`boxwood.RangeTree.sum_boxes`; for a Dask
        DataFrame of boxes a Dask Series, partition by partition.

        {frame bounds}
        {frame by}
        """
        kw = {"inclusive": inclusive, "by": by}
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "sum", kw)

    @document_bounds
    def report_boxes(
        self,
        boxes: Any,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        inclusive: Inclusive = "both",
        ordered: bool = True,
        by: Hashable | list[Hashable] | None = None,
    ) -> Any:
        """One row per (box, point) match, as :meth:`boxwood.RangeTree.report_boxes`; for a
        Dask DataFrame of boxes a Dask DataFrame, one partition per partition of boxes.

        {frame bounds}
        {ordered}
        {frame by}
        """
        kw = {"inclusive": inclusive, "ordered": ordered, "by": by}
        return self._ask(boxes, (x_lo, x_hi, y_lo, y_hi), "report", kw)

    def _ask(self, boxes: Any, specs: Sequence[Any], op: str, kw: dict[str, Any]) -> Any:
        if not isinstance(boxes, dd.DataFrame):
            return broadcast_answer(self.tree, boxes, specs, op, kw)
        meta = broadcast_answer(self.tree, boxes._meta, specs, op, kw)  # types checked here
        tag = f"boxwood-{op}-{new_token()}"
        results = [
            self._client.submit(
                broadcast_answer, self.future, part, specs, op, kw, key=f"{tag}-{i}"
            )
            for i, part in enumerate(self._client.compute(boxes.to_delayed()))
        ]
        divisions = boxes.divisions if op != "report" else None
        return dd.from_delayed(results, meta=meta, divisions=divisions, verify_meta=False)


def broadcast(tree: RangeTree | GrowingSnapshot, client: Any = None) -> BroadcastTree:
    """Copy `tree` (a :class:`boxwood.RangeTree`, or a growing tree's
    :meth:`~boxwood.GrowingTree.snapshot`) to every worker of `client` (default: the current
    client). A snapshot's reports answer with the growing tree's row ids."""
    return BroadcastTree(tree, client_of(client))
