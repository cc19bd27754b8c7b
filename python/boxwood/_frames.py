"""pandas in and out: trees from DataFrame columns, and boxes given as DataFrame columns.

>>> import pandas as pd, boxwood
>>> trips = pd.DataFrame({"start": [0.0, 10.0, 10.0, 25.0], "minutes": [12, 5, 30, 8]})
>>> tree = boxwood.RangeTree.from_frame(trips, x="start", y="minutes")
>>> boxes = pd.DataFrame({"t0": [0, 10], "t1": [20, 40], "m0": [0, 0], "m1": [10, 60]},
...                      index=["early short", "late any"])
>>> tree.count_boxes(boxes, x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1")
early short    1
late any       3
Name: count, dtype: int64

pandas is an optional dependency: nothing here imports it until a function is called.
A column can be any numeric, datetime64 (naive or tz-aware), timedelta64, nullable
(``Int64``, ``Float64``) or Arrow-backed (``int64[pyarrow]``, ``timestamp[ns][pyarrow]``, ...)
dtype. Missing values (NaN, NaT, NA) are refused, or dropped with ``on_missing="drop"``.
"""

from __future__ import annotations

import contextlib
import importlib
import os
import re
import sys
import warnings
from collections.abc import Hashable, Iterator, Sequence
from typing import Any, Callable

import numpy as np

from ._bounds import Inclusive
from ._fingerprint import columns_of
from ._keys import KeyDictionary
from ._parts import Provenance, TreeParts, build_parts


class MissingColumnError(KeyError):
    """A column named in a call is not in the frame; the message lists the frame's columns."""

    def __str__(self) -> str:  # KeyError quotes its message; this one is a sentence
        return str(self.args[0]) if self.args else ""


class MissingValuesDropped(UserWarning):
    """``on_missing="drop"`` dropped rows with NaN, NaT or NA coordinates or weights."""


ON_MISSING = ("raise", "drop")

_PACKAGE_DIR = os.path.dirname(os.path.abspath(__file__)) + os.sep


def warn_at_caller(message: str, category: type[Warning]) -> None:
    """``warnings.warn`` pointed at the first line outside boxwood.

    Counting frames by hand breaks whenever a call path gains a layer (an accessor, a join
    wrapping from_frame), and a level past the top of the stack is reported at ``sys:1``,
    where the default filter shows only the first of several warnings.
    """
    frame = sys._getframe(1)
    level = 1
    while frame.f_back is not None and frame.f_code.co_filename.startswith(_PACKAGE_DIR):
        frame = frame.f_back
        level += 1
    warnings.warn(message, category, stacklevel=level + 1)


def pandas() -> Any:
    """The pandas module, or an ImportError that says how to get it.

    Imported by name so that boxwood keeps working without pandas (typed as Any: pandas
    ships no type information of its own).
    """
    try:
        return importlib.import_module("pandas")
    except ImportError:
        raise ImportError(
            "this part of boxwood needs pandas; install it with pip install 'boxwood[pandas]'"
        ) from None


def require_frame(frame: Any, what: str) -> None:
    pd = pandas()
    if not isinstance(frame, pd.DataFrame):
        raise TypeError(f"{what} must be a pandas DataFrame, got {type(frame).__name__}")


def require_columns(frame: Any, columns: dict[str, Hashable], what: str) -> None:
    """Every named column is in the frame, or one error naming all missing ones."""
    require_names(list(frame.columns), columns, what)


def require_names(names: Sequence[Hashable], columns: dict[str, Hashable], what: str) -> None:
    """Every column of `columns` (by role) is among a frame's column `names`, or one error
    naming all missing ones: every frame kind's check."""
    missing = [(role, col) for role, col in columns.items() if col not in names]
    if missing:
        wanted = ", ".join(f"{role}={col!r}" for role, col in missing)
        available = ", ".join(repr(c) for c in names) or "none"
        raise MissingColumnError(f"{what} has no column for {wanted}; its columns are: {available}")


def _na_fill(dtype: np.dtype) -> Any:
    """A placeholder for missing values in a numpy array of `dtype` (the mask says which)."""
    if dtype.kind == "f":
        return np.nan
    if dtype.kind in "Mm":
        return dtype.type("NaT")
    return dtype.type(0)


def column_values(series: Any) -> tuple[Any, np.ndarray]:
    """``(values, missing)``: values the column code reads, and a mask of missing rows.

    The values are a numpy array, or a numpy-backed tz-aware Series (so the axis keeps its
    time zone). Nullable and Arrow-backed columns become their numpy dtype; rows marked in
    the mask hold an arbitrary placeholder.
    """
    pd = pandas()
    missing = np.array(series.isna(), dtype=bool)
    dtype = series.dtype
    arrow_type = getattr(dtype, "pyarrow_dtype", None)
    if arrow_type is not None and getattr(arrow_type, "tz", None) is not None:
        series = series.astype(pd.DatetimeTZDtype(unit=arrow_type.unit, tz=arrow_type.tz))
        dtype = series.dtype
    if isinstance(dtype, pd.DatetimeTZDtype):
        return series, missing
    numpy_dtype = getattr(dtype, "numpy_dtype", None)
    if isinstance(dtype, np.dtype):
        values = series.to_numpy()
    elif isinstance(numpy_dtype, np.dtype) and numpy_dtype.kind in "iufMmb":
        values = series.to_numpy(dtype=numpy_dtype, na_value=_na_fill(numpy_dtype))
    else:  # categorical, string, object: the column code says what is wrong with them
        values = series.to_numpy()
    if values.dtype.kind == "f":
        missing |= np.isnan(values)  # NaN that pandas does not count as NA (Arrow, Float64)
    return values, missing


def row_label(label: Any) -> str:
    """An index label as a message shows it: numpy scalars as the Python value they hold
    (``45``, not ``np.int64(45)``)."""
    return repr(label.item() if isinstance(label, np.generic) else label)


def _describe_missing(frame: Any, role: str, column: Hashable, missing: np.ndarray) -> str:
    first = int(np.flatnonzero(missing)[0])
    return (
        f"{role} column {column!r} has a missing value (NaN, NaT or NA) at row "
        f"{row_label(frame.index[first])} (position {first}); {int(missing.sum())} of "
        f"{missing.size} rows are missing in it"
    )


def _take(values: Any, keep: np.ndarray | None) -> Any:
    if keep is None:
        return values
    if isinstance(values, np.ndarray):
        return values[keep]
    return values.iloc[keep]


def key_roles(by: Hashable | list[Hashable] | None) -> dict[str, Hashable]:
    """The key columns of ``by=`` (one label, or a list of labels) by role: ``by``, or
    ``by[0]``, ``by[1]``, ... for several."""
    if by is None:
        return {}
    if isinstance(by, list):
        if not by:
            raise ValueError("by= needs at least one key column")
        return {f"by[{i}]": column for i, column in enumerate(by)}
    return {"by": by}


def point_columns(
    frame: Any,
    columns: dict[str, Hashable],
    on_missing: str,
    keys: dict[str, Hashable] | None = None,
) -> tuple[dict[str, Any], np.ndarray | None]:
    """Each role's column values with missing rows refused or dropped, and the kept rows.

    The kept rows are positions in `frame` (int64), or None when every row was kept. Key
    columns (`keys`, by role) come back as the frame's own Series (their type, categories
    and time zone are the key dictionary's business), missing rows refused or dropped with
    the others'.
    """
    check_on_missing(on_missing)
    keys = keys or {}
    require_columns(frame, {**columns, **keys}, "the points frame")
    values: dict[str, Any] = {}
    masks = []
    for role, column in {**columns, **keys}.items():
        if role in keys:
            values[role] = frame[column]
            missing = np.asarray(values[role].isna(), dtype=bool)
        else:
            values[role], missing = column_values(frame[column])
        masks.append((role, column, missing))

    def describe(role: str, column: Hashable, missing: np.ndarray) -> str:
        return _describe_missing(frame, role, column, missing)

    keep = kept_rows(masks, len(frame), on_missing, describe)
    if keep is None:
        return values, None
    return {role: _take(v, keep) for role, v in values.items()}, keep


def check_on_missing(on_missing: Any) -> None:
    if on_missing not in ON_MISSING:
        raise ValueError(f"on_missing must be 'raise' or 'drop', got {on_missing!r}")


def kept_rows(
    masks: list[tuple[str, Hashable, np.ndarray]],
    n: int,
    on_missing: str,
    describe: Callable[[str, Hashable, np.ndarray], str],
) -> np.ndarray | None:
    """The rows to keep of `n` given each role's ``(role, column, missing mask)``: None when
    none is missing; else a ``ValueError`` (`describe` words where the first missing value
    is) or, with ``on_missing="drop"``, the kept rows' positions (int64) and a warning."""
    any_missing = np.zeros(n, dtype=bool)
    per_role: list[str] = []
    for role, column, missing in masks:
        if missing.any():
            if on_missing == "raise":
                raise ValueError(
                    describe(role, column, missing)
                    + "; drop those rows first or pass on_missing='drop'"
                )
            per_role.append(f"{role} {column!r}: {int(missing.sum())}")
            any_missing |= missing
    if not any_missing.any():
        return None
    warn_at_caller(
        f"dropped {int(any_missing.sum())} of {n} rows with missing values ({'; '.join(per_role)})",
        MissingValuesDropped,
    )
    return np.flatnonzero(~any_missing).astype(np.int64)


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
    """The parts of :meth:`RangeTree.from_frame`'s tree: axes named after their columns,
    and the kept rows' positions in `frame` when rows were dropped. `coded_keys` (codes
    one a row, and their dictionary) key it with a dictionary made elsewhere, a sharded
    tree's shared one."""
    require_frame(frame, "frame")
    columns = point_roles(x, y, weights)
    keys = key_roles(by)
    values, keep = point_columns(frame, columns, on_missing, keys)
    source = Provenance(
        keep, 0 if keep is None else len(frame) - keep.size, columns_of(frame, x, y)
    )
    return parts_of_columns(
        values,
        columns,
        keys,
        source,
        layout=layout,
        check_memory=check_memory,
        coded_keys=coded_keys,
    )


def point_roles(x: Hashable, y: Hashable, weights: Hashable | None) -> dict[str, Hashable]:
    """The points' columns by role: ``x``, ``y`` and ``weights`` when there are weights."""
    return {"x": x, "y": y} if weights is None else {"x": x, "y": y, "weights": weights}


def parts_of_columns(
    values: dict[str, Any],
    columns: dict[str, Hashable],
    keys: dict[str, Hashable],
    provenance: Provenance,
    *,
    layout: Any,
    check_memory: bool,
    coded_keys: tuple[np.ndarray, KeyDictionary] | None,
) -> TreeParts:
    """The tree of every frame kind's columns (`values` by role, the rows kept), its axes
    named after the columns and errors naming them."""
    key_values = tuple(values[role] for role in keys)
    with naming_columns({role: f"{role} column {column!r}" for role, column in columns.items()}):
        return build_parts(
            values["x"],
            values["y"],
            values.get("weights"),
            layout=layout,
            check_memory=check_memory,
            names=(columns["x"], columns["y"]),
            provenance=provenance,
            by=None if not keys else (key_values if len(keys) > 1 else key_values[0]),
            by_names=tuple(str(c) for c in keys.values()) or None,
            coded_keys=coded_keys,
        )


@contextlib.contextmanager
def naming_columns(names: dict[str, str]) -> Iterator[None]:
    """Errors from the column and bound code, which name the argument ("x contains NaN",
    "axis x is tz-aware (UTC) but x_lo is naive"), reworded to name the frame's column."""
    try:
        yield
    except (TypeError, ValueError) as exc:
        message = str(exc)
        pattern = "|".join(re.escape(role) for role in sorted(names, key=len, reverse=True))
        # The first argument named is the one at fault ("y has 9 rows but x has 10").
        found = re.search(rf"(?<![\w'])({pattern})(?![\w'])", message)
        if found is None:
            raise
        role = found.group(1)
        named = message[: found.start()] + names[role] + message[found.end() :]
        raise type(exc)(named) from None


def joined_names(
    left: list[Hashable], right: list[Hashable], suffixes: Any
) -> tuple[dict[Hashable, Hashable], dict[Hashable, Hashable]]:
    """How a join renames the points' (`left`) and the boxes' (`right`) columns: a name on
    both sides gets ``suffixes[0]`` on the left and ``suffixes[1]`` on the right (None
    keeps it); a result with a name twice is refused. Every frame kind's join uses it."""
    if not (isinstance(suffixes, (tuple, list)) and len(suffixes) == 2):
        raise ValueError(f"suffixes must be a pair such as ('_point', '_box'), got {suffixes!r}")
    clash = set(left) & set(right)
    renames = tuple({c: _suffixed(c, suffix) for c in clash} for suffix in suffixes)
    names = [renames[0].get(c, c) for c in left] + [renames[1].get(c, c) for c in right]
    repeated = sorted({repr(c) for c in names if names.count(c) > 1})
    if repeated:
        raise ValueError(
            f"the joined frame would have repeated columns {', '.join(repeated)}; "
            f"choose other suffixes than {tuple(suffixes)!r}"
        )
    return renames[0], renames[1]


def _suffixed(column: Hashable, suffix: str | None) -> Hashable:
    return column if suffix is None else f"{column}{suffix}"


# ---------------------------------------------------------------- boxes given as columns

_BOUND_ROLES = ("x_lo", "x_hi", "y_lo", "y_hi")


def box_bounds(boxes: Any, specs: Sequence[Any]) -> tuple[list[Any], dict[str, str]]:
    """The four bounds for `tree.count` and friends, from a boxes frame.

    Each spec is a column label of `boxes`, None (unbounded on that side), or a constant
    bound (a number, time or ±inf) that applies to every box. Strings are always column
    labels, so a misspelt column is an error rather than a date.
    """
    require_frame(boxes, "boxes")
    columns = {
        role: spec
        for role, spec in zip(_BOUND_ROLES, specs)
        if isinstance(spec, str) or (spec is not None and _is_label(boxes, spec))
    }
    require_columns(boxes, columns, "the boxes frame")
    bounds = []
    for role, spec in zip(_BOUND_ROLES, specs):
        if role in columns:
            values, missing = column_values(boxes[spec])
            if missing.any():
                raise ValueError(
                    _describe_missing(boxes, f"{role} bound", spec, missing)
                    + "; every box needs all four bounds (use ±inf for an open side)"
                )
            bounds.append(values)
        elif spec is None:
            bounds.append(-np.inf if role.endswith("lo") else np.inf)
        else:
            bounds.append(spec)
    names = {role: f"{role} column {column!r}" for role, column in columns.items()}
    return bounds, names


def box_keys(boxes: Any, by: Hashable | list[Hashable] | None) -> Any:
    """The boxes' key values for ``by=`` (a label, or a list of labels for several key
    columns: then a tuple of columns), or None; a box with a missing key raises."""
    roles = key_roles(by)
    if not roles:
        return None
    require_columns(boxes, roles, "the boxes frame")
    values = []
    for role, column in roles.items():
        series = boxes[column]
        missing = np.asarray(series.isna(), dtype=bool)
        if missing.any():
            raise ValueError(
                _describe_missing(boxes, f"{role} key", column, missing)
                + "; every box needs its key"
            )
        values.append(series)
    return tuple(values) if len(values) > 1 else values[0]


def _is_label(frame: Any, spec: Any) -> bool:
    try:
        return spec in frame.columns
    except TypeError:  # unhashable
        return False


def _keyed(keys: Any) -> dict[str, Any]:
    """``by=`` for a tree's query when the boxes have keys (none otherwise, so an unkeyed
    tree's call is the same as before)."""
    return {} if keys is None else {"by": keys}


def _per_box(result: Any, n: int) -> np.ndarray:
    """A result for every box even when all four bounds were constants."""
    out = np.asarray(result)
    return np.full(n, out) if out.ndim == 0 else out


def count_boxes(
    count: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`count` (a tree's) of each box of a boxes frame, as a Series on its index; `by`
    names the boxes' key column(s) for a keyed tree."""
    pd = pandas()
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    with naming_columns(names):
        counts = count(*bounds, inclusive=inclusive, **_keyed(keys))
    return pd.Series(_per_box(counts, len(boxes)), index=boxes.index, name="count", dtype="int64")


def sum_boxes(
    weight_sum: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`weight_sum` (a tree's sum) of each box of a boxes frame, as a Series on its index."""
    pd = pandas()
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    with naming_columns(names):
        sums = weight_sum(*bounds, inclusive=inclusive, **_keyed(keys))
    return pd.Series(_per_box(sums, len(boxes)), index=boxes.index, name="sum")


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
    """How `tree`'s points in each box of a boxes frame are spread: a DataFrame on its index
    with ``count``, ``sum`` and ``mean`` (trees with weights), ``min``, ``max`` and one
    column a quantile (``q0.5``, ...)."""
    bounds, names = box_bounds(boxes, specs)
    keys = box_keys(boxes, by)
    n = len(boxes)
    with naming_columns(names):
        columns = stats_columns(tree, bounds, keys, n, inclusive, quantiles, of, method)
    zone = (tree._parts.x if of == "x" else tree._parts.y).tz
    return stats_frame(columns, boxes.index, zone)


def stats_frame(columns: dict[str, Any], index: Any, zone: str | None) -> Any:
    """The statistics columns of :func:`stats_columns` as a pandas DataFrame on `index`."""
    pd = pandas()
    n = len(index)
    frame = {name: _stat_column(pd, values, n, zone) for name, values in columns.items()}
    return pd.DataFrame(frame, index=index)


def stats_columns(
    tree: Any,
    bounds: list[Any],
    keys: Any,
    n: int,
    inclusive: Inclusive,
    quantiles: Sequence[float],
    of: str,
    method: str,
) -> dict[str, Any]:
    """The statistics of `n` boxes by name, as the tree's calls give them (arrays, masked
    for integers of empty boxes): the columns of every frame kind's ``stats_boxes``."""
    options = {"inclusive": inclusive, **_keyed(keys)}
    count = _per_box(tree.count(*bounds, **options), n)
    total = None
    if tree.weights_dtype is not None:
        total = _per_box(tree.sum(*bounds, **options), n)
    minimum = tree.min(*bounds, of=of, **options)
    maximum = tree.max(*bounds, of=of, **options)
    probs = [float(q) for q in quantiles]
    spread = tree.quantile(*bounds, probs, of=of, method=method, **options) if probs else None
    return spread_columns(count, total, minimum, maximum, probs, spread)


def spread_columns(
    count: np.ndarray,
    total: np.ndarray | None,
    minimum: Any,
    maximum: Any,
    probs: list[float],
    spread: Any,
) -> dict[str, Any]:
    """The statistics columns by name: ``count``, ``sum`` and ``mean`` when there is a
    `total`, ``min``, ``max``, and ``q<p>`` for each probability (`spread`: boxes by
    probabilities)."""
    columns: dict[str, Any] = {"count": count}
    if total is not None:
        columns["sum"] = total
        with np.errstate(invalid="ignore", divide="ignore"):
            columns["mean"] = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    columns["min"] = minimum
    columns["max"] = maximum
    for j, q in enumerate(probs):
        columns[f"q{q:g}"] = spread[..., j]
    return columns


def _stat_column(pd: Any, values: Any, n: int, zone: str | None) -> Any:
    """One statistic for every box as a pandas array: integers with empty boxes as a
    nullable integer array (pandas' missing value for integers), datetimes of a tz-aware
    axis back in their zone."""
    if isinstance(values, np.ma.MaskedArray):
        data = np.broadcast_to(values.data, n)
        mask = np.broadcast_to(np.ma.getmaskarray(values), n)
        return pd.arrays.IntegerArray(data.copy(), mask.copy())
    values = np.broadcast_to(np.asarray(values), n)
    if zone is not None and values.dtype.kind == "M":
        return pd.Series(values).dt.tz_localize("UTC").dt.tz_convert(zone).array
    return values


def report_boxes(
    pairs: Callable[..., Any],
    boxes: Any,
    specs: Sequence[Any],
    inclusive: Inclusive,
    ordered: bool,
    by: Hashable | list[Hashable] | None = None,
) -> Any:
    """`pairs` (a tree's) of the boxes of a boxes frame, boxes named by their index labels."""
    pd = pandas()
    bounds, names = box_bounds(boxes, specs)
    bounds = [np.broadcast_to(b, len(boxes)) if np.ndim(b) == 0 else b for b in bounds]
    keys = box_keys(boxes, by)
    with naming_columns(names):
        box, row = pairs(*bounds, inclusive=inclusive, ordered=ordered, **_keyed(keys))
    return pd.DataFrame({"box": boxes.index.take(box), "row": row})
