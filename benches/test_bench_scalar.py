"""One box a call against one call for all boxes, under pytest-benchmark (see
bench_scalar.py for the full-size run), each checked against a numpy mask."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest


@pytest.fixture(scope="module")
def boxes(squares) -> pd.DataFrame:
    x_lo, x_hi, y_lo, y_hi = squares
    return pd.DataFrame({"x_lo": x_lo, "x_hi": x_hi, "y_lo": y_lo, "y_hi": y_hi})


def test_scalar_count_loop(benchmark, tree, squares, mask_counts):
    bounds = list(zip(*(s.tolist() for s in squares)))  # Python floats

    def loop():
        return [tree.count(a, b, c, d) for a, b, c, d in bounds]

    np.testing.assert_array_equal(benchmark(loop), mask_counts)


def test_apply_row_by_row(benchmark, tree, boxes, mask_counts):
    few = boxes.iloc[:500]

    def by_row():
        return few.apply(lambda r: tree.count(r.x_lo, r.x_hi, r.y_lo, r.y_hi), axis=1)

    np.testing.assert_array_equal(benchmark(by_row).to_numpy(), mask_counts[:500])


def test_count_boxes(benchmark, tree, boxes, mask_counts):
    counts = benchmark(tree.count_boxes, boxes)
    assert counts.index.equals(boxes.index)
    np.testing.assert_array_equal(counts.to_numpy(), mask_counts)
