"""polars objects in: recognised without importing polars, and polars Series read as numpy.

>>> import polars as pl
>>> from boxwood._polars import series_values
>>> values, missing = series_values(pl.Series([3.0, None, float("nan"), 2.0]))
>>> missing.tolist()
[False, True, True, False]

A column of integers, floats, datetimes or durations without nulls is read with
``Series.to_numpy()``, which for those types is a read-only view of polars' own buffer:
nothing is copied. A column with nulls is copied with the nulls filled with zero (the mask
marks them), a column in several chunks is joined into one (polars' ``to_numpy`` copies it),
``Date`` (32-bit days) is copied to ``datetime64[D]``, and strings and
categoricals become object arrays of Python ``str``. A ``Datetime`` with a time zone is its
UTC instants (polars stores it so, and ``to_numpy`` gives them as naive ``datetime64``); the
zone is read by :func:`time_zone`. polars is never imported here: an object is a polars
object only when polars is already loaded.
"""

from __future__ import annotations

import sys
from typing import Any

import numpy as np


def _polars() -> Any:
    """The polars module when it is loaded (any polars object implies it), else None."""
    return sys.modules.get("polars")


def is_polars_frame(frame: Any) -> bool:
    """Whether `frame` is a ``polars.DataFrame`` or ``polars.LazyFrame``."""
    pl = _polars()
    return pl is not None and isinstance(frame, (pl.DataFrame, pl.LazyFrame))


def is_polars_series(values: Any) -> bool:
    """Whether `values` is a ``polars.Series``."""
    pl = _polars()
    return pl is not None and isinstance(values, pl.Series)


def time_zone(values: Any) -> str | None:
    """The time zone of a polars ``Datetime`` Series, else None."""
    if not is_polars_series(values):
        return None
    return getattr(values.dtype, "time_zone", None)


def series_missing(series: Any) -> np.ndarray:
    """Which rows of a polars Series are missing: nulls, and NaN in a float column (as in
    the pandas path)."""
    if series.dtype.is_float():
        series = series.fill_nan(None)
    return series.is_null().to_numpy()


def series_values(series: Any) -> tuple[np.ndarray, np.ndarray]:
    """``(values, missing)``: a polars Series as numpy, and the mask of
    :func:`series_missing`; rows marked missing hold an arbitrary placeholder."""
    missing = series_missing(series)
    if series.null_count() and (series.dtype.is_numeric() or series.dtype.is_temporal()):
        series = series.fill_null(strategy="zero")
    return series.to_numpy(), missing
