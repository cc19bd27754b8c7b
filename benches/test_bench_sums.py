"""Batch weight sums under pytest-benchmark, checked against math.fsum of a numpy mask."""

from __future__ import annotations

import math

import numpy as np


def test_sum_batch(benchmark, tree, points, squares):
    x, y, w = points
    sums = benchmark(tree.sum, *squares)
    x_lo, x_hi, y_lo, y_hi = squares
    # Float prefix sums are within a few units in the last place of the partial sums
    # involved: the same bound bench_sums.py uses.
    tolerance = 4 * (2 * tree.height + 2) * 2.0**-52 * math.fsum(np.abs(w))
    for i in range(min(len(x_lo), 200)):
        inside = (x >= x_lo[i]) & (x <= x_hi[i]) & (y >= y_lo[i]) & (y <= y_hi[i])
        assert abs(sums[i] - math.fsum(w[inside])) <= tolerance, i
