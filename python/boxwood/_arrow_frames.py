"""Arrow tables in and out: trees from ``pyarrow.Table`` or ``RecordBatch`` columns, boxes
given as a table's columns, answers as Arrow.

>>> import pyarrow as pa, boxwood
>>> trips = pa.table({"start": [0.0, 10.0, 10.0, 25.0], "minutes": [12, 5, 30, 8]})
>>> tree = boxwood.RangeTree.from_frame(trips, x="start", y="minutes")
>>> boxes = pa.table({"t0": [0, 10], "t1": [20, 40], "m0": [0, 0], "m1": [10, 60]})
>>> tree.count_boxes(boxes, x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1").to_pylist()
[1, 3]

An Arrow input gives an Arrow output, one entry a box in the boxes' row order (a table has
no index to label them by): counts and sums as a ``pyarrow.Array`` (``boxes.append_column(
"count", counts)`` puts them beside the boxes), reports, statistics and joins as a
``pyarrow.Table``. A report's ``box`` column is the box's row position in the boxes table.
Statistics of an empty box are null. Columns are read as :mod:`boxwood._arrow` reads
arrays: views of the buffers where the layout allows. Types map as in the pandas path
(``date32`` to ``datetime64[ms]``, timestamps with a time zone kept as instants in it,
``duration`` to ``timedelta64``, dictionary and string columns as keys). A null (or NaN)
in a named column raises naming the column and the row, unless ``on_missing="drop"``.
"""

from __future__ import annotations

import importlib
from collections.abc import Hashable
from typing import Any

import numpy as np

from . import _columnar
from ._arrow import arrow_missing, arrow_values, is_arrow_table, one_chunk
from ._frames import joined_names, require_names


def pyarrow() -> Any:
    """The pyarrow module (an Arrow table was passed, so it is installed)."""
    return importlib.import_module("pyarrow")


def require_table(frame: Any, what: str) -> None:
    if not is_arrow_table(frame):
        raise TypeError(
            f"{what} must be a pyarrow Table or RecordBatch, got {type(frame).__name__}"
        )


class ArrowReader:
    """How :mod:`boxwood._columnar` reads an Arrow table: columns as Arrow arrays (a
    ChunkedArray's chunks joined only when there are several), handed on as they are."""

    noun = "table"
    require = staticmethod(require_table)
    missing = staticmethod(arrow_missing)

    @staticmethod
    def names(frame: Any) -> list[str]:
        return list(frame.schema.names)

    @staticmethod
    def prepared(frame: Any, columns: dict[str, Hashable], what: str) -> Any:
        require_names(frame.schema.names, columns, what)
        return frame

    @staticmethod
    def rows(frame: Any) -> int:
        return int(frame.num_rows)

    @staticmethod
    def column(frame: Any, name: Hashable) -> Any:
        return one_chunk(frame.column(name))

    @staticmethod
    def take(values: Any, keep: np.ndarray) -> Any:
        return values.take(pyarrow().array(keep))

    @staticmethod
    def build_key(values: Any) -> Any:
        return values

    @staticmethod
    def query_key(values: Any) -> Any:
        return values

    @staticmethod
    def answers(name: str, values: np.ndarray) -> Any:
        return pyarrow().array(values)

    @staticmethod
    def nullable(name: str, values: np.ndarray, empty: np.ndarray, zone: str | None) -> Any:
        pa = pyarrow()
        array = pa.array(values, mask=empty)
        if zone is not None and values.dtype.kind == "M":
            array = array.cast(pa.timestamp(np.datetime_data(values.dtype)[0], tz=zone))
        return array

    @staticmethod
    def table(columns: dict[str, Any]) -> Any:
        return pyarrow().table(columns)


KIND = _columnar.ColumnarKind(ArrowReader)
frame_parts = KIND.frame_parts
point_columns = KIND.point_columns
box_bounds = KIND.box_bounds
box_keys = KIND.box_keys
count_boxes = KIND.count_boxes
sum_boxes = KIND.sum_boxes
report_boxes = KIND.report_boxes
stats_boxes = KIND.stats_boxes


# ---------------------------------------------------------------- joins


def _as_table(frame: Any) -> Any:
    pa = pyarrow()
    return pa.Table.from_batches([frame]) if isinstance(frame, pa.RecordBatch) else frame


class ArrowJoinSide:
    """What a join does with Arrow tables (``PandasJoinSide`` does it with pandas frames).

    The joined rows are a ``pyarrow.Table``: the points' columns then the boxes', each
    side's rows taken with ``Table.take``. A table has no index: ``keep_index=True``
    carries each side's row positions as a first column ``index`` (suffixed as any name
    on both sides), as ``DataFrame.reset_index`` carries a default index.
    """

    parts = staticmethod(frame_parts)
    bounds = staticmethod(box_bounds)
    keys = staticmethod(box_keys)

    @staticmethod
    def read(frame: Any, what: str) -> Any:
        require_table(frame, what)
        return frame

    rows = staticmethod(ArrowReader.rows)

    @staticmethod
    def drop(frame: Any, columns: list[Hashable]) -> Any:
        return _as_table(frame).drop_columns(columns)

    @staticmethod
    def sides(points: Any, boxes: Any, suffixes: Any, keep_index: bool) -> tuple[Any, Any]:
        pa = pyarrow()
        tables = []
        for frame, what in ((points, "points"), (boxes, "boxes")):
            table = _as_table(frame)
            if keep_index:
                _columnar.check_index_free(table.schema.names, what, "table")
                positions = pa.array(np.arange(table.num_rows, dtype=np.int64))
                table = table.add_column(0, "index", positions)
            tables.append(table)
        left, right = tables
        renames = joined_names(left.schema.names, right.schema.names, suffixes)
        return tuple(
            table.rename_columns([rename.get(c, c) for c in table.schema.names])
            for table, rename in zip(tables, renames)
        )

    @staticmethod
    def coordinate(frame: Any, column: Hashable) -> tuple[Any, np.ndarray]:
        values, missing = arrow_values(frame.column(column))
        return values, missing

    @staticmethod
    def joined(points: Any, boxes: Any, rows: np.ndarray, box: np.ndarray, start: int) -> Any:
        """Rows `rows` of the points beside rows `box` of the boxes (`start` is a pandas
        index's business: a table's rows carry no labels)."""
        pa = pyarrow()
        left = points.take(pa.array(rows))
        right = boxes.take(pa.array(box))
        return pa.Table.from_arrays(
            [*left.columns, *right.columns], names=[*left.schema.names, *right.schema.names]
        )
