"""polars in and out: trees from ``polars.DataFrame`` or ``LazyFrame`` columns, boxes given as
a frame's columns, answers as polars.

>>> import polars as pl, boxwood
>>> trips = pl.DataFrame({"start": [0.0, 10.0, 10.0, 25.0], "minutes": [12, 5, 30, 8]})
>>> tree = boxwood.RangeTree.from_frame(trips, x="start", y="minutes")
>>> boxes = pl.DataFrame({"t0": [0, 10], "t1": [20, 40], "m0": [0, 0], "m1": [10, 60]})
>>> tree.count_boxes(boxes, x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1").to_list()
[1, 3]

A polars input gives a polars output, one entry a box in the boxes' row order (a polars
frame has no index to label them by): counts and sums as a ``polars.Series`` named
``count`` and ``sum`` (``boxes.with_columns(counts)`` puts them beside the boxes), reports,
statistics and joins as a ``polars.DataFrame``. A report's ``box`` column is the box's row
position. A LazyFrame is collected once, only the columns a call names (a join collects
every column, since it carries them all); the answers are eager. Columns are read as
:mod:`boxwood._polars` reads Series: views of polars' buffers where the layout allows.
``Datetime`` with a time zone is compared as instants and comes back in its zone,
``Duration`` is ``timedelta64``, ``Date`` is ``datetime64[D]``; ``String``, ``Categorical``
and ``Enum`` key columns are coded by polars' own hashing. A null (or NaN) in a named
column raises naming the column and the row, unless ``on_missing="drop"``. Nothing here
imports pandas or pyarrow.
"""

from __future__ import annotations

import importlib
from collections.abc import Hashable
from typing import Any

import numpy as np

from . import _columnar
from ._frames import joined_names, require_names
from ._keys import CodedColumn
from ._polars import is_polars_frame, series_missing, series_values


def polars() -> Any:
    """The polars module (a polars frame was passed, so it is installed)."""
    return importlib.import_module("polars")


def require_frame(frame: Any, what: str) -> None:
    if not is_polars_frame(frame):
        raise TypeError(
            f"{what} must be a polars DataFrame or LazyFrame, got {type(frame).__name__}"
        )


def read(frame: Any, what: str) -> Any:
    """A polars frame as a DataFrame: a LazyFrame collected (all its columns)."""
    require_frame(frame, what)
    return frame.collect() if isinstance(frame, polars().LazyFrame) else frame


def key_column(series: Any) -> Any:
    """A key column as the key code reads it: strings and categoricals coded by polars
    (distinct values sorted, each row's position among them), anything else as numpy (a
    zoned ``Datetime`` as its UTC instants, as the pandas path stores zoned keys)."""
    pl = polars()
    if series.dtype == pl.String or isinstance(series.dtype, (pl.Categorical, pl.Enum)):
        text = series.cast(pl.String)
        levels = text.unique().sort()
        codes = text.replace_strict(
            levels, pl.int_range(len(levels), eager=True), return_dtype=pl.UInt32
        )
        return CodedColumn(codes.to_numpy(), levels.to_numpy())
    return series.to_numpy()


def query_keys(series: Any) -> np.ndarray:
    """Boxes' keys as numpy: categoricals as their strings, zoned times as UTC instants."""
    pl = polars()
    if isinstance(series.dtype, (pl.Categorical, pl.Enum)):
        series = series.cast(pl.String)
    return series.to_numpy()


class PolarsReader:
    """How :mod:`boxwood._columnar` reads a polars frame: columns as polars Series (read as
    numpy by the column and bound code), a LazyFrame collected with the columns a call
    names."""

    noun = "frame"
    require = staticmethod(require_frame)
    missing = staticmethod(series_missing)
    build_key = staticmethod(key_column)
    query_key = staticmethod(query_keys)

    @staticmethod
    def names(frame: Any) -> list[str]:
        if isinstance(frame, polars().LazyFrame):
            return frame.collect_schema().names()
        return list(frame.columns)

    @staticmethod
    def prepared(frame: Any, columns: dict[str, Hashable], what: str) -> Any:
        require_names(PolarsReader.names(frame), columns, what)
        if isinstance(frame, polars().LazyFrame):
            # With no column named (constant bounds) one column still gives the row count.
            named = list(dict.fromkeys(columns.values())) or PolarsReader.names(frame)[:1]
            return frame.select(named).collect()
        return frame

    @staticmethod
    def rows(frame: Any) -> int:
        return int(frame.height)

    @staticmethod
    def column(frame: Any, name: Hashable) -> Any:
        return frame.get_column(name)

    @staticmethod
    def take(values: Any, keep: np.ndarray) -> Any:
        return values.gather(keep)

    @staticmethod
    def answers(name: str, values: np.ndarray) -> Any:
        return polars().Series(name, values)

    @staticmethod
    def nullable(name: str, values: np.ndarray, empty: np.ndarray, zone: str | None) -> Any:
        series = polars().Series(name, values).scatter(np.flatnonzero(empty), None)
        if zone is not None and values.dtype.kind == "M":
            series = series.dt.replace_time_zone("UTC").dt.convert_time_zone(zone)
        return series

    @staticmethod
    def table(columns: dict[str, Any]) -> Any:
        return polars().DataFrame(columns)


KIND = _columnar.ColumnarKind(PolarsReader)
frame_parts = KIND.frame_parts
point_columns = KIND.point_columns
box_bounds = KIND.box_bounds
box_keys = KIND.box_keys
count_boxes = KIND.count_boxes
sum_boxes = KIND.sum_boxes
report_boxes = KIND.report_boxes
stats_boxes = KIND.stats_boxes


# ---------------------------------------------------------------- joins


class PolarsJoinSide:
    """What a join does with polars frames (``PandasJoinSide`` does it with pandas frames).

    The joined rows are a ``polars.DataFrame``: the points' columns then the boxes', each
    side's rows gathered by polars, dtypes kept. A LazyFrame is collected first. A polars
    frame has no index: ``keep_index=True`` carries each side's row positions as a first
    Int64 column ``index`` (suffixed as any name on both sides).
    """

    read = staticmethod(read)
    parts = staticmethod(frame_parts)
    bounds = staticmethod(box_bounds)
    keys = staticmethod(box_keys)

    rows = staticmethod(PolarsReader.rows)

    @staticmethod
    def drop(frame: Any, columns: list[Hashable]) -> Any:
        return frame.drop(columns)

    @staticmethod
    def sides(points: Any, boxes: Any, suffixes: Any, keep_index: bool) -> tuple[Any, Any]:
        pl = polars()
        frames = []
        for frame, what in ((points, "points"), (boxes, "boxes")):
            if keep_index:
                _columnar.check_index_free(frame.columns, what, "frame")
                positions = pl.Series("index", np.arange(frame.height, dtype=np.int64))
                frame = pl.concat([positions.to_frame(), frame], how="horizontal")
            frames.append(frame)
        left, right = frames
        renames = joined_names(list(left.columns), list(right.columns), suffixes)
        return tuple(frame.rename(rename) for frame, rename in zip(frames, renames))

    @staticmethod
    def coordinate(frame: Any, column: Hashable) -> tuple[Any, np.ndarray]:
        return series_values(frame.get_column(column))

    @staticmethod
    def joined(points: Any, boxes: Any, rows: np.ndarray, box: np.ndarray, start: int) -> Any:
        """Rows `rows` of the points beside rows `box` of the boxes (`start` is a pandas
        index's business: a polars frame's rows carry no labels)."""
        return polars().concat([points[rows], boxes[box]], how="horizontal")
