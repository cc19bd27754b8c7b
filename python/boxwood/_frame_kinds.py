"""Which module answers for a frame: the one rule that sends a pandas DataFrame to
:mod:`boxwood._frames`, an Arrow Table or RecordBatch to :mod:`boxwood._arrow_frames` and a
polars DataFrame or LazyFrame to :mod:`boxwood._polars_frames`.

>>> import pyarrow as pa
>>> from boxwood._frame_kinds import frames_for
>>> frames_for(pa.table({"x": [1.0]})).__name__
'boxwood._arrow_frames'

Each module has the same functions (``frame_parts``, ``point_columns``, ``count_boxes``,
``sum_boxes``, ``report_boxes``, ``stats_boxes``) with the same arguments; each returns its
own kind.
Anything that is neither an Arrow table nor a polars frame goes to the pandas module, which
says what it takes.
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

from . import _arrow_frames, _frames, _polars_frames
from ._arrow import is_arrow_table
from ._polars import is_polars_frame


def frames_for(frame: Any) -> ModuleType:
    """The module whose functions read `frame` and answer in its kind."""
    if is_polars_frame(frame):
        return _polars_frames
    return _arrow_frames if is_arrow_table(frame) else _frames
