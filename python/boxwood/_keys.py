"""Keys (``by=``): one key column or several, their dictionary, and keys of boxes as codes.

>>> import numpy as np
>>> from boxwood._keys import build_keys
>>> codes, keys = build_keys(np.array(["b", "a", "b", "c"]), 4)
>>> codes.tolist(), keys.values()[0].tolist()
([1, 0, 1, 2], ['a', 'b', 'c'])
>>> keys.codes_of("b").tolist(), keys.codes_of(["c", "zz"]).tolist()
(1, [2, -1])

The dictionary maps key values to codes ``0..K`` in sorted key order (tuples of several
columns in lexicographic order) and is built once, at build time; the engine orders its x
axis by ``(code, x)``. A box's key becomes its code here: a key the tree does not hold
becomes ``-1``, which the engine answers as an empty box. Each column's distinct values
(``levels``) are sorted arrays; several columns are combined one at a time, the codes so
far times the next column's level count plus its level code, and the distinct
combinations kept sorted (``steps``), so lookups are binary searches and no product of
level counts is ever materialised.

Integer-like columns (integers, booleans, dates and times as their ticks) are coded by the
engine (``code_keys``: a table of the span for dense keys, per-chunk hash tables otherwise,
on every core); strings by pandas' hash factorisation; a categorical by its own codes, so
only its categories are looked at as values.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._arrow import arrow_values, dictionary_parts, is_arrow_array
from ._boxwood import MAX_KEYS, code_keys

#: What a key column may hold, for messages.
SUPPORTED_KEYS = (
    "integers, strings, booleans, dates and times (datetime64), or categoricals of those"
)


@dataclass(frozen=True, eq=False)
class KeyLevels:
    """One key column: its name, its type and its distinct values, sorted."""

    name: str
    #: "int" (int64), "bool", "str" (Python str objects) or "datetime" (datetime64).
    kind: str
    #: Distinct values, ascending: int64, bool, object (str) or datetime64 of the column's unit.
    levels: np.ndarray

    @property
    def type_name(self) -> str:
        return str(self.levels.dtype) if self.kind == "datetime" else _KIND_NAMES[self.kind]


_KIND_NAMES = {"int": "integer", "bool": "boolean", "str": "string", "float": "float"}


@dataclass(frozen=True, eq=False)
class KeyDictionary:
    """The keys of a keyed tree: code ``k`` is the ``k``-th distinct key in sorted order."""

    columns: tuple[KeyLevels, ...]
    #: For columns ``1..m-1``: the sorted distinct combined codes ``previous * len(levels) +
    #: level code`` (uint64); the last one's positions are the tree's key codes.
    steps: tuple[np.ndarray, ...] = ()

    @property
    def count(self) -> int:
        return len(self.steps[-1]) if self.steps else len(self.columns[0].levels)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def listing(self) -> Any:
        """The keys as a tree's ``keys`` shows them: one array for one key column, a tuple of
        arrays (row ``k`` of each is key ``k``) for several."""
        values = self.values()
        return values[0] if len(values) == 1 else values

    def values(self) -> tuple[np.ndarray, ...]:
        """Each column's value for every code, in code order."""
        level_codes = []
        codes = np.arange(self.count, dtype=np.uint64)
        for column, step in zip(self.columns[:0:-1], self.steps[::-1]):
            combined = step[codes]
            width = np.uint64(len(column.levels))
            level_codes.append(combined % width)
            codes = combined // width
        level_codes.append(codes)
        return tuple(
            column.levels[c.astype(np.intp)] for column, c in zip(self.columns, level_codes[::-1])
        )

    def codes_of(self, key: Any) -> np.ndarray:
        """The codes of boxes' keys (a scalar, an array, or a tuple of one of those per key
        column): int64 of the keys' broadcast shape, ``-1`` for keys the tree does not hold.
        A key of another type than its column's raises ``TypeError`` naming both."""
        parts = _split(key, len(self.columns), "by")
        try:
            shape = np.broadcast_shapes(*(np.shape(p) for p in parts))
        except ValueError:
            raise ValueError("the key columns of by= do not broadcast to one shape") from None
        codes: np.ndarray | None = None
        for i, (column, values) in enumerate(zip(self.columns, parts)):
            level = _lookup(column, values, shape).reshape(-1)
            if codes is None:
                codes = level
                continue
            width = len(column.levels)
            step = self.steps[i - 1]
            combined = codes.astype(np.uint64) * np.uint64(width) + level.astype(np.uint64)
            pos = np.searchsorted(step, combined)
            hit = (codes >= 0) & (level >= 0) & (pos < step.size)
            hit[hit] = step[pos[hit]] == combined[hit]
            codes = np.where(hit, pos, -1).astype(np.int64)
        assert codes is not None
        return codes.reshape(shape)


def _split(key: Any, m: int, what: str) -> tuple[Any, ...]:
    """One key per column: a tuple of `m` for several columns, the key itself for one."""
    if m == 1:
        return (key,)
    if not isinstance(key, tuple) or len(key) != m:
        raise ValueError(f"{what}= needs a tuple of {m} keys, one per key column")
    return key


# ---------------------------------------------------------------- build side


def build_keys(
    by: Any, n: int, names: tuple[str, ...] | None = None
) -> tuple[np.ndarray, KeyDictionary]:
    """``(codes, dictionary)`` of the key column(s) `by` (one array, or a tuple of arrays):
    uint32 codes, one a row. Missing values raise ``ValueError`` naming the column and row;
    more than ``MAX_KEYS`` distinct keys are refused."""
    columns = by if isinstance(by, tuple) else (by,)
    if not columns:
        raise ValueError("by= needs at least one key column")
    if names is None:
        names = ("by",) if len(columns) == 1 else tuple(f"by[{i}]" for i in range(len(columns)))
    codes: np.ndarray | None = None
    count = 0
    infos: list[KeyLevels] = []
    steps: list[np.ndarray] = []
    for values, name in zip(columns, names):
        level_codes, info = _factorize_column(values, name, n)
        infos.append(info)
        width = len(info.levels)
        if codes is None:
            codes, count = level_codes, width
            continue
        combined = codes.astype(np.uint64) * np.uint64(width) + level_codes.astype(np.uint64)
        step, codes = _unique_combined(combined, count * width)
        steps.append(step)
        count = len(step)
    assert codes is not None
    keys = KeyDictionary(tuple(infos), tuple(steps))
    if keys.count > MAX_KEYS:
        raise ValueError(
            f"{keys.count} distinct keys is more than a tree holds (at most {MAX_KEYS}, "
            "the range of its 32-bit key codes)"
        )
    return np.ascontiguousarray(codes, dtype=np.uint32), keys


def _unique_combined(values: np.ndarray, bound: int) -> tuple[np.ndarray, np.ndarray]:
    """``(sorted distinct values, each value's position among them)`` of combined codes
    (uint64, each below `bound`): by the engine while they fit int64, else by a sort."""
    if bound <= np.iinfo(np.int64).max:
        levels, codes = code_keys(values.view(np.int64))
        return levels.view(np.uint64), codes
    levels, inverse = np.unique(values, return_inverse=True)
    return levels, inverse.reshape(-1).astype(np.int64)


@dataclass(frozen=True, eq=False)
class CodedColumn:
    """A key column its own library has coded (a polars string or categorical column, by
    polars' hashing): each row's code is its position in `levels`, the column's distinct
    values in ascending order."""

    codes: np.ndarray
    levels: np.ndarray

    def factorized(self, name: str, n: int) -> tuple[np.ndarray, KeyLevels]:
        _check_shape(self.codes, name, n)
        return self.codes, KeyLevels(name, _kind_of(self.levels, name), self.levels)


def _factorize_column(values: Any, name: str, n: int) -> tuple[np.ndarray, KeyLevels]:
    if isinstance(values, CodedColumn):
        return values.factorized(name, n)
    if getattr(getattr(values, "dtype", None), "name", None) == "category":
        cat = values.cat if hasattr(values, "cat") else values
        coded = _factorize_categorical(np.asarray(cat.codes), cat.categories, name, n)
        if coded is not None:
            return coded
    parts = dictionary_parts(values) if is_arrow_array(values) else None
    if parts is not None:  # an Arrow dictionary array: coded as a categorical is
        coded = _factorize_categorical(parts[0], _arrow_keys(parts[1], name), name, n)
        if coded is not None:
            return coded
    arr = _key_array(values, name)
    _check_shape(arr, name, n)
    kind = _kind_of(arr, name)
    _refuse_missing(arr, kind, name)
    if kind == "str":
        levels, codes = _unique_strings(arr, name)
    elif kind == "datetime":
        ticks, codes = code_keys(np.ascontiguousarray(arr.view(np.int64)))
        levels = ticks.view(arr.dtype)
    elif kind == "bool":
        levels, codes = code_keys(arr.astype(np.int64))
        levels = levels.astype(bool)
    else:
        levels, codes = code_keys(np.ascontiguousarray(arr, dtype=np.int64))
    return codes, KeyLevels(name, kind, levels)


def _check_shape(arr: np.ndarray, name: str, n: int) -> None:
    if arr.ndim != 1:
        raise ValueError(f"key column {name} must be 1-D, got shape {arr.shape}")
    if arr.shape[0] != n:
        raise ValueError(f"key column {name} has {arr.shape[0]} rows but x has {n}")


def _factorize_categorical(
    category_codes: np.ndarray, categories: Any, name: str, n: int
) -> tuple[np.ndarray, KeyLevels] | None:
    """A categorical key column (or an Arrow dictionary array: indices and dictionary)
    coded from its own codes (``-1`` for a missing row): the categories its rows use are
    coded as a column of their own, and each row takes its category's code. None where
    those categories are no valid key column, so that the caller's path over the values
    names the first bad row."""
    _check_shape(category_codes, name, n)
    if (category_codes < 0).any():
        _missing(name, int(np.flatnonzero(category_codes < 0)[0]))
    used, row_used = code_keys(category_codes.astype(np.int64))
    try:
        used_codes, info = _factorize_column(np.asarray(categories)[used], name, used.size)
    except (TypeError, ValueError):
        return None
    if np.array_equal(used_codes, np.arange(used.size)):  # categories in sorted order
        return row_used, info
    return used_codes.astype(np.uint32)[row_used], info


def _key_array(values: Any, name: str) -> np.ndarray:
    """A numpy array of a key column: categoricals as their values, tz-aware times in UTC."""
    if is_arrow_array(values):
        return _arrow_keys(values, name)
    dtype = getattr(values, "dtype", None)
    if getattr(dtype, "name", None) == "category":
        cat = values.cat if hasattr(values, "cat") else values
        categories = np.asarray(cat.categories)
        codes = np.asarray(cat.codes)
        if (codes < 0).any():
            _missing(name, int(np.flatnonzero(codes < 0)[0]))
        return categories[codes]
    if getattr(dtype, "tz", None) is not None:
        values = (
            values.dt.tz_convert("UTC").dt.tz_localize(None) if hasattr(values, "dt") else values
        )
    if hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        numpy_dtype = getattr(dtype, "numpy_dtype", None)
        if isinstance(numpy_dtype, np.dtype) and numpy_dtype.kind in "iubM":
            missing = np.asarray(values.isna(), dtype=bool)
            if missing.any():
                _missing(name, int(np.flatnonzero(missing)[0]))
            return values.to_numpy(dtype=numpy_dtype)
        return values.to_numpy()
    if isinstance(values, (list, tuple)):
        return np.asarray(values, dtype=object) if _has_str(values) else np.asarray(values)
    return np.asarray(values)


def _arrow_keys(values: Any, name: str) -> np.ndarray:
    """An Arrow key column as numpy (strings as Python ``str``); a null raises."""
    arr, missing = arrow_values(values)
    if missing.any():
        _missing(name, int(np.flatnonzero(missing)[0]))
    return arr


def _has_str(values: Any) -> bool:
    return any(isinstance(v, str) for v in values)


def _kind_of(arr: np.ndarray, name: str) -> str:
    k = arr.dtype.kind
    if k == "b":
        return "bool"
    if k in "iu":
        if arr.dtype == np.uint64 and arr.size and arr.max() > np.iinfo(np.int64).max:
            raise TypeError(f"key column {name} holds uint64 values beyond int64")
        return "int"
    if k == "M":
        return "datetime"
    if k in "UO":
        return "str"
    raise TypeError(
        f"key column {name} has unsupported dtype {arr.dtype}; keys may be {SUPPORTED_KEYS}"
        + ("; cast whole-number floats to int64" if k == "f" else "")
    )


def _missing(name: str, position: int) -> None:
    raise ValueError(
        f"key column {name} has a missing value (None, NaN, NaT or NA) at position "
        f"{position}; drop those rows first (from_frame: on_missing='drop')"
    )


def _refuse_missing(arr: np.ndarray, kind: str, name: str) -> None:
    if kind == "datetime":
        bad = np.flatnonzero(np.isnat(arr))
        if bad.size:
            _missing(name, int(bad[0]))
    elif arr.dtype.kind == "O":
        not_str = np.frompyfunc(lambda v: not isinstance(v, str), 1, 1)(arr).astype(bool)
        if not_str.any():
            position = int(np.flatnonzero(not_str)[0])
            value = arr[position]
            if value is None or value != value or type(value).__name__ in ("NAType", "NaTType"):
                _missing(name, position)
            raise TypeError(
                f"key column {name} mixes strings with {type(value).__name__} values "
                f"(first at position {position}); keys may be {SUPPORTED_KEYS}"
            )


def _unique_strings(arr: np.ndarray, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Distinct strings as a sorted object array, and each row's position among them:
    pandas' hash factorisation when pandas is there, else a sort."""
    try:
        pd = importlib.import_module("pandas")
    except ImportError:
        pd = None
    if pd is not None:
        codes, uniques = pd.factorize(arr, sort=True)
        levels = np.asarray(uniques, dtype=object)
        return levels, np.asarray(codes, dtype=np.int64)
    levels, inverse = np.unique(arr.astype(object), return_inverse=True)
    return levels.astype(object), inverse.reshape(-1).astype(np.int64)


# ---------------------------------------------------------------- read side


def _lookup(column: KeyLevels, values: Any, shape: tuple[int, ...]) -> np.ndarray:
    """Level codes of boxes' keys for one column (``-1`` where absent), of `shape`."""
    arr = _query_array(values, column)
    arr = np.broadcast_to(arr, shape).reshape(-1)
    if arr.dtype == np.uint64:  # beyond int64 no key can be: absent, not wrapped
        beyond = arr > np.iinfo(np.int64).max
        codes = _lookup(column, np.where(beyond, 0, arr).astype(np.int64).reshape(shape), shape)
        return np.where(beyond.reshape(shape), -1, codes)
    levels = column.levels
    if arr.size == 0 or levels.size == 0:
        return np.full(shape, -1, dtype=np.int64)
    if column.kind == "int" and int(levels[-1]) - int(levels[0]) == levels.size - 1:
        # Consecutive integers (codes 0..K of a dense range): the code is an offset.
        offset = arr - levels[0]
        inside = (offset >= 0) & (offset < levels.size)
        return np.where(inside, offset, -1).astype(np.int64, copy=False).reshape(shape)
    pos = np.searchsorted(levels, arr)
    hit = pos < levels.size
    hit[hit] = levels[pos[hit]] == arr[hit]
    return np.where(hit, pos, -1).astype(np.int64).reshape(shape)


def _query_array(values: Any, column: KeyLevels) -> np.ndarray:
    """Boxes' keys as an array comparable with the column's levels, or a ``TypeError``
    naming the keys' type and the column's."""
    if getattr(getattr(values, "dtype", None), "name", None) == "category":
        values = np.asarray(values.astype(object))
    elif getattr(getattr(values, "dtype", None), "tz", None) is not None or is_arrow_array(values):
        # tz-aware keys compare as instants: as naive UTC, as the tree stores them.
        values = _key_array(values, column.name)
    elif hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        values = values.to_numpy()
    if isinstance(values, str):
        # Not np.asarray: a numpy str array drops trailing NUL characters ("ab\x00" -> "ab").
        arr = np.empty((), dtype=object)
        arr[()] = values
    elif isinstance(values, (list, tuple)) and _has_str(values):
        arr = np.asarray(values, dtype=object)
    else:
        arr = np.asarray(values)
    got = _query_kind(arr)
    if got is None and column.kind == "datetime":
        try:  # datetime objects, pandas Timestamps (naive), ISO strings are not: no guessing
            arr = arr.astype("datetime64[ns]")
            got = "datetime"
        except (TypeError, ValueError):
            pass
    if got != column.kind or got is None:
        described = (
            "mixed" if got is None else (str(arr.dtype) if got == "datetime" else _KIND_NAMES[got])
        )
        raise TypeError(
            f"by= keys of type {described} cannot be looked up in key column "
            f"{column.name!r}, whose keys are of type {column.type_name}"
        )
    if got == "datetime":
        exact = arr.astype(column.levels.dtype)
        same = exact.astype(arr.dtype) == arr
        # A time that is not a tick of the column's unit is no key of the tree.
        return np.where(same, exact, np.array("NaT", dtype=column.levels.dtype))
    if got == "str":
        return arr.astype(object)
    if got == "int" and arr.dtype == object:
        try:
            return arr.astype(np.int64)
        except OverflowError:
            # A Python int beyond int64 is no key of the tree: kept as Python ints, which
            # searchsorted and == compare with the int64 levels exactly.
            return arr
    if got == "int":
        return arr.astype(np.int64) if arr.dtype != np.uint64 else arr
    return arr


def _query_kind(arr: np.ndarray) -> str | None:
    k = arr.dtype.kind
    if k == "b":
        return "bool"
    if k in "iu":
        return "int"
    if k == "M":
        return "datetime"
    if k == "U":
        return "str"
    if k == "O":
        flat = arr.reshape(-1)
        if all(isinstance(v, str) for v in flat):
            return "str"
        if all(isinstance(v, (bool, np.bool_)) for v in flat):
            return "bool"
        if all(
            isinstance(v, (int, np.integer)) and not isinstance(v, (bool, np.bool_)) for v in flat
        ):
            return "int"
        return None
    if k == "f":
        return "float"
    return None


def broadcast_with_keys(
    shape: tuple[int, ...], arrays: tuple[np.ndarray, ...], codes: np.ndarray
) -> tuple[tuple[int, ...], tuple[np.ndarray, ...], np.ndarray]:
    """Flat bound arrays of broadcast `shape` and the boxes' key codes broadcast together:
    ``(shape, four flat bound arrays, flat int64 codes)``."""
    try:
        full = np.broadcast_shapes(shape, codes.shape)
    except ValueError:
        raise ValueError(
            f"by= of shape {codes.shape} does not broadcast with the bounds' shape {shape}"
        ) from None
    flat = tuple(
        np.ascontiguousarray(np.broadcast_to(a.reshape(shape), full).ravel()) for a in arrays
    )
    keys = np.ascontiguousarray(np.broadcast_to(codes, full).ravel(), dtype=np.int64)
    return full, flat, keys
