"""Key columns as codes (python/boxwood/_keys.py and the engine's ``code_keys``).

Integer-like keys (integers, booleans, datetimes) are coded by the engine, categoricals from
their own codes, strings by pandas. Whatever the path, a row's code is its value's position
among the column's sorted distinct values: checked against ``numpy.unique(...,
return_inverse=True)`` and ``pandas.factorize(..., sort=True)`` as outside references, and
several columns against pandas' ``groupby(sort=True).ngroup()``.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import boxwood
from _optional import require
from boxwood._boxwood import code_keys
from boxwood._keys import _factorize_categorical, build_keys

_INT64 = np.iinfo(np.int64)


def numpy_codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # Outside reference: NumPy's sort-based unique with the inverse.
    levels, inverse = np.unique(values, return_inverse=True)
    return levels, inverse.reshape(-1)


@st.composite
def int_columns(draw) -> np.ndarray:
    """Dense runs (the engine's table of the span), far-apart values (its hash tables),
    the extremes of int64, and keys spaced by powers of two."""
    n = draw(st.integers(0, 3000))
    kind = draw(st.sampled_from(["dense", "sparse", "extremes", "spaced"]))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    if kind == "dense":
        lo = draw(st.integers(-(10**6), 10**6))
        return rng.integers(lo, lo + draw(st.integers(1, 2 * n + 5000)), n)
    if kind == "sparse":
        pool = rng.integers(_INT64.min, _INT64.max, draw(st.integers(1, 500)), endpoint=True)
        return rng.choice(pool, n)
    if kind == "extremes":
        return rng.choice(np.array([_INT64.min, _INT64.max, 0, -1, 1]), n)
    return rng.integers(0, 64, n).astype(np.int64) << 40


@settings(max_examples=150, deadline=None)
@given(int_columns())
def test_engine_codes_are_numpy_uniques_inverse(values: np.ndarray) -> None:
    levels, codes = code_keys(np.ascontiguousarray(values, dtype=np.int64))
    want_levels, want_codes = numpy_codes(values)
    assert codes.dtype == np.uint32
    np.testing.assert_array_equal(levels, want_levels)
    np.testing.assert_array_equal(codes, want_codes)


def test_engine_codes_at_a_million_rows_are_pandas_factorize_sorted() -> None:
    # Outside reference: pandas' hash factorisation, sort=True. Large enough for the engine
    # to cut the rows into chunks on every core, both ways (dense and hashed).
    pd = require("pandas")
    rng = np.random.default_rng(5)
    for values in (
        rng.integers(0, 10_000, 1_000_000),
        rng.integers(-(2**62), 2**62, 20_000)[rng.integers(0, 20_000, 1_000_000)],
        rng.integers(0, 3_000_000, 1_000_000),  # a dense span wider than the rows
    ):
        levels, codes = code_keys(values)
        want_codes, want_levels = pd.factorize(values, sort=True)
        np.testing.assert_array_equal(levels, want_levels)
        np.testing.assert_array_equal(codes, want_codes)


def test_code_keys_refuses_a_strided_array() -> None:
    with pytest.raises(ValueError, match="C-contiguous"):
        code_keys(np.arange(10, dtype=np.int64)[::2])


@pytest.mark.parametrize(
    "column",
    [
        np.array([3, -2, 3, 7, -2], dtype=np.int32),
        np.array([3, 1, 3], dtype=np.uint64),
        np.array([True, False, True, True]),
        np.array([True, True]),
        np.array(["2024-03-01T10:00", "2023-01-01T00:00", "2024-03-01T10:00"], "datetime64[m]"),
    ],
    ids=["int32", "uint64", "bool", "bool-one-level", "datetime64[m]"],
)
def test_key_columns_of_each_integer_like_type_are_numpy_uniques(column: np.ndarray) -> None:
    codes, keys = build_keys(column, column.size)
    want_levels, want_codes = numpy_codes(column)
    assert codes.dtype == np.uint32
    np.testing.assert_array_equal(codes, want_codes)
    (levels,) = keys.values()
    assert levels.dtype == (np.int64 if column.dtype.kind in "iu" else column.dtype)
    np.testing.assert_array_equal(levels, want_levels)


@pytest.mark.parametrize(
    "categories, drawn",
    [
        (["s20", "s1", "s3", "s10"], ["s1", "s10", "s20"]),  # unsorted, one unused
        ([40, -3, 7], [40, -3, 7]),
        (np.array(["2024-01-02", "2023-05-01"], "datetime64[ns]"), None),
        (["a", "b", "c"], ["c", "a"]),  # sorted, one unused
    ],
    ids=["strings", "integers", "dates", "sorted"],
)
def test_categoricals_are_coded_from_their_codes_as_from_their_values(categories, drawn) -> None:
    # Outside reference: pandas.factorize(sort=True) of the categorical's values.
    pd = require("pandas")
    rng = np.random.default_rng(3)
    drawn = categories if drawn is None else drawn
    series = pd.Series(pd.Categorical(rng.choice(np.asarray(drawn), 500), categories=categories))
    values = np.asarray(series)  # the categories taken at the codes
    codes, keys = build_keys(series, len(series))
    cat = series.cat
    coded = _factorize_categorical(np.asarray(cat.codes), cat.categories, "by", len(series))
    assert coded is not None  # from the codes
    want_codes, want_levels = pd.factorize(values, sort=True)
    np.testing.assert_array_equal(codes, want_codes)
    (levels,) = keys.values()
    np.testing.assert_array_equal(levels, np.asarray(want_levels))
    # And the same dictionary as the values path gives.
    values_codes, values_keys = build_keys(values, len(values))
    np.testing.assert_array_equal(codes, values_codes)
    assert keys.columns[0].kind == values_keys.columns[0].kind
    assert levels.dtype == values_keys.values()[0].dtype


def test_a_categorical_keyed_tree_answers_as_one_keyed_by_its_values() -> None:
    pd = require("pandas")
    rng = np.random.default_rng(8)
    n = 2000
    docks = pd.Categorical(
        rng.choice(["north", "east", "dock 7"], n), categories=["north", "x", "east", "dock 7"]
    )
    x, y = rng.random(n), rng.random(n)
    by_codes = boxwood.RangeTree(x, y, by=pd.Series(docks))
    by_values = boxwood.RangeTree(x, y, by=np.asarray(docks.astype(object)))
    assert list(by_codes.keys) == list(by_values.keys) == ["dock 7", "east", "north"]
    for dock in ["north", "east", "dock 7", "x"]:
        assert by_codes.count(0.2, 0.7, 0.1, 0.9, by=dock) == by_values.count(
            0.2, 0.7, 0.1, 0.9, by=dock
        )
    assert by_codes.count_by_key() == by_values.count_by_key()


def test_bad_categoricals_are_refused_naming_the_row_as_their_values_are() -> None:
    pd = require("pandas")
    missing = pd.Series(pd.Categorical(["a", None, "b"]))
    with pytest.raises(ValueError, match="missing value .* position 1"):
        build_keys(missing, 3)
    # Categories mixing strings and integers: refused like the same values, at their row.
    mixed = pd.Series(pd.Categorical(["a", "a", 3], categories=["a", 3]))
    with pytest.raises(TypeError, match="mixes strings with int values .first at position 2"):
        build_keys(mixed, 3)
    with pytest.raises(ValueError, match="has 3 rows but x has 4"):
        build_keys(pd.Series(pd.Categorical(["a", "b", "a"])), 4)


def test_several_key_columns_are_pandas_groupby_ngroup() -> None:
    # Outside reference: pandas groupby(sort=True).ngroup(), the groups' lexicographic order.
    pd = require("pandas")
    rng = np.random.default_rng(13)
    n = 20_000
    frame = pd.DataFrame(
        {
            "station": rng.integers(-50, 50, n) * 1_000_003,
            "line": rng.choice(["r", "b", "g", "gb"], n),
            "late": rng.random(n) < 0.3,
        }
    )
    columns = tuple(frame[c].to_numpy() for c in frame.columns)
    codes, keys = build_keys(columns, n)
    want = frame.groupby(list(frame.columns), sort=True).ngroup().to_numpy()
    np.testing.assert_array_equal(codes, want)
    assert all(step.dtype == np.uint64 for step in keys.steps)
    firsts = frame.groupby(list(frame.columns), sort=True).size().index
    got = list(zip(*(v.tolist() for v in keys.values())))
    assert got == [tuple(k) for k in firsts.tolist()]
