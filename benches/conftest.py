"""The benchmarks under pytest (pytest-benchmark), at small n: ``pytest benches`` or
``make bench-compare``.

Every benchmark also checks its answer against numpy (a check that can fail), so a faster
wrong answer never passes. Sizes: ``BENCH_PYTEST_ROWS`` (points, default 100,000) and
``BENCH_PYTEST_BOXES`` (boxes a batch, default 2,000). ``pytest`` from the repository root
collects only tests/ (``testpaths``), so ``make test`` runs no benchmark.
"""

from __future__ import annotations

import numpy as np
import pytest
from results import env_size

import boxwood


@pytest.fixture(scope="session")
def rows() -> int:
    return env_size("BENCH_PYTEST_ROWS", 100_000)


@pytest.fixture(scope="session")
def box_count() -> int:
    return env_size("BENCH_PYTEST_BOXES", 2_000)


@pytest.fixture(scope="session")
def points(rows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Uniform float64 points and standard normal float64 weights."""
    rng = np.random.default_rng(17)
    return rng.random(rows), rng.random(rows), rng.standard_normal(rows)


@pytest.fixture(scope="session")
def squares(rows: int, box_count: int) -> tuple[np.ndarray, ...]:
    """Closed squares holding about 300 points each: x_lo, x_hi, y_lo, y_hi."""
    rng = np.random.default_rng(18)
    side = float(np.sqrt(300 / rows))
    a, c = rng.random(box_count), rng.random(box_count)
    return a, a + side, c, c + side


@pytest.fixture(scope="session")
def mask_counts(points, squares) -> np.ndarray:
    """The outside reference: each square's count from a numpy boolean mask."""
    x, y, _ = points
    x_lo, x_hi, y_lo, y_hi = squares
    return np.array(
        [
            np.count_nonzero((x >= x_lo[i]) & (x <= x_hi[i]) & (y >= y_lo[i]) & (y <= y_hi[i]))
            for i in range(len(x_lo))
        ],
        dtype=np.int64,
    )


@pytest.fixture(scope="session", params=["fast", "compact"])
def tree(request, points) -> boxwood.RangeTree:
    x, y, w = points
    return boxwood.RangeTree(x, y, weights=w, layout=request.param)
