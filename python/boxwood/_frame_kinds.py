"""Which module answers for a frame: the one rule that sends a pandas DataFrame to
:mod:`boxwood._frames` and an Arrow Table or RecordBatch to :mod:`boxwood._arrow_frames`.

>>> import pyarrow as pa
>>> from boxwood._frame_kinds import frames_for
>>> frames_for(pa.table({"x": [1.0]})).__name__
'boxwood._arrow_frames'

Each module has the same functions (``frame_parts``, ``count_boxes``, ``sum_boxes``,
``report_boxes``, ``stats_boxes``) with the same arguments; each returns its own kind.
Anything that is not an Arrow table goes to the pandas module, which says what it takes.
"""

from __future__ import annotations

from types import ModuleType
from typing import Any

from . import _arrow_frames, _frames
from ._arrow import is_arrow_table


def frames_for(frame: Any) -> ModuleType:
    """The module whose functions read `frame` and answer in its kind."""
    return _arrow_frames if is_arrow_table(frame) else _frames
