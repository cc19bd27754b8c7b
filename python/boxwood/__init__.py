"""boxwood: exact counts, weight sums and rows for millions of axis-parallel boxes.

A static 2-D range tree (array layout, fractional cascading, rank space) in Rust:

>>> import boxwood
>>> tree = boxwood.RangeTree([1.0, 2.0, 3.0], [10, 20, 30])
>>> tree.count(1.5, 3.0, 0, 100)
2
"""

from ._boxwood import MAX_ROWS as _MAX_ROWS  # noqa: F401  (read by tests)
from ._boxwood import InternalError
from ._tree import RangeTree

__all__ = ["InternalError", "RangeTree"]
__version__ = "0.1.0"
