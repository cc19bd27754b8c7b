"""Appended rows: from the caller's columns to a segment's, checked against the schema.

>>> import numpy as np
>>> from boxwood._growing._input import schema_of
>>> schema_of("datetime64[s]", "float32", weights="int64", by=None, layout="compact",
...           names=("start", "km", "fare")).x.kind
'datetime'
"""

from __future__ import annotations

import dataclasses
from collections.abc import Hashable
from typing import Any

import numpy as np

from .._columns import AxisInfo, coordinate_column, weight_column
from .._frame_kinds import frames_for
from .._frames import MissingColumnError, key_roles, point_roles
from .._keys import build_keys
from .._parts import Layout, check_layout
from ._segments import Columns, Schema

_WEIGHT_KINDS = {"f": "float64", "i": "int64", "u": "int64"}


def axis_of(dtype: Any, name: str) -> AxisInfo:
    """The axis of a column of `dtype` (a numpy dtype, its name, or a pandas tz-aware
    datetime dtype such as ``"datetime64[ns, UTC]"``)."""
    tz = getattr(dtype, "tz", None)
    if tz is None and isinstance(dtype, str) and dtype.startswith("datetime64[") and "," in dtype:
        from .._frames import pandas

        dtype = pandas().DatetimeTZDtype.construct_from_string(dtype)
        tz = dtype.tz
    if tz is not None:
        unit = getattr(dtype, "unit", "ns")
        return AxisInfo(name, np.dtype(f"datetime64[{unit}]"), "datetime", str(tz))
    try:
        np_dtype = np.dtype(dtype)
    except TypeError:
        raise TypeError(f"{name} dtype {dtype!r} is not a numpy dtype") from None
    _, axis = coordinate_column(np.zeros(0, dtype=np_dtype), name)
    return axis


def schema_of(
    x: Any,
    y: Any,
    *,
    weights: Any,
    by: Hashable | list[Hashable] | None,
    layout: Layout,
    names: tuple[Hashable, Hashable, Hashable],
) -> Schema:
    check_layout(layout)
    weights_kind = None
    if weights is not None:
        kind = np.dtype(weights).kind
        if kind not in _WEIGHT_KINDS:
            raise TypeError(f"weights dtype must be a float or integer dtype, got {weights!r}")
        weights_kind = _WEIGHT_KINDS[kind]
    key_names = None
    if by is not None:
        key_names = tuple(str(b) for b in (by if isinstance(by, list) else [by]))
        if not key_names:
            raise ValueError("by= needs at least one key column")
    return Schema(
        axis_of(x, str(names[0])),
        axis_of(y, str(names[1])),
        weights_kind,
        key_names,
        layout,
        weights_name=str(names[2]),
    )


def from_frame(frame: Any, schema: Schema, on_missing: str) -> tuple[Any, Any, Any, Any]:
    """``(x, y, weights, by)`` of an appended frame (pandas DataFrame, Arrow Table or
    RecordBatch, polars DataFrame or LazyFrame), by the schema's column names; read as
    ``RangeTree.from_frame`` reads a frame of its kind, so a missing value raises naming its
    column and row, or its row is dropped."""
    weights = None if schema.weights is None else schema.weights_name
    columns = point_roles(schema.x.name, schema.y.name, weights)
    keys = key_roles(None if schema.key_names is None else list(schema.key_names))
    try:
        values, _ = frames_for(frame).point_columns(frame, columns, on_missing, keys)
    except MissingColumnError as error:
        raise MissingColumnError(
            f"{error.args[0]}; a growing tree takes the columns it was named with "
            f"({', '.join(map(repr, [*columns.values(), *keys.values()]))})"
        ) from None
    by = None
    if keys:
        cols = tuple(values[role] for role in keys)
        by = cols if len(cols) > 1 else cols[0]
    return values["x"], values["y"], values.get("weights"), by


def appended_columns(
    x: Any, y: Any, weights: Any, by: Any, schema: Schema, first_id: int
) -> tuple[Columns, Schema]:
    """The columns of appended rows (ids from `first_id`), and the schema, with the key
    kinds fixed once the first keys arrive."""
    xs = _coordinates(x, schema.x, "x")
    ys = _coordinates(y, schema.y, "y")
    n = xs.shape[0]
    if ys.shape[0] != n:
        raise ValueError(f"y has {ys.shape[0]} rows but x has {n}")
    ws = _weights(weights, schema, n)
    keys, schema = _keys(by, schema, n)
    ids = np.arange(first_id, first_id + n, dtype=np.int64)
    return Columns(xs, ys, ws, keys, ids), schema


def _coordinates(values: Any, axis: AxisInfo, name: str) -> np.ndarray:
    engine, got = coordinate_column(values, name)
    if got.kind != axis.kind or (axis.is_time and got.dtype != axis.dtype):
        raise TypeError(
            f"{name} has dtype {got.dtype} but the growing tree's {name} axis is {axis.dtype}; "
            f"cast the appended values to {axis.dtype}"
        )
    if (got.tz is None) != (axis.tz is None):
        want = "tz-aware" if axis.tz is not None else "naive"
        raise TypeError(f"{name} must hold {want} datetimes, as the growing tree's {name} axis")
    return engine


def _weights(weights: Any, schema: Schema, n: int) -> np.ndarray | None:
    if schema.weights is None:
        if weights is not None:
            raise ValueError("this growing tree was made without weights; append none")
        return None
    if weights is None:
        raise ValueError(f"this growing tree has {schema.weights} weights: pass weights=")
    ws = weight_column(weights, n)
    if str(ws.dtype) != schema.weights:
        raise TypeError(
            f"weights have dtype {ws.dtype} but the growing tree's weights are {schema.weights}"
        )
    return ws


def _keys(by: Any, schema: Schema, n: int) -> tuple[tuple[np.ndarray, ...] | None, Schema]:
    if schema.key_names is None:
        if by is not None:
            raise ValueError("this growing tree was made without keys: by= needs one made with by=")
        return None, schema
    if by is None:
        raise ValueError(
            f"this growing tree has keys ({', '.join(schema.key_names)}): pass by= for the rows"
        )
    m = len(schema.key_names)
    if m > 1 and (not isinstance(by, tuple) or len(by) != m):
        raise ValueError(f"by= needs a tuple of {m} key columns, one per key column")
    codes, dictionary = build_keys(by, n, schema.key_names)
    kinds = tuple(c.kind for c in dictionary.columns)
    if schema.key_kinds is None:
        schema = dataclasses.replace(schema, key_kinds=kinds)
    elif kinds != schema.key_kinds and n:
        raise TypeError(
            f"key columns of kinds {', '.join(kinds)} cannot join a growing tree whose keys "
            f"are of kinds {', '.join(schema.key_kinds)}"
        )
    values = tuple(v[codes.astype(np.intp)] for v in dictionary.values())
    return values, schema
