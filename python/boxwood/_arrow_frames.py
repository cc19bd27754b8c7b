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
from collections.abc import Hashable, Sequence
from typing import Any, Callable

import numpy as np

from ._arrow import arrow_missing, arrow_values, is_arrow_table, one_chunk
from ._bounds import Inclusive
from ._fingerprint import columns_of
from ._frames import (
    MissingColumnError,
    _keyed,
    _per_box,
    check_on_missing,
    joined_names,
    kept_rows,
    key_roles,
    naming_columns,
    parts_of_columns,
    point_roles,
    stats_columns,
)
from ._keys import KeyDictionary
from ._parts import Provenance, TreeParts

_BOUND_ROLES = ("x_lo", "x_hi", "y_lo", "y_hi")


def pyarrow() -> Any:
    """The pyarrow module (an Arrow table was passed, so it is installed)."""
    return importlib.import_module("pyarrow")


def require_table(frame: Any, what: str) -> None:
    if not is_arrow_table(frame):
        raise TypeError(
            f"{what} must be a pyarrow Table or RecordBatch, got {type(frame).__name__}"
        )


def require_columns(table: Any, columns: dict[str, Hashable], what: str) -> None:
    """Every named column is in the table, or one error naming all missing ones."""
    names = table.schema.names
    missing = [(role, col) for role, col in columns.items() if col not in names]
    if missing:
        wanted = ", ".join(f"{role}={col!r}" for role, col in missing)
        available = ", ".join(repr(c) for c in names) or "none"
        raise MissingColumnError(f"{what} has no column for {wanted}; its columns are: {available}")


def _column(table: Any, name: Hashable) -> Any:
    """One column as an Array (a Table's chunks joined only when there are several)."""
    return one_chunk(table.column(name))


def _describe_missing(role: str, column: Hashable, missing: np.ndarray, what: str) -> str:
    first = int(np.flatnonzero(missing)[0])
    return (
        f"{role} column {column!r} has a missing value (null or NaN) at {what} {first}; "
        f"{int(missing.sum())} of {missing.size} {what}s are missing in it"
    )


def point_columns(
    table: Any,
    columns: dict[str, Hashable],
    on_missing: str,
    keys: dict[str, Hashable],
) -> tuple[dict[str, Any], np.ndarray | None]:
    """Each role's column as an Arrow array with missing rows refused or dropped, and the
    kept rows (int64 positions in `table`, or None when every row was kept)."""
    check_on_missing(on_missing)
    require_columns(table, {**columns, **keys}, "the points table")
    values = {role: _column(table, column) for role, column in {**columns, **keys}.items()}
    masks = [
        (role, column, arrow_missing(values[role])) for role, column in {**columns, **keys}.items()
    ]

    def describe(role: str, column: Hashable, missing: np.ndarray) -> str:
        return _describe_missing(role, column, missing, "row")

    keep = kept_rows(masks, table.num_rows, on_missing, describe)
    if keep is None:
        return values, None
    return {role: v.take(pyarrow().array(keep)) for role, v in values.items()}, keep


def frame_parts(
    frame: Any,
    x: Hashable,
    y: Hashable,
    weights: Hashable | None,
    *,
    layout: Any,
    on_missing: str,
    check_memory: bool = True,
    by: Hashable | list[Hashable] | None = None,
    coded_keys: tuple[np.ndarray, KeyDictionary] | None = None,
) -> TreeParts:
    """The parts of :meth:`RangeTree.from_frame`'s tree from an Arrow table's columns."""
    require_table(frame, "frame")
    columns = point_roles(x, y, weights)
    keys = key_roles(by)
    values, keep = point_columns(frame, columns, on_missing, keys)
    dropped = 0 if keep is None else frame.num_rows - keep.size
    source = Provenance(keep, dropped, columns_of(frame, x, y))
    return parts_of_columns(
        values,
        columns,
        keys,
        source,
        layout=layout,
        check_memory=check_memory,
        coded_keys=coded_keys,
    )


# ---------------------------------------------------------------- boxes given as columns


def box_bounds(boxes: Any, specs: Sequence[Any]) -> tuple[list[Any], dict[str, str]]:
    """The four bounds from a boxes table: column names, None (open) or constants, as for
    the pandas path (strings always name columns)."""
    require_table(boxes, "boxes")
    names = boxes.schema.names
    columns = {
        role: spec
        for role, spec in zip(_BOUND_ROLES, specs)
        if isinstance(spec, str) or (spec is not None and _is_name(names, spec))
    }
    require_columns(boxes, columns, "the boxes table")
    bounds = []
    for role, spec in zip(_BOUND_ROLES, specs):
        if role in columns:
            advice = "every box needs all four bounds (use ±inf for an open side)"
            bounds.append(_complete(boxes, f"{role} bound", spec, advice))
        elif spec is None:
            bounds.append(-np.inf if role.endswith("lo") else np.inf)
        else:
            bounds.append(spec)
    return bounds, {role: f"{role} column {column!r}" for role, column in columns.items()}


def _complete(boxes: Any, role: str, column: Hashable, advice: str) -> Any:
    """A boxes table's column, or the error naming its first box with a null (or NaN)."""
    array = _column(boxes, column)
    missing = arrow_missing(array)
    if missing.any():
        raise ValueError(f"{_describe_missing(role, column, missing, 'box')}; {advice}")
    return array


def _is_name(names: list[str], spec: Any) -> bool:
    try:
        return spec in names
    except TypeError:
        return False


def box_keys(boxes: Any, by: Hashable | list[Hashable] | None) -> Any:
    """The boxes' key columns for ``by=`` (a tuple for several), or None; a box with a
    missing key raises."""
    roles = key_roles(by)
    if not roles:
        return None
    require_columns(boxes, roles, "the boxes table")
    values = [
        _complete(boxes, f"{role} key", column, "every box needs its key")
        for role, column in roles.items()
    ]
    return tuple(values) if len(values) > 1 else values[0]


def count_boxes(
    count: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`count` of each box of a boxes table: an int64 ``pyarrow.Array``, one a box."""
    counts = _per_box_answers(count, boxes, specs, inclusive, by)
    return pyarrow().array(counts.astype(np.int64))


def sum_boxes(
    weight_sum: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`weight_sum` of each box of a boxes table: a ``pyarrow.Array`` (int64 or float64)."""
    return pyarrow().array(_per_box_answers(weight_sum, boxes, specs, inclusive, by))


def _per_box_answers(
    method: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None,
) -> np.ndarray:
    """`method` (a tree's count or sum) of every box of a boxes table, one answer a box."""
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    with naming_columns(names):
        answers = method(*bounds, inclusive=inclusive, **_keyed(keys))
    return _per_box(answers, boxes.num_rows)


def report_boxes(
    pairs: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    ordered: bool,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`pairs` of the boxes of a boxes table: a Table of ``box`` (the box's row position)
    and ``row`` (the point's), both int64."""
    bounds, names = box_bounds(boxes, specs)
    bounds = [np.broadcast_to(b, boxes.num_rows) if np.ndim(b) == 0 else b for b in bounds]
    keys = box_keys(boxes, by)
    with naming_columns(names):
        box, row = pairs(*bounds, inclusive=inclusive, ordered=ordered, **_keyed(keys))
    return pyarrow().table({"box": box, "row": row})


def stats_boxes(
    tree: Any,
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None,
    quantiles: Sequence[float],
    of: str,
    method: str,
) -> Any:
    """The pandas path's statistics table (``count``, ``sum`` and ``mean`` with weights,
    ``min``, ``max``, ``q0.5``, ...) as a ``pyarrow.Table``, an empty box's statistics
    null; a tz-aware axis's times in its zone."""
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    with naming_columns(names):
        columns = stats_columns(
            tree, bounds, keys, boxes.num_rows, inclusive, quantiles, of, method
        )
    empty = columns["count"] == 0
    zone = (tree._parts.x if of == "x" else tree._parts.y).tz
    pa = pyarrow()
    out = {}
    for name, values in columns.items():
        if name in ("count", "sum"):
            out[name] = pa.array(values)
            continue
        data = np.broadcast_to(np.ma.getdata(values), boxes.num_rows)
        array = pa.array(data, mask=empty)
        if zone is not None and data.dtype.kind == "M":
            array = array.cast(pa.timestamp(np.datetime_data(data.dtype)[0], tz=zone))
        out[name] = array
    return pa.table(out)


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

    require = staticmethod(require_table)
    parts = staticmethod(frame_parts)
    bounds = staticmethod(box_bounds)
    keys = staticmethod(box_keys)

    @staticmethod
    def rows(frame: Any) -> int:
        return int(frame.num_rows)

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
                if "index" in table.schema.names:
                    raise ValueError(
                        f"keep_index=True: the {what} table has a column 'index' already; rename it"
                    )
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
