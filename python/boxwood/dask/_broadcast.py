"""`BroadcastTree`: one small tree copied to every worker, answering Dask DataFrames of boxes.

See :func:`broadcast` and the example in :mod:`boxwood.dask`.
"""

from __future__ import annotations

from collections.abc import Hashable, Sequence
from typing import Any

import dask.dataframe as dd

from .._bounds import Inclusive, document_bounds
from .._tree import RangeTree
from ._common import client_of, new_token
from ._tasks import broadcast_answer


class BroadcastTree:
    """One tree copied to every worker, answering Dask DataFrames of boxes partition by
    partition (a pandas DataFrame of boxes is answered here, by the tree itself). A keyed
    tree's boxes name their key columns with ``by=``, as for the tree's own methods."""

    def __init__(self, tree: RangeTree, client: Any) -> None:
        if not isinstance(tree, RangeTree):
            raise TypeError(f"tree must be a boxwood.RangeTree, got {type(tree).__name__}")
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


def broadcast(tree: RangeTree, client: Any = None) -> BroadcastTree:
    """Copy `tree` to every worker of `client` (default: the current client)."""
    return BroadcastTree(tree, client_of(client))
