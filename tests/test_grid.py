"""RangeTree.grid against numpy.histogram2d (the reference for every count and sum here).

histogram2d works in float64, so time axes are compared as integer nanoseconds from a
nearby base, which float64 holds exactly over the spans used here.
"""

from __future__ import annotations

import doctest

import numpy as np
import pandas as pd
import pytest

import boxwood
import boxwood._grid


def histogram(x, y, x_edges, y_edges, weights=None) -> np.ndarray:
    # Reference: numpy.histogram2d, the bin convention grid follows.
    counts, _, _ = np.histogram2d(x, y, bins=[x_edges, y_edges], weights=weights)
    return counts


@pytest.mark.parametrize("layout", ["fast", "compact"])
def test_random_float_points_and_irregular_edges(layout):
    rng = np.random.default_rng(31)
    x, y = rng.normal(size=4000), rng.standard_exponential(4000)
    tree = boxwood.RangeTree(x, y, layout=layout)
    for x_edges, y_edges in (
        (np.linspace(-3, 3, 13), np.linspace(0, 5, 8)),
        (np.sort(rng.normal(size=20)), np.sort(rng.random(5) * 3)),
        (np.array([-np.inf, 0.0, np.inf]), np.array([0.0, 1.0, np.inf])),
        ([-1, 0, 1], [0, 2]),  # int edges on float axes
    ):
        got = tree.grid(x_edges, y_edges)
        assert got.dtype == np.int64
        assert got.shape == (len(x_edges) - 1, len(y_edges) - 1)
        np.testing.assert_array_equal(got, histogram(x, y, x_edges, y_edges))


def test_points_exactly_on_edges_and_on_the_last_edge():
    rng = np.random.default_rng(32)
    x, y = rng.integers(0, 10, 3000), rng.integers(-5, 5, 3000).astype(np.float32)
    tree = boxwood.RangeTree(x, y)
    for x_edges, y_edges in (
        (np.arange(0, 10), np.arange(-5, 5)),  # every point on an edge, the largest on the last
        (np.array([0, 3, 3, 9]), np.array([-5, 0, 0, 4])),  # repeated edges, as numpy allows
        (np.array([2, 4, 7]), np.array([-2.0, 1.0])),  # points beyond both ends
        (np.array([-1.5, 2.5, 9.0]), np.array([-4.5, 4.0])),  # float edges on integer data
        (np.array([9, 9]), np.array([-5, 4])),  # one bin of width zero: x == 9 exactly
    ):
        np.testing.assert_array_equal(
            tree.grid(x_edges, y_edges), histogram(x, y.astype(np.float64), x_edges, y_edges)
        )


def test_weighted_grid_matches_histogram2d_weights():
    rng = np.random.default_rng(33)
    x, y = rng.integers(0, 50, 5000), rng.normal(size=5000)
    int_weights = rng.integers(-1000, 1000, 5000)
    float_weights = rng.random(5000)
    x_edges, y_edges = np.array([0, 10, 25, 26, 49]), np.linspace(-2, 2, 9)
    exact = boxwood.RangeTree(x, y, weights=int_weights).grid(x_edges, y_edges, weighted=True)
    assert exact.dtype == np.int64
    np.testing.assert_array_equal(exact, histogram(x, y, x_edges, y_edges, int_weights))
    floats = boxwood.RangeTree(x, y, weights=float_weights).grid(x_edges, y_edges, weighted=True)
    # Corner sums are differences of sums up to the total weight (module docstring).
    tolerance = 64 * np.finfo(np.float64).eps * float_weights.sum()
    np.testing.assert_allclose(
        floats, histogram(x, y, x_edges, y_edges, float_weights), rtol=0, atol=tolerance
    )


@pytest.mark.parametrize("unit", ["ns", "s"])
def test_datetime_axis_with_edges_in_another_unit(unit):
    rng = np.random.default_rng(34)
    base = np.datetime64("2025-06-01T00:00:00", "ns")
    seconds = rng.integers(0, 86_400 * 3, 2000)
    times = (base + seconds.astype("timedelta64[s]")).astype(f"datetime64[{unit}]")
    rides = rng.integers(60, 3_600, 2000).astype("timedelta64[s]")
    tree = boxwood.RangeTree(times, rides)
    x_edges = base + rng.integers(0, 86_400 * 3 * 10**9, 12).astype("timedelta64[ns]")
    on_points = base + rng.choice(seconds, 6).astype("timedelta64[s]")
    x_edges[:2] = on_points[:2]  # points exactly on edges
    half = np.timedelta64(500, "ms")
    x_edges[2:6] = on_points[2:] + half  # half a tick above a point, off the seconds grid
    x_edges = np.sort(x_edges)
    x_edges[-1] = base + np.timedelta64(int(seconds.max()), "s") - half  # a closed last edge
    y_edges = np.array([0, 600, 1200, 3599], dtype="timedelta64[s]").astype("timedelta64[ms]")
    got = tree.grid(x_edges, y_edges)
    ns = (times.astype("datetime64[ns]") - base).astype(np.int64)
    edges_ns = (x_edges - base).astype(np.int64)
    expected = histogram(ns, rides.astype(np.int64), edges_ns, y_edges.astype(np.int64) / 1000)
    np.testing.assert_array_equal(got, expected)
    assert got.sum() > 0


def test_tz_aware_axis_with_edges_in_another_zone():
    rng = np.random.default_rng(35)
    start = pd.Timestamp("2025-10-25 12:00", tz="Europe/Berlin")  # spans the DST change
    times = pd.Series(start + pd.to_timedelta(rng.integers(0, 86_400, 1500), unit="s"))
    minutes = rng.integers(0, 60, 1500)
    tree = boxwood.RangeTree(times, minutes)
    x_edges = pd.date_range("2025-10-25 10:00", periods=14, freq="2h", tz="UTC")
    y_edges = [0, 15, 30, 59]
    utc_base = pd.Timestamp("2025-10-25", tz="UTC")
    ns = (times - utc_base).dt.total_seconds().to_numpy()
    edges = (x_edges - utc_base).total_seconds().to_numpy()
    np.testing.assert_array_equal(
        tree.grid(x_edges, y_edges), histogram(ns, minutes, edges, y_edges)
    )
    with pytest.raises(TypeError, match="naive"):
        tree.grid(x_edges.tz_localize(None), y_edges)


def test_empty_and_one_point_trees():
    empty = boxwood.RangeTree(np.array([], dtype=float), np.array([], dtype=float))
    np.testing.assert_array_equal(empty.grid([0, 1, 2], [0, 1]), np.zeros((2, 1)))
    one = boxwood.RangeTree([2.0], [1.0])
    np.testing.assert_array_equal(
        one.grid([0, 1, 2], [0, 1]), histogram([2.0], [1.0], [0, 1, 2], [0, 1])
    )


def test_bad_edges_raise_clear_errors():
    tree = boxwood.RangeTree([1.0, 2.0], [1, 2])
    with pytest.raises(ValueError, match="x_edges must be a 1-D array of at least 2 edges"):
        tree.grid([1.0], [0, 1])
    with pytest.raises(ValueError, match="y_edges must be a 1-D array"):
        tree.grid([0, 1], [[0, 1], [2, 3]])
    with pytest.raises(ValueError, match="x_edges must increase monotonically.*edge 2"):
        tree.grid([0.0, 2.0, 1.0], [0, 1])
    with pytest.raises(ValueError, match="y_edges contains NaN or NaT at position 1"):
        tree.grid([0, 1], [0.0, np.nan, 2.0])
    with pytest.raises(TypeError, match="x_edges holds time values"):
        tree.grid(np.array(["2025-01-01", "2025-01-02"], dtype="datetime64[D]"), [0, 1])
    with pytest.raises(ValueError, match="without weights"):
        tree.grid([0, 1], [0, 1], weighted=True)
    times = boxwood.RangeTree(np.array(["2025-01-01"], dtype="datetime64[s]"), [1])
    with pytest.raises(ValueError, match="x_edges contains NaN or NaT at position 0"):
        times.grid(np.array(["NaT", "2025-01-02"], dtype="datetime64[s]"), [0, 1])
    with pytest.raises(TypeError, match="x_edges holds plain numbers"):
        times.grid([0.0, 1.0], [0, 1])


def test_grid_docstring_examples():
    result = doctest.testmod(boxwood._grid, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
