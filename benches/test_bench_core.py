"""Build, batch count and batch report under pytest-benchmark, checked against numpy."""

from __future__ import annotations

import numpy as np
import pytest

import boxwood


@pytest.mark.parametrize("layout", ["fast", "compact"])
def test_build(benchmark, points, squares, mask_counts, layout):
    x, y, _ = points
    built = benchmark(boxwood.RangeTree, x, y, layout=layout)
    assert len(built) == len(x)
    np.testing.assert_array_equal(built.count(*squares), mask_counts)


def test_count_batch(benchmark, tree, squares, mask_counts):
    counts = benchmark(tree.count, *squares)
    np.testing.assert_array_equal(counts, mask_counts)


def test_report_batch(benchmark, tree, points, squares, mask_counts):
    x, y, _ = points
    offsets, rows = benchmark(tree.report, *squares)
    np.testing.assert_array_equal(np.diff(offsets), mask_counts)
    x_lo, x_hi, y_lo, y_hi = squares
    for i in range(0, len(x_lo), max(1, len(x_lo) // 50)):  # 50 boxes' rows, against a mask
        inside = (x >= x_lo[i]) & (x <= x_hi[i]) & (y >= y_lo[i]) & (y <= y_hi[i])
        got = np.sort(rows[offsets[i] : offsets[i + 1]])
        np.testing.assert_array_equal(got, np.flatnonzero(inside))
