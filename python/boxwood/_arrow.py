"""Arrow arrays in: ``pyarrow.Array`` and ``ChunkedArray`` as numpy, without a copy where
the layout allows.

>>> import numpy as np, pyarrow as pa
>>> from boxwood._arrow import arrow_values
>>> column = pa.array([3.0, 1.0, 2.0])
>>> values, missing = arrow_values(column)
>>> values.ctypes.data == column.buffers()[1].address, bool(missing.any())  # a view, no copy
(True, False)

A primitive array (integers, floats, timestamps, durations) without nulls, in one chunk, is
read as a numpy view of its data buffer: nothing is copied. A copy is made for an array with
nulls (the nulls filled with a placeholder that the mask marks), for a ChunkedArray of more
than one chunk (its chunks are joined), for ``date32`` (days as 32-bit integers; read as
``datetime64[ms]``, the type pandas gives ``date32[pyarrow]``), and for strings, booleans
and dictionary values. Timestamps with a time zone are their UTC ticks (Arrow stores them
so); the zone is read by :func:`time_zone`. pyarrow is never imported here: an object is an
Arrow array only when pyarrow is already loaded.
"""

from __future__ import annotations

import sys
from typing import Any

import numpy as np


def _pyarrow() -> Any:
    """The pyarrow module when it is loaded (any Arrow object implies it), else None."""
    return sys.modules.get("pyarrow")


def is_arrow_array(values: Any) -> bool:
    """Whether `values` is a ``pyarrow.Array`` or ``pyarrow.ChunkedArray``."""
    pa = _pyarrow()
    return pa is not None and isinstance(values, (pa.Array, pa.ChunkedArray))


def is_arrow_table(frame: Any) -> bool:
    """Whether `frame` is a ``pyarrow.Table`` or ``pyarrow.RecordBatch``."""
    pa = _pyarrow()
    return pa is not None and isinstance(frame, (pa.Table, pa.RecordBatch))


def one_chunk(values: Any) -> Any:
    """A ChunkedArray as one Array: its only chunk as it is, several chunks joined (a copy)."""
    pa = _pyarrow()
    if isinstance(values, pa.ChunkedArray):
        if values.num_chunks == 1:
            return values.chunk(0)
        if values.num_chunks == 0:
            return pa.array([], type=values.type)
        return values.combine_chunks()
    return values


def time_zone(values: Any) -> str | None:
    """The time zone of an Arrow timestamp array, else None."""
    if not is_arrow_array(values):
        return None
    return getattr(values.type, "tz", None)


def arrow_values(values: Any) -> tuple[np.ndarray, np.ndarray]:
    """``(values, missing)``: an Arrow array as numpy, and a mask of its nulls (NaN in a
    float array counts as missing too, as in the pandas path).

    Rows marked missing hold an arbitrary placeholder. Dictionary arrays are decoded;
    strings become an object array of Python ``str``.
    """
    pa = _pyarrow()
    array = one_chunk(values)
    kind = array.type
    if pa.types.is_dictionary(kind):
        array = array.dictionary_decode()
        kind = array.type
    if pa.types.is_date(kind):  # pandas reads date32[pyarrow] and date64 as datetime64[ms]
        array = array.cast(pa.timestamp("ms"))
        kind = array.type
    missing = _null_mask(array)
    if pa.types.is_null(kind):
        return np.zeros(len(array), dtype=np.float64), missing
    if missing.any() and _is_primitive(pa, kind):
        array = array.fill_null(pa.scalar(0, kind))
    if _is_primitive(pa, kind):
        out = array.to_numpy(zero_copy_only=True)
    else:  # strings, booleans, decimals, nested types: the column code says what is wrong
        out = array.to_numpy(zero_copy_only=False)
    if out.dtype.kind == "f":
        missing = missing | np.isnan(out)
    return out, missing


def arrow_missing(values: Any) -> np.ndarray:
    """The mask of :func:`arrow_values` without converting the values: nulls, and NaN in a
    float array (a dictionary array's values are not decoded for it)."""
    pa = _pyarrow()
    array = one_chunk(values)
    missing = _null_mask(array)
    if pa.types.is_floating(array.type) and not pa.types.is_float16(array.type):
        filled = array.fill_null(pa.scalar(0, array.type)) if missing.any() else array
        missing = missing | np.isnan(filled.to_numpy(zero_copy_only=True))
    return missing


def _is_primitive(pa: Any, kind: Any) -> bool:
    """Types whose data buffer numpy can view as it is."""
    return (
        pa.types.is_integer(kind)
        or pa.types.is_floating(kind)
        or pa.types.is_timestamp(kind)
        or pa.types.is_duration(kind)
    ) and not pa.types.is_float16(kind)


def _null_mask(array: Any) -> np.ndarray:
    if array.null_count == 0:
        return np.zeros(len(array), dtype=bool)
    return array.is_null().to_numpy(zero_copy_only=False)


def dictionary_parts(values: Any) -> tuple[np.ndarray, Any] | None:
    """A dictionary array's ``(indices, dictionary)``, indices int64 with ``-1`` for nulls;
    None for any other array. The key code reads them as it reads a categorical's."""
    pa = _pyarrow()
    if not pa.types.is_dictionary(values.type):
        return None
    array = one_chunk(values)  # chunks joined: their dictionaries unified into one
    indices = array.indices.fill_null(-1).to_numpy(zero_copy_only=False).astype(np.int64)
    return indices, array.dictionary


def first_null(values: Any) -> int | None:
    """The position of an Arrow array's first null, or None."""
    bad = np.flatnonzero(_null_mask(one_chunk(values)))
    return int(bad[0]) if bad.size else None
