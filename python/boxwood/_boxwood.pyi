"""Type stubs for the compiled module `boxwood._boxwood` (bindings/src/lib.rs)."""

from typing import Literal

import numpy as np
import numpy.typing as npt

MAX_ROWS: int

class InternalError(RuntimeError):
    """A bug inside boxwood (a Rust panic), caught before it could crash the process."""

_Numbers = npt.NDArray[np.float64] | npt.NDArray[np.int64]
_Inclusive = Literal["both", "neither", "left", "right"]

class _Tree:
    def __init__(
        self,
        x: _Numbers,
        y: _Numbers,
        weights: _Numbers | None = None,
        layout: Literal["fast", "compact"] = "fast",
    ) -> None: ...
    def __len__(self) -> int: ...
    @property
    def height(self) -> int: ...
    @property
    def layout(self) -> str: ...
    @property
    def nbytes(self) -> int: ...
    @property
    def x_domain(self) -> Literal["float64", "int64"]: ...
    @property
    def y_domain(self) -> Literal["float64", "int64"]: ...
    @property
    def weights_kind(self) -> Literal["float64", "int64"] | None: ...
    @property
    def build_stats(self) -> dict[str, int]: ...
    def count_one(
        self, x_lo: float, x_hi: float, y_lo: float, y_hi: float, inclusive: _Inclusive
    ) -> int: ...
    def sum_one(
        self, x_lo: float, x_hi: float, y_lo: float, y_hi: float, inclusive: _Inclusive
    ) -> float | int: ...
    def trace_one(
        self, x_lo: float, x_hi: float, y_lo: float, y_hi: float, inclusive: _Inclusive
    ) -> tuple[int, int, int]: ...
    def count_many(
        self, x_lo: _Numbers, x_hi: _Numbers, y_lo: _Numbers, y_hi: _Numbers, inclusive: _Inclusive
    ) -> npt.NDArray[np.int64]: ...
    def sum_many(
        self, x_lo: _Numbers, x_hi: _Numbers, y_lo: _Numbers, y_hi: _Numbers, inclusive: _Inclusive
    ) -> npt.NDArray[np.float64] | npt.NDArray[np.int64]: ...
    def report_many(
        self, x_lo: _Numbers, x_hi: _Numbers, y_lo: _Numbers, y_hi: _Numbers, inclusive: _Inclusive
    ) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.int64]]: ...

def _panic_for_tests(on_worker: bool) -> None: ...
