"""``DataFrame.boxwood``: a frame of boxes asks a tree directly, a frame of points builds one.

>>> import pandas as pd, boxwood
>>> trips = pd.DataFrame({"start": [0.0, 10.0, 25.0], "minutes": [12, 5, 8]})
>>> tree = trips.boxwood.tree(x="start", y="minutes")
>>> boxes = pd.DataFrame({"x_lo": [0, 10], "x_hi": [20, 30], "y_lo": [0, 0], "y_hi": [10, 10]})
>>> boxes.boxwood.count(tree)
0    1
1    2
Name: count, dtype: int64

The accessor is registered through ``pandas.api.extensions`` when both boxwood and pandas
are imported, in either order, and ``import boxwood`` never imports pandas itself: pandas
takes several times as long to import as boxwood, and is an optional extra. polars frames
(``DataFrame`` and ``LazyFrame``) get the same methods as their ``boxwood`` namespace, in
the same way: registered once both boxwood and polars are imported, in either order, and
answering in polars (each method calls a tree's, which answers in the frame's kind).
"""

from __future__ import annotations

import importlib.abc
import sys
import warnings
from collections.abc import Hashable, Iterator
from typing import TYPE_CHECKING, Any, Literal

from ._bounds import Inclusive, document_bounds

if TYPE_CHECKING:
    from ._tree import RangeTree

NAME = "boxwood"


class BoxwoodAccessor:
    """Methods of ``DataFrame.boxwood`` (pandas and polars; polars' ``LazyFrame.boxwood``
    too). Bounds, as in :meth:`RangeTree.count_boxes`, are column labels of this frame,
    ``None`` for an open side, or constants. Answers are as the tree's ``*_boxes`` calls
    give them for this frame's kind: on a pandas frame's index, in polars for a polars
    frame."""

    def __init__(self, frame: Any) -> None:
        self._frame = frame

    @document_bounds
    def count(
        self,
        tree: RangeTree,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """Points of `tree` in each row (a box): an int64 Series (on a pandas frame's index).

        {frame bounds}
        {frame by}
        """
        return tree.count_boxes(self._frame, x_lo, x_hi, y_lo, y_hi, by=by, inclusive=inclusive)

    @document_bounds
    def sum(
        self,
        tree: RangeTree,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """Weight sum of `tree`'s points in each row (a box): a Series (on a pandas frame's
        index).

        {frame bounds}
        {frame by}
        """
        return tree.sum_boxes(self._frame, x_lo, x_hi, y_lo, y_hi, by=by, inclusive=inclusive)

    @document_bounds
    def stats(
        self,
        tree: RangeTree,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        quantiles: Any = (0.5, 0.95, 0.99),
        of: Literal["x", "y"] = "y",
        method: str = "linear",
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
    ) -> Any:
        """How `tree`'s points in each row (a box) are spread, as
        :meth:`RangeTree.stats_boxes`: count, sum and mean, min, max and quantiles.

        {frame bounds}
        {frame by}
        """
        return tree.stats_boxes(
            self._frame,
            x_lo,
            x_hi,
            y_lo,
            y_hi,
            quantiles=quantiles,
            of=of,
            method=method,
            by=by,
            inclusive=inclusive,
        )

    @document_bounds
    def report(
        self,
        tree: RangeTree,
        x_lo: Any = "x_lo",
        x_hi: Any = "x_hi",
        y_lo: Any = "y_lo",
        y_hi: Any = "y_hi",
        *,
        by: Hashable | list[Hashable] | None = None,
        inclusive: Inclusive = "both",
        ordered: bool = True,
    ) -> Any:
        """``(box label, point row)`` pairs, as :meth:`RangeTree.report_boxes`.

        {frame bounds}
        {frame by}
        {ordered}
        """
        return tree.report_boxes(
            self._frame, x_lo, x_hi, y_lo, y_hi, by=by, inclusive=inclusive, ordered=ordered
        )

    def join(self, points: Any, **options: Any) -> Any:
        """:func:`boxwood.box_join` of `points` with this frame as the boxes."""
        from ._join import box_join

        return box_join(points, self._frame, **options)

    def join_chunks(self, points: Any, **options: Any) -> Iterator[Any]:
        """:func:`boxwood.box_join_chunks` of `points` with this frame as the boxes."""
        from ._join import box_join_chunks

        return box_join_chunks(points, self._frame, **options)

    def tree(
        self,
        x: Hashable,
        y: Hashable,
        weights: Hashable | None = None,
        *,
        by: Hashable | list[Hashable] | None = None,
        layout: Any = "compact",
        on_missing: Any = "raise",
        check_memory: bool = True,
    ) -> RangeTree:
        """A tree of this frame's points, as :meth:`RangeTree.from_frame`."""
        from ._tree import RangeTree

        return RangeTree.from_frame(
            self._frame,
            x,
            y,
            weights,
            by=by,
            layout=layout,
            on_missing=on_missing,
            check_memory=check_memory,
        )


def register(pandas: Any) -> None:
    """Register the accessor with this pandas module (once)."""
    if getattr(pandas.DataFrame, NAME, None) is not None:
        return
    pandas.api.extensions.register_dataframe_accessor(NAME)(BoxwoodAccessor)


def register_polars(polars: Any) -> None:
    """Register the same methods as the ``boxwood`` namespace of this polars module's
    DataFrame and LazyFrame (once): every call they make answers in the frame's own kind."""
    for frame, register_namespace in (
        (polars.DataFrame, polars.api.register_dataframe_namespace),
        (polars.LazyFrame, polars.api.register_lazyframe_namespace),
    ):
        if getattr(frame, NAME, None) is None:
            register_namespace(NAME)(BoxwoodAccessor)


#: The libraries whose frames get ``.boxwood``: each module's name, how to register with it,
#: and a name it defines only once its ``__init__`` has run (a module still importing is
#: left to the import hook).
_LIBRARIES = (("pandas", register, "DataFrame"), ("polars", register_polars, "LazyFrame"))


class _RegisterAfterImport(importlib.abc.MetaPathFinder):
    """Finds one library (pandas, polars) as the other finders would, and registers the
    accessor right after the library has run its own ``__init__``: Python has no other
    after-import hook."""

    def __init__(self, library: str, registration: Any) -> None:
        self.library = library
        self.registration = registration

    def find_spec(self, fullname: str, path: Any = None, target: Any = None) -> Any:
        if fullname != self.library:
            return None
        spec = None
        for finder in sys.meta_path:
            find = getattr(finder, "find_spec", None)
            if finder is not self and find is not None:
                spec = find(fullname, path, target)
                if spec is not None:
                    break
        loader = getattr(spec, "loader", None)
        if loader is not None and hasattr(loader, "exec_module"):
            loader.exec_module = self._then_register(loader.exec_module)
        return spec

    def _then_register(self, exec_module: Any) -> Any:
        def exec_then_register(module: Any) -> None:
            exec_module(module)
            if self in sys.meta_path:
                sys.meta_path.remove(self)
            try:
                self.registration(module)
            except Exception as exc:  # the accessor is optional; the library must still import
                warnings.warn(
                    f"boxwood could not register {self.library}'s .{NAME}: {exc}", stacklevel=2
                )

        return exec_then_register


def install() -> None:
    """For pandas and polars each: register now if it is already imported, else as soon as
    it is imported."""
    for library, registration, defined_last in _LIBRARIES:
        module = sys.modules.get(library)
        if module is not None and hasattr(module, defined_last):
            registration(module)
        elif not any(
            isinstance(f, _RegisterAfterImport) and f.library == library for f in sys.meta_path
        ):
            sys.meta_path.insert(0, _RegisterAfterImport(library, registration))
