"""Which columns of which frame a tree was built from, so that a join can refuse another's.

>>> import pandas as pd
>>> trips = pd.DataFrame({"start": [0.0, 10.0, 25.0], "minutes": [12, 5, 8]})
>>> built = columns_of(trips, "start", "minutes")
>>> built.names, built.rows
(('start', 'minutes'), 3)
>>> mismatch(built, trips, "minutes", "start")
"the tree was built from columns x='start', y='minutes', not x='minutes', y='start'"

A tree made by :meth:`RangeTree.from_frame` (from a DataFrame, an Arrow table or a polars
frame) keeps the column names, their dtypes, the frame's row count and a fingerprint of its
coordinates: a hash of a fixed sample of :data:`SAMPLE_ROWS` rows spread evenly over the
frame (the first and the last among them).
Computing it reads those rows only, a few hundred microseconds whatever the frame's size,
so every join can afford it; it notices another frame or other columns, not a change to a
row outside the sample (it is a guard against a mix-up, not a checksum of the data).
"""

from __future__ import annotations

import hashlib
import importlib
from collections.abc import Hashable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._arrow import arrow_values, is_arrow_table
from ._polars import is_polars_frame, series_values

#: Rows of a frame the fingerprint hashes.
SAMPLE_ROWS = 64


@dataclass(frozen=True)
class SourceColumns:
    """The frame columns a tree was built from."""

    #: The x and y column labels, as strings.
    names: tuple[str, str]
    #: Their dtypes in the frame, as strings (``"float64"``, ``"datetime64[ns, UTC]"``).
    dtypes: tuple[str, str]
    #: Rows of the frame, those dropped for missing values included.
    rows: int
    #: Hex digest of the sampled rows of both columns.
    fingerprint: str

    def to_json(self) -> dict[str, Any]:
        return {
            "names": list(self.names),
            "dtypes": list(self.dtypes),
            "rows": self.rows,
            "fingerprint": self.fingerprint,
        }

    @staticmethod
    def from_json(d: Any) -> SourceColumns | None:
        """The description stored in an index file; None when it is absent or malformed."""
        try:
            names, dtypes = tuple(d["names"]), tuple(d["dtypes"])
            rows, fingerprint = d["rows"], d["fingerprint"]
        except (TypeError, KeyError):
            return None
        strings = all(isinstance(v, str) for v in (*names, *dtypes, fingerprint))
        if len(names) != 2 or len(dtypes) != 2 or not strings or type(rows) is not int:
            return None
        return SourceColumns((names[0], names[1]), (dtypes[0], dtypes[1]), rows, fingerprint)


def sample_positions(rows: int) -> np.ndarray:
    """The rows the fingerprint reads: evenly spread, the first and the last included."""
    if rows == 0:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.linspace(0, rows - 1, min(rows, SAMPLE_ROWS)).round().astype(np.int64))


def _rows(frame: Any) -> int:
    return int(frame.num_rows) if is_arrow_table(frame) else len(frame)


def _dtype(frame: Any, column: Hashable) -> str:
    """A column's type as the frame names it (``float64``; ``double`` in an Arrow table)."""
    return (
        str(frame.schema.field(column).type) if is_arrow_table(frame) else str(frame[column].dtype)
    )


def _sample_bytes(frame: Any, column: Hashable, at: np.ndarray) -> bytes:
    """The sampled rows of one column as bytes: pandas' row hashes for a pandas DataFrame,
    the values' own bytes (their numpy form) for an Arrow table or a polars DataFrame."""
    if is_arrow_table(frame):
        values, missing = arrow_values(frame.column(column).take(at))
    elif is_polars_frame(frame):
        values, missing = series_values(frame.get_column(column).gather(at))
    else:
        pd = importlib.import_module("pandas")  # the frame is a pandas DataFrame
        sample = frame[column].iloc[at]
        return pd.util.hash_pandas_object(sample, index=False).to_numpy().tobytes()
    return np.ascontiguousarray(values).tobytes() + missing.tobytes()


def _fingerprint(frame: Any, x: Hashable, y: Hashable) -> str:
    rows = _rows(frame)
    at = sample_positions(rows)
    digest = hashlib.blake2b(digest_size=16)
    digest.update(str(rows).encode())
    for column in (x, y):
        digest.update(_sample_bytes(frame, column, at))
    return digest.hexdigest()


def columns_of(frame: Any, x: Hashable, y: Hashable) -> SourceColumns:
    """What a tree built from these columns of `frame` (a pandas DataFrame, an Arrow table or
    a polars DataFrame) keeps of them."""
    return SourceColumns(
        (str(x), str(y)),
        (_dtype(frame, x), _dtype(frame, y)),
        _rows(frame),
        _fingerprint(frame, x, y),
    )


def mismatch(built: SourceColumns, frame: Any, x: Hashable, y: Hashable) -> str | None:
    """Why a tree built from `built` does not answer for columns `x`, `y` of `frame`
    (None when it does)."""
    if built.names != (str(x), str(y)):
        return (
            f"the tree was built from columns x={built.names[0]!r}, y={built.names[1]!r}, "
            f"not x={str(x)!r}, y={str(y)!r}"
        )
    dtypes = (_dtype(frame, x), _dtype(frame, y))
    if built.dtypes != dtypes:
        return (
            f"the tree was built from columns of dtypes {built.dtypes[0]}, {built.dtypes[1]}, "
            f"but the points' {str(x)!r}, {str(y)!r} are {dtypes[0]}, {dtypes[1]}"
        )
    if built.rows != _rows(frame):
        return f"the tree was built from {built.rows} rows but points has {_rows(frame)}"
    if built.fingerprint != _fingerprint(frame, x, y):
        return (
            f"the tree was built from other values of columns {str(x)!r}, {str(y)!r} "
            "(their sampled rows differ)"
        )
    return None
