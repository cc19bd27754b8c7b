"""Coordinate and weight columns: from whatever the caller has to what the engine takes.

The engine takes contiguous 1-D ``float64`` or ``int64`` arrays. Narrower types widen
losslessly (``float32`` to ``float64``, small integers to ``int64``); datetime64 and
timedelta64 columns travel as their int64 ticks, and the axis remembers the unit so that
bounds can be converted exactly.
"""

from __future__ import annotations

import datetime as _dt
import importlib
import re
import zoneinfo
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import _polars
from ._arrow import arrow_values, first_null, is_arrow_array, time_zone

_FLOAT_DTYPES = (np.dtype(np.float64), np.dtype(np.float32))
_INT_DTYPES = tuple(
    np.dtype(t) for t in (np.int64, np.int32, np.int16, np.int8, np.uint32, np.uint16, np.uint8)
)
_NAT = np.iinfo(np.int64).min
#: A fixed UTC offset as a zone name (``+05:30``, ``-0800``).
_OFFSET = re.compile(r"([+-])(\d{2}):?(\d{2})")
_TICK_MAX = np.iinfo(np.int64).max

SUPPORTED = (
    "float64, float32, int64, int32, int16, int8, uint32, uint16, uint8, datetime64 and timedelta64"
)


@dataclass(frozen=True)
class AxisInfo:
    """What the tree needs to know about one coordinate axis."""

    name: str
    dtype: np.dtype
    #: "float" (float64 keys), "int" (int64 keys), "datetime" or "timedelta" (int64 ticks).
    kind: str
    #: The time zone of tz-aware datetime data (stored as UTC ticks), else None.
    tz: str | None = None
    #: Whether the axis holds datetimes or timedeltas: a field rather than a property, since
    #: every scalar count reads it.
    is_time: bool = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "is_time", self.kind in ("datetime", "timedelta"))

    @property
    def unit(self) -> str:
        """The datetime/timedelta unit, such as ``"ns"``; only for time axes."""
        return np.datetime_data(self.dtype)[0]


def tz_of(values: Any) -> str | None:
    """The time zone of tz-aware pandas, Arrow or polars data or datetime objects, else None."""
    if is_arrow_array(values):
        return time_zone(values)
    if _polars.is_polars_series(values):
        return _polars.time_zone(values)
    tz = getattr(getattr(values, "dtype", None), "tz", None)
    if tz is None:
        tz = getattr(values, "tzinfo", None)
    return None if tz is None else str(tz)


def _to_numpy(values: Any, name: str) -> np.ndarray:
    """A numpy array from an array, list, pandas, Arrow or polars object, without copying
    when possible.

    tz-aware pandas data becomes naive UTC (a zoned polars Series is its UTC instants);
    non-native byte order becomes native; masked arrays with masked values and Arrow arrays
    and polars Series with nulls are refused, since their data under the mask is arbitrary.
    """
    if is_arrow_array(values):
        if values.null_count:  # NaN goes on to the checks a numpy array meets
            _refuse_null(name, first_null(values))
        return arrow_values(values)[0]  # a view of the buffer where the layout allows
    if _polars.is_polars_series(values):
        if values.null_count():
            _refuse_null(name, int(np.flatnonzero(values.is_null().to_numpy())[0]))
        return values.to_numpy()  # a view of polars' buffer where the layout allows
    if isinstance(values, (set, frozenset, dict)) or hasattr(values, "__next__"):
        raise TypeError(
            f"{name} must be array-like (a numpy array, list, pandas Series or Arrow array), "
            f"got {type(values).__name__}"
        )
    if isinstance(values, np.ma.MaskedArray):
        if np.ma.count_masked(values):
            raise ValueError(
                f"{name} has masked values (first at position "
                f"{int(np.flatnonzero(np.ma.getmaskarray(values))[0])}); fill or drop them first"
            )
        values = values.data
    if getattr(getattr(values, "dtype", None), "tz", None) is not None:
        values = _as_naive_utc(values)
    if hasattr(values, "to_numpy") and not isinstance(values, np.ndarray):
        values = values.to_numpy()
    try:
        arr = np.asarray(values)
    except (TypeError, ValueError) as exc:
        raise TypeError(f"{name} could not be read as an array: {exc}") from None
    if not arr.dtype.isnative:
        arr = arr.astype(arr.dtype.newbyteorder("="))
    if not arr.flags.aligned:  # e.g. columns unpickled from a Dask message buffer
        arr = arr.copy()
    return arr


def _refuse_null(name: str, position: int | None) -> None:
    raise ValueError(
        f"{name} has a missing value (null) at position {position}; drop or fill those rows first"
    )


def _as_naive_utc(values: Any) -> Any:
    """tz-aware pandas data as naive UTC: instants compare the same in every zone."""
    if hasattr(values, "dt"):  # a Series
        return values.dt.tz_convert("UTC").dt.tz_localize(None)
    return values.tz_convert("UTC").tz_localize(None)  # an index or array


def _require_1d(arr: np.ndarray, name: str) -> None:
    if arr.ndim != 1:
        raise ValueError(f"{name} must be a 1-D array, got an array of shape {arr.shape}")


def _first_nat(ticks: np.ndarray) -> int | None:
    bad = np.flatnonzero(ticks == _NAT)
    return int(bad[0]) if bad.size else None


def coordinate_column(values: Any, name: str) -> tuple[np.ndarray, AxisInfo]:
    """The engine's array for one coordinate axis, and what to remember about the axis."""
    arr = _to_numpy(values, name)
    _require_1d(arr, name)
    dtype = arr.dtype
    if dtype in _FLOAT_DTYPES:
        data = np.ascontiguousarray(arr, dtype=np.float64)
        return data, AxisInfo(name, dtype, "float")
    if dtype in _INT_DTYPES:
        return np.ascontiguousarray(arr, dtype=np.int64), AxisInfo(name, dtype, "int")
    if dtype.kind in "Mm":
        ticks = np.ascontiguousarray(arr.view(np.int64))
        bad = _first_nat(ticks)
        if bad is not None:
            raise ValueError(f"{name} contains NaT at position {bad}")
        top = np.flatnonzero(ticks == _TICK_MAX)
        if top.size:
            raise ValueError(
                f"{name} holds the largest representable {dtype} value at position "
                f"{int(top[0])}; boxwood keeps that tick free (as numpy keeps the smallest "
                "for NaT) so that unbounded boxes stay exact"
            )
        kind = "datetime" if dtype.kind == "M" else "timedelta"
        return ticks, AxisInfo(name, dtype, kind, tz_of(values))
    hint = ""
    if dtype == np.uint64:
        hint = "; cast to int64 if the values fit, or to float64"
    elif dtype.kind in "OUS":
        hint = (
            "; numbers must be a numeric array, and times a datetime64 array, e.g. "
            "np.array(values, dtype='datetime64[ns]') or pandas.to_datetime(values)"
        )
    raise TypeError(f"{name} has unsupported dtype {dtype}; supported are {SUPPORTED}{hint}")


def weight_column(values: Any, n: int) -> np.ndarray:
    """The engine's array of weights: float64 or int64."""
    arr = _to_numpy(values, "weights")
    _require_1d(arr, "weights")
    if arr.shape[0] != n:
        raise ValueError(f"weights has {arr.shape[0]} rows but x has {n}")
    if arr.dtype in _FLOAT_DTYPES:
        return np.ascontiguousarray(arr, dtype=np.float64)
    if arr.dtype in _INT_DTYPES:
        return np.ascontiguousarray(arr, dtype=np.int64)
    raise TypeError(
        f"weights has unsupported dtype {arr.dtype}; supported are float64, float32 and "
        "signed or unsigned integers up to 32 bits, and int64"
    )


def axis_value(axis: AxisInfo, engine_value: float | int) -> Any:
    """An engine coordinate (float64 or int64 ticks) as a value of the axis's own type."""
    if axis.kind in ("float", "int"):
        return np.array(engine_value).astype(axis.dtype)[()]  # exact: the column was widened
    if axis.tz is None:  # datetime64 or timedelta64 ticks in the axis's unit
        return np.array(int(engine_value), dtype=np.int64).view(axis.dtype)[()]
    try:
        pd = importlib.import_module("pandas")
    except ImportError:  # a zoned axis of Arrow or polars data, without pandas
        return zoned_datetime(int(engine_value), axis)
    return pd.Timestamp(int(engine_value), unit=axis.unit, tz="UTC").tz_convert(axis.tz)


def zoned_datetime(ticks: int, axis: AxisInfo) -> _dt.datetime:
    """An instant of a zoned axis (UTC ticks) as a ``datetime`` in the axis's zone, where
    pandas, whose ``Timestamp`` it would be, is not installed: exact to the microsecond
    (``datetime``'s resolution), and an instant finer than that raises rather than round."""
    instant = np.array(ticks, dtype=np.int64).view(axis.dtype)
    micro = instant.astype("datetime64[us]")
    if micro.astype(axis.dtype) != instant:
        raise ImportError(
            f"axis {axis.name} holds an instant finer than a microsecond ({instant} UTC), "
            "which a datetime cannot hold; install pandas (pip install 'boxwood[pandas]') "
            "to have it as an exact pandas Timestamp"
        )
    epoch = _dt.datetime(1970, 1, 1, tzinfo=_dt.timezone.utc)
    utc = epoch + _dt.timedelta(microseconds=int(micro.view(np.int64)))
    return utc.astimezone(_zone(str(axis.tz)))


def _zone(name: str) -> _dt.tzinfo:
    """A zone by its IANA name, or a fixed offset such as ``+05:30``."""
    try:
        return zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        found = _OFFSET.fullmatch(name)
        if found is None:
            raise ValueError(
                f"time zone {name!r} is neither in the system's zone database nor an offset "
                "such as +05:30"
            ) from None
        sign = -1 if found.group(1) == "-" else 1
        hours, minutes = int(found.group(2)), int(found.group(3))
        return _dt.timezone(sign * _dt.timedelta(hours=hours, minutes=minutes))
