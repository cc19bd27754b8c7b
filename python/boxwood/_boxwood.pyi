"""Type stubs for the compiled module `boxwood._boxwood` (bindings/src/lib.rs)."""

from typing import Any, Literal, final

import numpy as np
import numpy.typing as npt

__all__ = [
    "_Tree",
    "InternalError",
    "IndexFileError",
    "NotAnIndexFileError",
    "UnsupportedIndexFileError",
    "TruncatedIndexFileError",
    "ChecksumMismatchError",
    "CorruptIndexFileError",
    "FORMAT_VERSION",
    "MAX_ROWS",
    "MAX_KEYS",
    "BACKGROUND_POOLS",
    "mark_background_thread",
    "_panic_for_tests",
    "estimate_bytes",
    "code_keys",
]

MAX_ROWS: int
MAX_KEYS: int
#: How many background pools ``mark_background_thread`` takes (0 to this, exclusive).
BACKGROUND_POOLS: int

FORMAT_VERSION: int

class InternalError(RuntimeError):
    """A bug inside boxwood (a Rust panic), caught before it could crash the process."""

class IndexFileError(ValueError):
    """An index file (or pickled tree) that cannot be read back."""

class NotAnIndexFileError(IndexFileError): ...
class UnsupportedIndexFileError(IndexFileError): ...
class TruncatedIndexFileError(IndexFileError): ...
class ChecksumMismatchError(IndexFileError): ...
class CorruptIndexFileError(IndexFileError): ...

_Numbers = npt.NDArray[np.float64] | npt.NDArray[np.int64]
_Inclusive = Literal["both", "neither", "left", "right"]

@final
class _Counted:
    """A batch counted for statistics (``_Tree.count_for_stats``), for ``_Tree.kth_counted``."""

@final
class _Tree:
    def __new__(
        cls,
        x: _Numbers,
        y: _Numbers,
        weights: _Numbers | None = None,
        layout: Literal["fast", "compact"] = "fast",
        keys: npt.NDArray[np.uint32] | None = None,
        key_count: int = 0,
    ) -> _Tree: ...
    def __len__(self) -> int: ...
    @property
    def height(self) -> int: ...
    @property
    def layout(self) -> str: ...
    @property
    def nbytes(self) -> int: ...
    @property
    def nbytes_by_part(self) -> list[tuple[str, int]]: ...
    @property
    def x_domain(self) -> Literal["float64", "int64"]: ...
    @property
    def y_domain(self) -> Literal["float64", "int64"]: ...
    @property
    def weights_kind(self) -> Literal["float64", "int64"] | None: ...
    @property
    def key_offsets(self) -> npt.NDArray[np.uint32] | None: ...
    @property
    def build_stats(self) -> dict[str, int]: ...
    @property
    def source(self) -> str: ...
    @property
    def verified(self) -> list[str]: ...
    def verify_all(self) -> None: ...
    def columns(
        self,
    ) -> tuple[_Numbers, _Numbers, _Numbers | None, npt.NDArray[np.uint32] | None]: ...
    @property
    def x_extremes(self) -> tuple[float, float] | tuple[int, int] | None: ...
    @property
    def y_extremes(self) -> tuple[float, float] | tuple[int, int] | None: ...
    def save(self, path: str, attachments: list[bytes]) -> None: ...
    def to_bytes(self, attachments: list[bytes]) -> bytes: ...
    @staticmethod
    def load(
        path: str, mmap: bool, verify: Literal["checksums", "full"]
    ) -> tuple[_Tree, list[bytes]]: ...
    @staticmethod
    def from_bytes(data: bytes) -> tuple[_Tree, list[bytes]]: ...
    def count_plain(
        self, x_lo: object, x_hi: object, y_lo: object, y_hi: object, inclusive: object
    ) -> int | None: ...
    def count_one(
        self,
        x_lo: float,
        x_hi: float,
        y_lo: float,
        y_hi: float,
        inclusive: _Inclusive,
        key: int | None = None,
    ) -> int: ...
    def sum_one(
        self,
        x_lo: float,
        x_hi: float,
        y_lo: float,
        y_hi: float,
        inclusive: _Inclusive,
        key: int | None = None,
    ) -> float | int: ...
    def probe_one(
        self,
        x_lo: float,
        x_hi: float,
        y_lo: float,
        y_hi: float,
        inclusive: _Inclusive,
        report: bool = False,
    ) -> dict[str, Any]: ...
    def count_many(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        keys: npt.NDArray[np.int64] | None = None,
    ) -> npt.NDArray[np.int64]: ...
    def sum_many(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        keys: npt.NDArray[np.int64] | None = None,
    ) -> npt.NDArray[np.float64] | npt.NDArray[np.int64]: ...
    def report_many(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        ordered: bool = False,
        keys: npt.NDArray[np.int64] | None = None,
    ) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.int64]]: ...
    def kth_many(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        axis: Literal["x", "y"],
        ranks: npt.NDArray[np.int64],
        per_box: int,
        keys: npt.NDArray[np.int64] | None = None,
    ) -> tuple[_Numbers, npt.NDArray[np.bool_]]: ...
    def count_for_stats(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        axis: Literal["x", "y"],
        keys: npt.NDArray[np.int64] | None = None,
    ) -> tuple[_Counted, npt.NDArray[np.int64]]: ...
    def kth_counted(
        self, counted: _Counted, ranks: npt.NDArray[np.int64], per_box: int
    ) -> tuple[_Numbers, npt.NDArray[np.bool_]]: ...
    def extreme_rows_many(
        self,
        x_lo: _Numbers,
        x_hi: _Numbers,
        y_lo: _Numbers,
        y_hi: _Numbers,
        inclusive: _Inclusive,
        axis: Literal["x", "y"],
        k: npt.NDArray[np.uint64],
        largest: bool,
        keys: npt.NDArray[np.int64] | None = None,
    ) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.int64]]: ...

def mark_background_thread(pool: int | None) -> None: ...
def _panic_for_tests(on_worker: bool) -> None: ...
def _rehash_for_tests(data: bytes) -> bytes: ...
def estimate_bytes(
    n: int,
    layout: Literal["fast", "compact"],
    weights: Literal["float64", "int64", "int128"] | None = None,
    keys: int | None = None,
) -> tuple[int, int, int]: ...
def code_keys(
    values: npt.NDArray[np.int64],
) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.uint32]]: ...
