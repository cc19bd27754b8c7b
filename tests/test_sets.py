"""Sorted distinct values by one sort, against NumPy's own ``unique`` and ``union1d``
(outside reference: NumPy)."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from boxwood._sets import sorted_union, sorted_unique

numbers = st.one_of(
    st.lists(st.integers(-(2**63), 2**63 - 1), max_size=60).map(lambda v: np.array(v, np.int64)),
    st.lists(st.floats(allow_nan=True), max_size=60).map(lambda v: np.array(v, np.float64)),
    st.lists(st.integers(-5, 5), max_size=60).map(lambda v: np.array(v, np.int64)),
)


@given(numbers)
def test_sorted_unique_is_numpy_unique(values):
    np.testing.assert_array_equal(sorted_unique(values), np.unique(values))
    got, counts = sorted_unique(values, return_counts=True)
    want, want_counts = np.unique(values, return_counts=True)
    np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(counts, want_counts)


@given(
    st.lists(st.integers(-50, 50), max_size=40),
    st.lists(st.integers(-50, 50), max_size=40),
)
def test_sorted_union_is_numpy_union1d(ordered, more):
    ordered = np.unique(np.array(ordered, np.int64))
    more = np.array(more, np.int64)
    got = sorted_union(ordered, more)
    np.testing.assert_array_equal(got, np.union1d(ordered, more))
    assert got.dtype == np.int64


def test_datetimes_keep_their_type_and_nat_comes_once_last():
    values = np.array(["NaT", "2031-05-01", "NaT", "2031-04-30"], dtype="datetime64[D]")
    np.testing.assert_array_equal(sorted_unique(values), np.unique(values))
    assert sorted_unique(values).dtype == values.dtype
