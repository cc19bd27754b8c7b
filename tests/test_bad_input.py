"""Rejected inputs (the API contract's list of errors), edge cases of valid input, recovery.

Every rejection is checked for its exception type and the words a caller needs: the
argument's name and, where there is one, the position of the first bad element. After each
rejection the tree must answer exactly as before.
"""

from __future__ import annotations

import datetime as dt
import math
import re

import numpy as np
import pandas as pd
import pytest

import boxwood
import reference as ref
from _optional import require

LAYOUTS = ("fast", "compact")
INF = math.inf
BOUND_NAMES = ("x_lo", "x_hi", "y_lo", "y_hi")


def _word(name: str) -> str:
    return rf"\b{re.escape(name)}\b"


def _points(n: int = 30):
    """Deliveries of a made-up bakery in the town of Quillhaven: x = minute of the day the van
    left, y = distance in km, weight = loaves."""
    rng = np.random.default_rng(n)
    x = rng.integers(300, 900, n).astype(np.float64)
    y = rng.integers(0, 25, n).astype(np.float64)
    w = rng.integers(1, 60, n)
    return x, y, w


@pytest.fixture(params=LAYOUTS)
def weighted(request: pytest.FixtureRequest):
    x, y, w = _points()
    return boxwood.RangeTree(x, y, weights=w, layout=request.param), (x, y, w)


def _answers(tree: boxwood.RangeTree) -> tuple:
    """Everything a tree says about a fixed set of boxes, to compare before and after."""
    b = (np.array([300.0, 400.0, 0.0]), np.array([900.0, 600.0, 1e9]), 0, np.array([24, 5, 12]))
    offsets, rows = tree.report(*b, ordered=True)
    out = [tree.count(*b).tolist(), offsets.tolist(), rows.tolist(), len(tree), tree.height]
    if tree.weights_dtype is not None:
        out.append(tree.sum(*b).tolist())
    return tuple(out)


def _assert_consistent(tree: boxwood.RangeTree, x, y, w) -> None:
    """The tree still gives the reference's answers."""
    b = (np.array([300.0, 400.0, 0.0]), np.array([900.0, 600.0, 1e9]), 0, np.array([24, 5, 12]))
    np.testing.assert_array_equal(tree.count(*b), ref.ref_count(x, y, *b))
    got = tree.sum(*b)
    assert got.tolist() == ref.ref_sum(x, y, w, *b).tolist()


QUERY_METHODS = ("count", "sum", "report", "pairs")


def _call(tree: boxwood.RangeTree, method: str, *bounds, **kw):
    return getattr(tree, method)(*bounds, **kw)


# --------------------------------------------------------------------------------------------
# NaN and NaT in the coordinates
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("arg", ["x", "y"])
@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("layout", LAYOUTS)
def test_nan_coordinate_names_argument_and_first_position(arg: str, dtype: str, layout: str):
    good = np.arange(30, dtype=dtype)
    bad = good.copy()
    bad[17] = np.nan
    bad[23] = np.nan
    x, y = (bad, good) if arg == "x" else (good, bad)
    with pytest.raises(ValueError, match=rf"{_word(arg)}.*NaN.*\b17\b"):
        boxwood.RangeTree(x, y, layout=layout)


@pytest.mark.parametrize("arg", ["x", "y"])
@pytest.mark.parametrize("dtype", ["datetime64[ns]", "datetime64[s]", "timedelta64[us]"])
def test_nat_coordinate_names_argument_and_first_position(arg: str, dtype: str) -> None:
    good = np.arange(30).astype(dtype)
    bad = good.copy()
    bad[17] = np.array("NaT", dtype=dtype)
    bad[29] = np.array("NaT", dtype=dtype)
    x, y = (bad, np.arange(30.0)) if arg == "x" else (np.arange(30.0), bad)
    with pytest.raises(ValueError, match=rf"{_word(arg)}.*NaT.*\b17\b"):
        boxwood.RangeTree(x, y)


def test_nan_at_position_zero_is_reported_as_zero() -> None:
    y = np.array([np.nan, 1.0, np.nan])
    with pytest.raises(ValueError, match=r"\by\b.*NaN.*\b0\b"):
        boxwood.RangeTree(np.zeros(3), y)


# --------------------------------------------------------------------------------------------
# NaN in the bounds
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("method", QUERY_METHODS)
@pytest.mark.parametrize("which", range(4))
def test_nan_in_a_bound_array_names_bound_and_position(weighted, method: str, which: int):
    tree, data = weighted
    before = _answers(tree)
    bounds = [np.full(6, 300.0), np.full(6, 900.0), np.zeros(6), np.full(6, 24.0)]
    bounds[which][3] = np.nan
    bounds[which][5] = np.nan
    with pytest.raises(ValueError, match=rf"{_word(BOUND_NAMES[which])}.*NaN.*\b3\b"):
        _call(tree, method, *bounds)
    assert _answers(tree) == before
    _assert_consistent(tree, *data)


@pytest.mark.parametrize("method", (*QUERY_METHODS, "_probe"))
@pytest.mark.parametrize("which", range(4))
def test_nan_scalar_bound_names_bound_and_position_zero(weighted, method: str, which: int):
    tree, data = weighted
    before = _answers(tree)
    bounds: list = [300.0, 900.0, 0.0, 24.0]
    bounds[which] = math.nan
    with pytest.raises(ValueError, match=rf"{_word(BOUND_NAMES[which])}.*NaN.*\b0\b"):
        _call(tree, method, *bounds)
    assert _answers(tree) == before


@pytest.mark.parametrize("method", QUERY_METHODS)
def test_nat_bound_on_a_datetime_axis_is_refused(method: str) -> None:
    x = np.datetime64("2031-01-01T06:00") + np.arange(5).astype("timedelta64[m]")
    tree = boxwood.RangeTree(x, np.arange(5), weights=np.ones(5))
    nat = np.datetime64("NaT")
    with pytest.raises(ValueError, match=rf"{_word('x_hi')}.*\b0\b"):
        _call(tree, method, x[0], nat, 0, 4)
    assert tree.count(x[0], x[4], 0, 4) == 5


@pytest.mark.parametrize("method", QUERY_METHODS)
def test_none_bound_on_a_datetime_axis_is_a_type_error_as_on_a_numeric_axis(method: str) -> None:
    x = np.datetime64("2031-01-01T06:00") + np.arange(5).astype("timedelta64[m]")
    tree = boxwood.RangeTree(x, np.arange(5), weights=np.ones(5))
    with pytest.raises(TypeError, match=r"x_lo must be datetime64 values.*got NoneType"):
        _call(tree, method, None, x[4], 0, 4)
    numeric = boxwood.RangeTree(np.arange(5.0), np.arange(5), weights=np.ones(5))
    with pytest.raises(TypeError, match=r"x_lo must be a number.*got NoneType"):
        _call(numeric, method, None, 4.0, 0, 4)


# --------------------------------------------------------------------------------------------
# Lengths, dtypes and dimensions of the columns
# --------------------------------------------------------------------------------------------


def test_y_length_mismatch_names_both_lengths() -> None:
    with pytest.raises(ValueError, match=r"\by\b.*\b9\b.*\bx\b.*\b10\b"):
        boxwood.RangeTree(np.arange(10.0), np.arange(9.0))


def test_weights_length_mismatch_names_both_lengths() -> None:
    with pytest.raises(ValueError, match=r"\bweights\b.*\b11\b.*\bx\b.*\b10\b"):
        boxwood.RangeTree(np.arange(10.0), np.arange(10.0), weights=np.ones(11))


UNSUPPORTED = [
    np.array([True, False, True]),
    np.array([1 + 2j, 3j, 0j]),
    np.array(["a", "b", "c"], dtype=object),
    np.array([1, 2, 3], dtype=np.uint64),
    np.array([1, 2, 3], dtype=np.float16),
]


@pytest.mark.parametrize("arg", ["x", "y"])
@pytest.mark.parametrize("bad", UNSUPPORTED, ids=lambda a: str(a.dtype))
def test_unsupported_coordinate_dtype_names_argument_and_dtype(arg: str, bad: np.ndarray):
    good = np.arange(3.0)
    x, y = (bad, good) if arg == "x" else (good, bad)
    with pytest.raises(TypeError, match=rf"{_word(arg)}.*{re.escape(str(bad.dtype))}"):
        boxwood.RangeTree(x, y)


@pytest.mark.parametrize("bad", UNSUPPORTED[1:3] + UNSUPPORTED[4:], ids=lambda a: str(a.dtype))
def test_unsupported_weights_dtype_names_weights_and_dtype(bad: np.ndarray) -> None:
    with pytest.raises(TypeError, match=rf"\bweights\b.*{re.escape(str(bad.dtype))}"):
        boxwood.RangeTree(np.arange(3.0), np.arange(3.0), weights=bad)


def test_list_of_strings_is_refused_with_a_type_error() -> None:
    with pytest.raises(TypeError, match=r"\bx\b"):
        boxwood.RangeTree(["a", "b"], [1.0, 2.0])


@pytest.mark.parametrize("arg", ["x", "y", "weights"])
@pytest.mark.parametrize("shape", [(3, 2), (6, 1), ()])
def test_non_1d_columns_are_refused(arg: str, shape: tuple) -> None:
    cols = {"x": np.arange(6.0), "y": np.arange(6.0), "weights": np.ones(6)}
    cols[arg] = np.ones(shape)
    with pytest.raises(ValueError, match="1-D"):
        boxwood.RangeTree(cols["x"], cols["y"], weights=cols["weights"])


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf])
@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_nan_or_infinite_weights_are_refused(value: float, dtype: str) -> None:
    w = np.ones(8, dtype=dtype)
    w[5] = value
    with pytest.raises(ValueError, match=r"\bweights\b"):
        boxwood.RangeTree(np.arange(8.0), np.arange(8.0), weights=w)


def test_unknown_layout_is_refused() -> None:
    # Not in the API contract's list of errors, but a misspelt layout must not pass silently.
    with pytest.raises((ValueError, TypeError), match="layout"):
        boxwood.RangeTree(np.arange(3.0), np.arange(3.0), layout="compressed")


# --------------------------------------------------------------------------------------------
# Bounds of the wrong type, bad inclusive, shapes that do not broadcast
# --------------------------------------------------------------------------------------------

DATETIME_BOUNDS = [
    np.datetime64("2031-01-01T00:00"),
    pd.Timestamp("2031-01-01"),
    dt.datetime(2031, 1, 1),
    np.array(["2031-01-01", "2031-01-02"], dtype="datetime64[D]"),
    np.timedelta64(5, "s"),
    dt.timedelta(seconds=5),
]


@pytest.mark.parametrize("method", QUERY_METHODS)
@pytest.mark.parametrize("bound", DATETIME_BOUNDS, ids=lambda b: type(b).__name__)
@pytest.mark.parametrize("which", range(4))
def test_time_bound_on_a_numeric_axis_is_a_type_error(weighted, method, bound, which):
    tree, data = weighted
    before = _answers(tree)
    bounds: list = [300.0, 900.0, 0.0, 24.0]
    bounds[which] = bound
    with pytest.raises(TypeError):
        _call(tree, method, *bounds)
    assert _answers(tree) == before


NUMERIC_BOUNDS = [5, 1.5, np.int64(5), np.float64(2.0), np.array([1, 2]), np.array([1.0, INF])]


@pytest.mark.parametrize("method", QUERY_METHODS)
@pytest.mark.parametrize("bound", NUMERIC_BOUNDS, ids=repr)
@pytest.mark.parametrize("axis_dtype", ["datetime64[ns]", "timedelta64[ms]"])
def test_finite_numeric_bound_on_a_time_axis_is_a_type_error(method, bound, axis_dtype):
    x = np.arange(5).astype(axis_dtype)
    tree = boxwood.RangeTree(x, np.arange(5.0), weights=np.ones(5))
    with pytest.raises(TypeError):
        _call(tree, method, bound, x[4], 0.0, 4.0)
    with pytest.raises(TypeError):
        _call(tree, method, x[0], bound, 0.0, 4.0)
    # ±inf is allowed on a time axis, and the tree is intact.
    assert tree.count(-INF, INF, -INF, INF) == 5
    assert tree.count(x[1], INF, 0.0, 4.0) == 4


@pytest.mark.parametrize("method", (*QUERY_METHODS, "_probe"))
@pytest.mark.parametrize("inclusive", ["BOTH", "Both", "closed", "", "both ", "left,right"])
def test_unknown_inclusive_is_a_value_error(weighted, method: str, inclusive: str) -> None:
    tree, data = weighted
    before = _answers(tree)
    with pytest.raises(ValueError, match="inclusive"):
        _call(tree, method, 300.0, 900.0, 0.0, 24.0, inclusive=inclusive)
    assert _answers(tree) == before


_NOT_A_WORD_CASES = [(m, "scalar") for m in (*QUERY_METHODS, "_probe")] + [
    (m, "array") for m in QUERY_METHODS
]


@pytest.mark.parametrize(
    ("method", "shape"), _NOT_A_WORD_CASES, ids=[f"{m}-{s}" for m, s in _NOT_A_WORD_CASES]
)
@pytest.mark.parametrize("inclusive", [None, 1, True], ids=repr)
def test_inclusive_that_is_not_a_string_is_a_value_error(weighted, method, shape, inclusive):
    """Not one of the four words is not one of the four words, whatever its type."""
    tree, _ = weighted
    x_lo = 300.0 if shape == "scalar" else np.array([300.0])
    before = _answers(tree)
    with pytest.raises(ValueError, match="inclusive"):
        _call(tree, method, x_lo, 900.0, 0.0, 24.0, inclusive=inclusive)
    assert _answers(tree) == before


@pytest.mark.parametrize("method", QUERY_METHODS)
@pytest.mark.parametrize("shapes", [((3,), (4,)), ((2, 3), (3, 2)), ((5,), (2, 1), (3,))], ids=str)
def test_bounds_that_do_not_broadcast_are_a_value_error(weighted, method: str, shapes) -> None:
    tree, data = weighted
    before = _answers(tree)
    bounds: list = [300.0, 900.0, 0.0, 24.0]
    for i, s in enumerate(shapes):
        bounds[i] = np.full(s, bounds[i])
    with pytest.raises(ValueError, match=re.compile("broadcast|shape", re.IGNORECASE)):
        _call(tree, method, *bounds)
    assert _answers(tree) == before


# --------------------------------------------------------------------------------------------
# Empty trees and sums
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("dtype", ["float64", "int64", "datetime64[ns]"])
def test_empty_tree_counts_zero_and_reports_nothing(layout: str, dtype: str) -> None:
    empty = np.array([], dtype=dtype)
    tree = boxwood.RangeTree(empty, np.array([], dtype=np.float64), layout=layout)
    assert len(tree) == 0
    assert tree.height == 0
    assert tree.count(-INF, INF, -INF, INF) == 0
    counts = tree.count(np.array([-INF, -INF, -INF]), INF, -INF, INF)
    assert counts.dtype == np.int64
    np.testing.assert_array_equal(counts, [0, 0, 0])
    offsets, rows = tree.report(-INF, INF, -INF, INF)
    np.testing.assert_array_equal(offsets, [0, 0])
    assert rows.dtype == np.int64 and rows.shape == (0,)
    offsets, rows = tree.report(np.full(4, -INF), INF, -INF, INF)  # ±inf: fine on any axis
    np.testing.assert_array_equal(offsets, [0, 0, 0, 0, 0])
    box, row = tree.pairs(np.full(4, -INF), INF, -INF, INF)
    assert box.shape == row.shape == (0,)
    assert box.dtype == np.int64 and row.dtype == np.int64


@pytest.mark.parametrize("layout", LAYOUTS)
def test_empty_tree_with_weights_sums_to_zero(layout: str) -> None:
    tree = boxwood.RangeTree([], [], weights=np.array([], dtype=np.int64), layout=layout)
    assert tree.sum(-INF, INF, -INF, INF) == 0
    ftree = boxwood.RangeTree([], [], weights=np.array([], dtype=np.float64), layout=layout)
    np.testing.assert_array_equal(ftree.sum(np.zeros(2), INF, -INF, INF), [0.0, 0.0])


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("bounds", [(0, 10, 0, 10), (np.arange(3), 10, 0, 10)], ids=["1", "3"])
def test_sum_without_weights_is_a_value_error(layout: str, bounds) -> None:
    tree = boxwood.RangeTree(np.arange(5.0), np.arange(5.0), layout=layout)
    assert tree.weights_dtype is None
    with pytest.raises(ValueError, match="weights"):
        tree.sum(*bounds)
    assert tree.count(0, 10, 0, 10) == 5


@pytest.mark.parametrize("layout", LAYOUTS)
def test_int64_sum_overflow_raises_and_the_tree_survives(layout: str) -> None:
    x = np.array([1.0, 2.0, 3.0])
    tree = boxwood.RangeTree(x, x, weights=np.array([2**62, 2**62, 2**62]), layout=layout)
    with pytest.raises(OverflowError):
        tree.sum(0, 10, 0, 10)  # 3 * 2**62 > 2**63 - 1
    with pytest.raises(OverflowError):
        tree.sum(np.array([1, 0]), np.array([1, 10]), 0, 10)  # only the second box overflows
    with pytest.raises(OverflowError):
        tree.sum(0, 2.5, 0, 10)  # two of them: 2**63, one past the int64 range
    # A box around a single point is fine, and the tree answers as before.
    assert tree.sum(1, 1, 0, 10) == 2**62
    assert tree.sum(0.5, 1.5, -INF, INF) == 2**62
    got = tree.sum(np.array([1, 2, 3]), np.array([1, 2, 3]), 0, 10)
    assert got.dtype == np.int64
    np.testing.assert_array_equal(got, [2**62] * 3)
    assert tree.count(0, 10, 0, 10) == 3


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize(
    "weights",
    [
        [2**62, 2**62, -(2**62)],  # the running sum passes 2**63, the total does not
        [2**63 - 1, 1, -1],
        [-(2**62), -(2**62)],  # exactly -2**63: fits
        [-(2**63), 5, -5],
    ],
    ids=str,
)
def test_int64_sums_that_fit_do_not_raise(layout: str, weights: list) -> None:
    n = len(weights)
    x = np.arange(n, dtype=np.int64)
    tree = boxwood.RangeTree(x, x, weights=np.array(weights, dtype=np.int64), layout=layout)
    total = tree.sum(-INF, INF, -INF, INF)
    assert isinstance(total, int) and total == sum(weights)
    # Every sub-range, against exact Python arithmetic.
    for i in range(n):
        for j in range(i, n):
            exact = sum(weights[i : j + 1])
            if ref.fits_int64(exact):
                assert tree.sum(i, j, -INF, INF) == exact
            else:
                with pytest.raises(OverflowError):
                    tree.sum(i, j, -INF, INF)


@pytest.mark.parametrize("layout", LAYOUTS)
def test_int64_sum_one_past_the_edge_overflows(layout: str) -> None:
    x = np.arange(2.0)
    tree = boxwood.RangeTree(x, x, weights=np.array([2**62, 2**62]), layout=layout)  # 2**63
    with pytest.raises(OverflowError):
        tree.sum(-INF, INF, -INF, INF)
    neg = boxwood.RangeTree(x, x, weights=np.array([-(2**63), -1]), layout=layout)
    with pytest.raises(OverflowError):
        neg.sum(-INF, INF, -INF, INF)
    assert neg.sum(0, 0, -INF, INF) == -(2**63)


# --------------------------------------------------------------------------------------------
# Accepted input forms
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("layout", LAYOUTS)
def test_lists_are_accepted_and_become_int64_and_float64(layout: str) -> None:
    x = [3, 1, 4, 1, 5, 9, 2, 6]
    y = [2.5, 7.0, 1.0, 8.0, 2.5, 8.0, 1.5, 0.0]
    w = [10, 20, 30, 40, 50, 60, 70, 80]
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    assert tree.x_dtype == np.int64 and tree.y_dtype == np.float64
    assert tree.weights_dtype == np.int64
    lo, hi = [1, 4], [5, 9]
    np.testing.assert_array_equal(
        tree.count(lo, hi, [0.0, 0.0], [8.0, 2.5]),
        ref.ref_count(x, y, lo, hi, [0.0, 0.0], [8.0, 2.5]),
    )
    # Hand-checked: x in [1, 5] and y in [0, 8] is rows 0, 1, 2, 3, 4 and 6 (x = 2, y = 1.5).
    offsets, rows = tree.report(1, 5, 0.0, 8.0, ordered=True)
    assert rows.tolist() == [0, 1, 2, 3, 4, 6]
    assert tree.sum(1, 5, 0.0, 8.0) == 220


@pytest.mark.parametrize("layout", LAYOUTS)
def test_pandas_series_are_accepted_and_rows_are_positions_not_labels(layout: str) -> None:
    index = [100, 7, 55, 3, 42]
    x = pd.Series([1.0, 2.0, 3.0, 4.0, 5.0], index=index)
    y = pd.Series([5, 4, 3, 2, 1], index=index, dtype="int32")
    w = pd.Series([0.5, 1.5, 2.5, 3.5, 4.5], index=index)
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    assert tree.y_dtype == np.int32
    offsets, rows = tree.report(2.0, 4.0, -INF, INF, ordered=True)
    assert rows.tolist() == [1, 2, 3]  # positions, whatever the index says
    assert tree.sum(2.0, 4.0, -INF, INF) == 7.5
    # Series and lists as bounds.
    lo = pd.Series([1.0, 3.0], index=["a", "b"])
    np.testing.assert_array_equal(tree.count(lo, [2.0, 5.0], 0, 10), [2, 3])
    box, row = tree.pairs(lo, [2.0, 5.0], 0, 10, ordered=True)
    assert box.tolist() == [0, 0, 1, 1, 1] and row.tolist() == [0, 1, 2, 3, 4]


def test_internal_error_is_a_runtime_error() -> None:
    assert issubclass(boxwood.InternalError, RuntimeError)


def test_max_rows_is_the_32_bit_row_id_limit() -> None:
    assert boxwood._MAX_ROWS == 2**32 - 1


@pytest.mark.parametrize("on_worker", [False, True], ids=["calling-thread", "rayon-worker"])
def test_a_rust_panic_becomes_internal_error(on_worker):
    # The bindings run every engine call under catch_unwind; a panic (here a deliberate one,
    # on the calling thread or inside a rayon worker) must surface as an exception.
    from boxwood._boxwood import _panic_for_tests

    with pytest.raises(boxwood.InternalError, match="deliberate panic"):
        _panic_for_tests(on_worker)
    # The process and the thread pool are still fine afterwards.
    tree = boxwood.RangeTree([1.0, 2.0], [1.0, 2.0])
    assert tree.count([0.0], [3.0], [0.0], [3.0]).tolist() == [2]


# --------------------------------------------------------------------------- found by trial


def test_tz_aware_and_naive_times_do_not_mix():
    # pandas refuses to compare tz-aware with naive datetimes (pandas docs, "Time zone
    # handling"); boxwood refuses the same mixture instead of guessing a zone.
    pd = require("pandas")
    x = pd.Series(pd.date_range("2025-01-01", periods=6, freq="h", tz="America/New_York"))
    tree = boxwood.RangeTree(x, np.arange(6.0))
    lo = pd.Timestamp("2025-01-01 00:00", tz="America/New_York")
    hi = pd.Timestamp("2025-01-01 02:00", tz="America/New_York")
    assert tree.count(lo, hi, 0, 9) == int(x.between(lo, hi).sum()) == 3
    assert tree.count(lo.tz_convert("Asia/Tokyo"), hi, 0, 9) == 3  # instants, any zone
    assert "America/New_York" in repr(tree)
    for naive in (pd.Timestamp("2025-01-01"), "2025-01-01T00:00", np.datetime64("2025-01-01")):
        with pytest.raises(TypeError, match="tz-aware.*naive"):
            tree.count(naive, hi, 0, 9)
    naive_tree = boxwood.RangeTree(x.dt.tz_localize(None), np.arange(6.0))
    with pytest.raises(TypeError, match="is tz-aware"):
        naive_tree.count(lo, pd.Timestamp("2025-01-02"), 0, 9)


def test_string_time_bounds_in_arrays():
    x = np.array(["2025-01-01T00", "2025-01-01T01", "2025-01-01T02"], dtype="datetime64[s]")
    tree = boxwood.RangeTree(x, [1.0, 2.0, 3.0])
    got = tree.count(["2025-01-01T01", "2025-01-01T00"], "2025-01-01T03", 0, 10)
    assert got.tolist() == [2, 3]


def test_non_native_byte_order_is_read_correctly():
    x = np.array([1.0, 2.0, 3.0], dtype=">f8")
    y = np.array([10, 20, 30], dtype=">i8")
    tree = boxwood.RangeTree(x, y, weights=np.array([1, 2, 4], dtype=">i8"))
    assert tree.count(1.5, 3.0, 0, 100) == 2
    assert tree.sum(1.5, 3.0, 0, 100) == 6


@pytest.mark.parametrize(
    "values, error, words",
    [
        (np.ma.array([1.0, 2.0, 3.0], mask=[0, 1, 0]), ValueError, "masked values .* position 1"),
        ({1.0, 2.0, 3.0}, TypeError, "array-like .* set"),
        ((v for v in [1.0, 2.0, 3.0]), TypeError, "array-like .* generator"),
        (["2025-01-01"] * 3, TypeError, "datetime64"),
        (np.array([2**63 - 1] * 3, dtype="datetime64[ns]"), ValueError, "largest representable"),
    ],
    ids=["masked", "set", "generator", "strings", "largest-tick"],
)
def test_columns_a_new_user_might_pass(values, error, words):
    with pytest.raises(error, match=words):
        boxwood.RangeTree(values, [1.0, 2.0, 3.0])


def test_unmasked_masked_array_is_accepted():
    tree = boxwood.RangeTree(np.ma.array([1.0, 2.0, 3.0]), [1.0, 2.0, 3.0])
    assert tree.count(0, 9, 0, 9) == 3
