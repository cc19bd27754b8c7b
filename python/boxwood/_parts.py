"""A tree's parts: the engine tree, the two axis descriptions and where its rows came from.

>>> import numpy as np
>>> from boxwood._parts import build_parts
>>> parts = build_parts(np.arange(4.0), np.array([3, 1, 2, 0]), names=("start", "minutes"))
>>> len(parts.engine), parts.x.name, parts.y.dtype, parts.provenance.rows_dropped
(4, 'start', dtype('int64'), 0)

Every way of making a :class:`boxwood.RangeTree` (from arrays, from a DataFrame, from a
points file, from an index file or a pickle, on a Dask worker) produces a
:class:`TreeParts` here or in its own module and hands it to the one constructor,
``RangeTree._from_parts``; no module but the class's own sets a tree's fields.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from ._boxwood import _Tree
from ._columns import AxisInfo, coordinate_column, weight_column
from ._fingerprint import SourceColumns
from ._keys import KeyDictionary, build_keys
from ._memory import check_fits

Layout = Literal["fast", "compact"]
LAYOUTS = ("fast", "compact")
# Integer weights are stored as int64 sums unless they are huge (int128); int64 is the estimate.
_WEIGHT_STORAGE: dict[str, Literal["float64", "int64"]] = {"f": "float64", "i": "int64"}


@dataclass(frozen=True, eq=False)
class Provenance:
    """Where a tree's rows came from, beyond the coordinates themselves."""

    #: The source position (int64, ascending) of every row the tree holds, when it holds
    #: only some rows of its source (rows with missing values dropped, or one shard of a
    #: Dask DataFrame); None when row ``i`` of the tree is row ``i`` of the source.
    source_rows: np.ndarray | None = None
    #: Rows of the source left out for missing values.
    rows_dropped: int = 0
    #: The frame columns the tree was built from (names, dtypes, rows and a fingerprint),
    #: so that a join refuses a tree from other columns; None when it was not built from a
    #: frame (arrays, a points file, a shard).
    columns: SourceColumns | None = None


@dataclass(frozen=True, eq=False)
class TreeParts:
    """Everything a :class:`boxwood.RangeTree` holds."""

    engine: _Tree
    x: AxisInfo
    y: AxisInfo
    provenance: Provenance = field(default_factory=Provenance)
    #: A keyed tree's key dictionary (``by=``); None for a tree built without keys.
    keys: KeyDictionary | None = None

    def with_provenance(self, provenance: Provenance) -> TreeParts:
        return dataclasses.replace(self, provenance=provenance)


def check_layout(layout: Any) -> None:
    if layout not in LAYOUTS:
        raise ValueError(f"layout must be 'fast' or 'compact', got {layout!r}")


def build_parts(
    x: Any,
    y: Any,
    weights: Any = None,
    *,
    layout: Layout = "compact",
    check_memory: bool = True,
    names: tuple[Any, Any] | None = None,
    provenance: Provenance | None = None,
    by: Any = None,
    by_names: tuple[str, ...] | None = None,
    coded_keys: tuple[np.ndarray, KeyDictionary] | None = None,
) -> TreeParts:
    """The parts of a tree built from coordinate (and weight) columns.

    Errors name the arguments ``x``, ``y`` and ``weights``; `names` (the source's column
    labels) then label the axes. With ``check_memory`` a build that the estimate says
    cannot fit is refused before anything is allocated. With `by` (one key column, or a
    tuple of them) the tree is keyed (``_keys.py``); `by_names` name the key columns.
    """
    check_layout(layout)
    xs, x_axis = coordinate_column(x, "x")
    ys, y_axis = coordinate_column(y, "y")
    if ys.shape[0] != xs.shape[0]:
        raise ValueError(f"y has {ys.shape[0]} rows but x has {xs.shape[0]}")
    ws = None if weights is None else weight_column(weights, xs.shape[0])
    codes, keys = (None, None) if by is None else build_keys(by, xs.shape[0], by_names)
    if coded_keys is not None:  # codes of a dictionary shared with other trees (shards)
        codes, keys = coded_keys
        if codes.shape != (xs.shape[0],):
            raise ValueError(f"{codes.size} key codes for {xs.shape[0]} points")
    if check_memory:
        check_fits(
            xs.shape[0],
            layout,
            None if ws is None else _WEIGHT_STORAGE[ws.dtype.kind],
            None if keys is None else keys.count,
        )
    if keys is None:
        engine = _Tree(xs, ys, ws, layout)
    else:
        engine = _Tree(xs, ys, ws, layout, codes, keys.count)
    if names is not None:
        x_axis = dataclasses.replace(x_axis, name=str(names[0]))
        y_axis = dataclasses.replace(y_axis, name=str(names[1]))
    return TreeParts(engine, x_axis, y_axis, provenance or Provenance(), keys)
