"""Property tests: count, report, pairs and sum against the plain-filtering reference.

Every test runs for both layouts. Points and boxes come from hypothesis strategies that lean
towards the cases a range tree gets wrong: tiny and empty inputs, heavy duplicates, bounds
that sit exactly on point coordinates, infinite and inverted bounds, int64 values next to
±2**63, nanosecond timestamps that differ by one tick, and mixed dtypes on the two axes.
"""

from __future__ import annotations

import datetime as dt
import functools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import assume, given, note, settings
from hypothesis import strategies as st

import boxwood
import reference as ref

LAYOUTS = ("fast", "compact")
INCLUSIVE = ref.INCLUSIVE
INF = math.inf
INT64_MIN, INT64_MAX = ref.INT64_MIN, ref.INT64_MAX

NUMERIC_DTYPES = (
    "float64",
    "float32",
    "int64",
    "int32",
    "int16",
    "int8",
    "uint32",
    "uint16",
    "uint8",
)
TIME_DTYPES = (
    "datetime64[ns]",
    "datetime64[us]",
    "datetime64[s]",
    "datetime64[D]",
    "timedelta64[ns]",
    "timedelta64[ms]",
)
ALL_DTYPES = NUMERIC_DTYPES + TIME_DTYPES

# About 2023-11-14 in nanoseconds since the epoch: where real timestamps live.
NS_NOW = 1_700_000_000_000_000_000
_NS_PER = {"ns": 1, "us": 10**3, "ms": 10**6, "s": 10**9, "D": 86_400 * 10**9}


def examples(fraction: float) -> settings:
    """A share of the active profile's example budget (so the 'thorough' profile scales)."""
    return settings(max_examples=max(10, int(settings.default.max_examples * fraction)))


# --------------------------------------------------------------------------------------------
# Points
# --------------------------------------------------------------------------------------------
# Strategies are built once (module constants or cached by their arguments) and values are
# picked from coordinate lists by drawn indices: building fresh strategies for every example
# costs more than the tree and the reference together.


@functools.cache
def _below(k: int) -> st.SearchStrategy:
    """An index in range(k)."""
    return st.integers(0, k - 1)


_BOOL = st.booleans()


def _pick(draw, options: tuple | list) -> Any:
    return options[draw(_below(len(options)))]


def _kind(dtype: np.dtype) -> str:
    if dtype.kind == "f":
        return "float"
    if dtype.kind in "iu":
        return "int"
    return "time"


@dataclass
class Axis:
    """One coordinate column and the raw values it was made from."""

    values: np.ndarray
    #: Python floats (float axes), ints (int axes) or int ticks in the axis unit (time axes).
    raw: list
    #: floor() of every finite raw value, as ints: starting points for integer bounds.
    floors: list = field(default_factory=list)

    def __post_init__(self) -> None:
        if not self.floors:
            self.floors = [math.floor(v) for v in self.raw if math.isfinite(v)]

    @property
    def dtype(self) -> np.dtype:
        return self.values.dtype

    @property
    def kind(self) -> str:
        return _kind(self.dtype)


def make_axis(raw: list, dtype: Any) -> Axis:
    dtype = np.dtype(dtype)
    if dtype.kind in "Mm":
        values = np.array(raw, dtype=np.int64).view(dtype)
    else:
        values = np.array(raw, dtype=dtype)
    # Keep raw as exactly what the array holds (float32 rounding, for instance).
    raw = values.view(np.int64).tolist() if dtype.kind in "Mm" else values.tolist()
    return Axis(values, raw)


@functools.cache
def elements(dtype_name: str) -> st.SearchStrategy:
    """Raw values for one axis dtype, leaning towards edges and exactness traps."""
    dtype = np.dtype(dtype_name)
    if dtype == np.float64:
        return st.one_of(
            st.floats(allow_nan=False),  # with ±inf, -0.0 and subnormals
            st.integers(-4, 4).map(float),
            st.integers(-4, 4).map(lambda k: float(2**53 + 2 * k)),
            st.floats(-1e3, 1e3),
        )
    if dtype == np.float32:
        return st.one_of(
            st.floats(width=32, allow_nan=False),
            st.integers(-4, 4).map(float),
            st.integers(-4, 4).map(lambda k: float(2**24 + 2 * k)),
        )
    if dtype.kind in "iu":
        info = np.iinfo(dtype)
        lo, hi = int(info.min), int(info.max)
        return st.one_of(
            st.integers(lo, hi),
            st.integers(max(lo, -4), min(hi, 4)),
            st.integers(lo, lo + 3),
            st.integers(hi - 3, hi),
        )
    unit = np.datetime_data(dtype)[0]
    centre = NS_NOW // _NS_PER[unit] if dtype.kind == "M" else 0
    # INT64_MIN is NaT; INT64_MAX is kept free by boxwood for exact unbounded time boxes.
    return st.one_of(
        st.integers(centre - 3, centre + 3),
        st.integers(INT64_MIN + 1, INT64_MAX - 1),
        st.integers(INT64_MIN + 1, INT64_MIN + 3),
        st.integers(INT64_MAX - 4, INT64_MAX - 1),
    )


@st.composite
def axes(draw, dtype: Any, n: int, pool_size: int | None = None) -> Axis:
    """A column of n values; often drawn from a pool of 1-3 values (heavy duplicates)."""
    elem = elements(str(np.dtype(dtype)))
    if pool_size is None and draw(_BOOL):
        pool_size = 1 + draw(_below(3))
    if pool_size is not None:
        pool = [draw(elem) for _ in range(pool_size)]
        raw = [_pick(draw, pool) for _ in range(n)]
    else:
        raw = [draw(elem) for _ in range(n)]
    return make_axis(raw, dtype)


WEIGHT_KINDS = ("int_small", "int_big", "float_int", "float")
_SMALL_INT_WEIGHT_DTYPES = ("int64", "int32", "int16", "int8", "uint8", "uint32")
_BIG_INT_WEIGHT = st.one_of(
    st.integers(-(2**62), 2**62),
    st.sampled_from((INT64_MAX, INT64_MIN, 2**62, -(2**62), 1, -1, 0)),
)
_FLOAT_INT_WEIGHT = st.integers(-1000, 1000).map(float)
_FLOAT64_WEIGHT = st.floats(-1e200, 1e200, allow_nan=False, allow_infinity=False)
_FLOAT32_WEIGHT = st.floats(width=32, allow_nan=False, allow_infinity=False)


def make_weights(draw, n: int, kind: str) -> np.ndarray:
    if kind == "int_small":
        dtype = _pick(draw, _SMALL_INT_WEIGHT_DTYPES)
        info = np.iinfo(dtype)
        vals = st.integers(max(int(info.min), -1000), min(int(info.max), 1000))
        return np.array([draw(vals) for _ in range(n)], dtype=dtype)
    if kind == "int_big":
        return np.array([draw(_BIG_INT_WEIGHT) for _ in range(n)], dtype=np.int64)
    if kind == "float_int":
        dtype = _pick(draw, ("float64", "float32"))
        return np.array([draw(_FLOAT_INT_WEIGHT) for _ in range(n)], dtype=dtype)
    if kind == "float":
        if draw(_BOOL):
            return np.array([draw(_FLOAT64_WEIGHT) for _ in range(n)], dtype=np.float64)
        return np.array([draw(_FLOAT32_WEIGHT) for _ in range(n)], dtype=np.float32)
    raise AssertionError(kind)


@dataclass
class Points:
    x: Axis
    y: Axis
    weights: np.ndarray | None = None

    @property
    def n(self) -> int:
        return len(self.x.values)

    def tree(self, layout: str) -> boxwood.RangeTree:
        tree = boxwood.RangeTree(self.x.values, self.y.values, weights=self.weights, layout=layout)
        assert len(tree) == self.n
        assert tree.layout == layout
        return tree


@st.composite
def points(
    draw,
    x_dtypes: tuple[str, ...] = ALL_DTYPES,
    y_dtypes: tuple[str, ...] = ALL_DTYPES,
    min_n: int = 0,
    max_n: int = 40,
    weights: tuple[str, ...] = (),
    x_pool: int | None = None,
    y_pool: int | None = None,
) -> Points:
    n = draw(st.integers(min_n, max_n))
    x = draw(axes(_pick(draw, x_dtypes), n, x_pool))
    y = draw(axes(_pick(draw, y_dtypes), n, y_pool))
    w = make_weights(draw, n, _pick(draw, weights)) if weights else None
    note(f"x={x.values!r}\ny={y.values!r}\nweights={w!r}")
    return Points(x, y, w)


# --------------------------------------------------------------------------------------------
# Boxes
# --------------------------------------------------------------------------------------------


def _clip64(v: int) -> int:
    return max(INT64_MIN, min(INT64_MAX, v))


_FLOAT_MOVES = ("same", "same", "up", "down", "plus_half", "minus_half")


def _float_near(c: float | int, how: str) -> float:
    f = float(c)
    if how == "up":
        return math.nextafter(f, INF)
    if how == "down":
        return math.nextafter(f, -INF)
    if how == "plus_half":
        return f + 0.5
    if how == "minus_half":
        return f - 0.5
    return f


_SIGNED_INF = st.sampled_from((INF, -INF))
_OTHER_INT = st.one_of(
    st.integers(-5, 5),
    st.integers(INT64_MIN, INT64_MAX),
    st.integers(-3, 3).map(lambda d: 2**53 + d),
    st.integers(-3, 3).map(lambda d: -(2**53) + d),
    st.sampled_from((INT64_MIN, INT64_MIN + 1, INT64_MAX - 1, INT64_MAX)),
)
_OTHER_FLOAT = st.one_of(st.floats(allow_nan=False), _SIGNED_INF, st.floats(-10, 10))
_OTHER_TIME = st.one_of(st.integers(INT64_MIN + 1, INT64_MAX), st.integers(NS_NOW - 3, NS_NOW + 3))
_NEAR = st.integers(0, 3)  # 0: an unrelated value; 1-3: at or next to a coordinate
_STEP = st.integers(-1, 1)


def draw_bound(draw, axis: Axis, kind: str) -> Any:
    """One raw bound of the given kind for an axis, often at or next to a coordinate."""
    if kind == "inf":
        return draw(_SIGNED_INF)
    if kind == "int":
        if axis.floors and draw(_NEAR):
            return _clip64(_pick(draw, axis.floors) + draw(_STEP))
        return draw(_OTHER_INT)
    if kind == "float":
        if axis.raw and draw(_NEAR):
            return _float_near(_pick(draw, axis.raw), _pick(draw, _FLOAT_MOVES))
        return draw(_OTHER_FLOAT)
    if kind == "time":
        if axis.raw and draw(_NEAR):
            return max(INT64_MIN + 1, min(INT64_MAX, _pick(draw, axis.raw) + draw(_STEP)))
        return draw(_OTHER_TIME)
    raise AssertionError(kind)


def bound_kinds(axis: Axis) -> tuple[str, ...]:
    if axis.kind == "int":
        return ("int", "int", "float")
    if axis.kind == "float":
        return ("float", "float", "int")
    return ("time", "time", "time", "inf")


def materialize(axis: Axis, kind: str, raw: list, scalar: bool, numpy_container: bool) -> Any:
    """A bound as the caller would pass it: a Python or numpy scalar, a list or an array."""
    if scalar:
        (v,) = raw
        if kind == "time":
            unit = np.datetime_data(axis.dtype)[0]
            return np.datetime64(v, unit) if axis.dtype.kind == "M" else np.timedelta64(v, unit)
        if kind == "int":
            return np.int64(v) if numpy_container else v
        return np.float64(v) if numpy_container else v
    if kind == "time":
        return np.array(raw, dtype=np.int64).view(axis.dtype)
    if kind == "int":
        return np.array(raw, dtype=np.int64) if numpy_container else list(raw)
    if kind == "inf":
        return np.array(raw, dtype=np.float64)
    return np.array(raw, dtype=np.float64) if numpy_container else list(raw)


@dataclass
class Query:
    bounds: tuple
    inclusive: str = "both"
    ordered: bool = False

    @property
    def scalar(self) -> bool:
        return ref.all_scalar(self.bounds)


@st.composite
def queries(
    draw,
    pts: Points,
    max_boxes: int = 6,
    scalar: bool | None = None,
    kinds: dict[str, tuple[str, ...]] | None = None,
) -> Query:
    """Four bounds for pts' axes: each a scalar or an array of q values, of one kind."""
    q = 1 + draw(_below(max_boxes))
    bounds = []
    for axis in (pts.x, pts.x, pts.y, pts.y):
        kind = _pick(draw, (kinds or {}).get(axis.kind) or bound_kinds(axis))
        is_scalar = draw(_BOOL) if scalar is None else scalar
        raw = [draw_bound(draw, axis, kind) for _ in range(1 if is_scalar else q)]
        bounds.append(materialize(axis, kind, raw, is_scalar, draw(_BOOL)))
    query = Query(tuple(bounds), _pick(draw, INCLUSIVE), draw(_BOOL))
    note(f"query={query!r}")
    return query


# --------------------------------------------------------------------------------------------
# Checks
# --------------------------------------------------------------------------------------------


def check_count(tree: boxwood.RangeTree, pts: Points, q: Query) -> Any:
    got = tree.count(*q.bounds, inclusive=q.inclusive)
    expected = ref.ref_count(pts.x.values, pts.y.values, *q.bounds, inclusive=q.inclusive)
    if q.scalar:
        assert isinstance(got, int) and not isinstance(got, bool), type(got)
        assert got == expected
    else:
        assert isinstance(got, np.ndarray) and got.dtype == np.int64
        assert got.shape == expected.shape
        np.testing.assert_array_equal(got, expected)
    return got


def check_report(tree: boxwood.RangeTree, pts: Points, q: Query) -> tuple:
    offsets, rows = tree.report(*q.bounds, inclusive=q.inclusive, ordered=q.ordered)
    expected = ref.ref_rows(pts.x.values, pts.y.values, *q.bounds, inclusive=q.inclusive)
    assert offsets.dtype == np.int64 and rows.dtype == np.int64
    assert offsets.shape == (len(expected) + 1,) and rows.ndim == 1
    assert offsets[0] == 0 and offsets[-1] == len(rows)
    assert np.all(np.diff(offsets) >= 0)
    for i, want in enumerate(expected):
        got = rows[offsets[i] : offsets[i + 1]].tolist()
        assert (got if q.ordered else sorted(got)) == want, f"box {i}"
    return offsets, rows


def check_pairs(tree: boxwood.RangeTree, pts: Points, q: Query) -> tuple:
    box, row = tree.pairs(*q.bounds, inclusive=q.inclusive, ordered=q.ordered)
    expected = ref.ref_rows(pts.x.values, pts.y.values, *q.bounds, inclusive=q.inclusive)
    assert box.dtype == np.int64 and row.dtype == np.int64
    assert box.ndim == 1 and box.shape == row.shape
    assert box.tolist() == [i for i, want in enumerate(expected) for _ in want]
    for i, want in enumerate(expected):
        got = row[box == i].tolist()
        assert (got if q.ordered else sorted(got)) == want, f"box {i}"
    return box, row


def float_tolerance(weights: np.ndarray, height: int) -> float:
    """Rounding room for float sums built from prefix sums: none when every partial sum is
    an integer below 2**53 (then every addition and subtraction is exact)."""
    ws = [float(w) for w in weights.tolist()]
    total = math.fsum(abs(w) for w in ws)
    if all(w.is_integer() for w in ws) and total < 2**53:
        return 0.0
    return 4.0 * (len(ws) + 1) * (height + 2) * 2.0**-52 * total


def check_sum(tree: boxwood.RangeTree, pts: Points, q: Query) -> None:
    assert pts.weights is not None
    expected = ref.ref_sum(
        pts.x.values, pts.y.values, pts.weights, *q.bounds, inclusive=q.inclusive
    )
    flat = [expected] if q.scalar else expected.reshape(-1).tolist()
    if pts.weights.dtype.kind in "iu":
        if not all(ref.fits_int64(v) for v in flat):
            with pytest.raises(OverflowError):
                tree.sum(*q.bounds, inclusive=q.inclusive)
            return
        got = tree.sum(*q.bounds, inclusive=q.inclusive)
        if q.scalar:
            assert isinstance(got, int) and not isinstance(got, bool), type(got)
            assert got == expected
        else:
            assert isinstance(got, np.ndarray) and got.dtype == np.int64
            assert got.shape == expected.shape
            assert got.reshape(-1).tolist() == flat
        return
    got = tree.sum(*q.bounds, inclusive=q.inclusive)
    tol = float_tolerance(pts.weights, tree.height)
    if q.scalar:
        assert isinstance(got, float), type(got)
        got_flat = [got]
    else:
        assert isinstance(got, np.ndarray) and got.dtype == np.float64
        assert got.shape == expected.shape
        got_flat = got.reshape(-1).tolist()
    for g, e in zip(got_flat, flat):
        assert abs(g - e) <= tol, (g, e, tol)


# --------------------------------------------------------------------------------------------
# The properties
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(1.5)
@given(data=st.data())
def test_count_matches_reference(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points())
    tree = pts.tree(layout)
    for _ in range(3):
        check_count(tree, pts, data.draw(queries(pts)))


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(1.5)
@given(data=st.data())
def test_report_matches_reference(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points())
    tree = pts.tree(layout)
    for _ in range(3):
        check_report(tree, pts, data.draw(queries(pts)))


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_pairs_matches_reference(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points())
    tree = pts.tree(layout)
    for _ in range(2):
        check_pairs(tree, pts, data.draw(queries(pts)))


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_report_pairs_and_count_agree(layout: str, data: st.DataObject) -> None:
    """pairs is the CSR of report expanded, and count is np.diff(offsets), box by box."""
    pts = data.draw(points())
    tree = pts.tree(layout)
    q = data.draw(queries(pts))
    for ordered in (False, True):
        offsets, rows = tree.report(*q.bounds, inclusive=q.inclusive, ordered=ordered)
        box, row = tree.pairs(*q.bounds, inclusive=q.inclusive, ordered=ordered)
        counts = np.asarray(tree.count(*q.bounds, inclusive=q.inclusive)).reshape(-1)
        np.testing.assert_array_equal(np.diff(offsets), counts)
        np.testing.assert_array_equal(box, np.repeat(np.arange(len(counts)), counts))
        for i in range(len(counts)):
            a, b = rows[offsets[i] : offsets[i + 1]], row[box == i]
            if ordered:
                np.testing.assert_array_equal(a, b)
                assert np.all(np.diff(a) > 0)
            else:
                np.testing.assert_array_equal(np.sort(a), np.sort(b))


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_sum_int_weights_matches_reference(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(weights=("int_small", "int_big")))
    tree = pts.tree(layout)
    assert tree.weights_dtype == np.int64
    for _ in range(3):
        check_sum(tree, pts, data.draw(queries(pts)))


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_sum_float_weights_matches_reference(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(weights=("float_int", "float")))
    tree = pts.tree(layout)
    assert tree.weights_dtype == np.float64
    for _ in range(3):
        check_sum(tree, pts, data.draw(queries(pts)))


@examples(1.0)
@given(data=st.data())
def test_fast_and_compact_agree(data: st.DataObject) -> None:
    pts = data.draw(points(max_n=80, weights=WEIGHT_KINDS))
    fast, compact = pts.tree("fast"), pts.tree("compact")
    assert fast.height == compact.height
    q = data.draw(queries(pts, max_boxes=10))
    kw = {"inclusive": q.inclusive}
    np.testing.assert_array_equal(fast.count(*q.bounds, **kw), compact.count(*q.bounds, **kw))
    f_off, f_rows = fast.report(*q.bounds, **kw)
    c_off, c_rows = compact.report(*q.bounds, **kw)
    np.testing.assert_array_equal(f_off, c_off)
    for i in range(len(f_off) - 1):
        a = set(f_rows[f_off[i] : f_off[i + 1]].tolist())
        b = set(c_rows[c_off[i] : c_off[i + 1]].tolist())
        assert a == b, f"box {i}"
    f_box, f_row = fast.pairs(*q.bounds, **kw, ordered=True)
    c_box, c_row = compact.pairs(*q.bounds, **kw, ordered=True)
    np.testing.assert_array_equal(f_box, c_box)
    np.testing.assert_array_equal(f_row, c_row)
    if pts.weights.dtype.kind == "f":
        tol = float_tolerance(pts.weights, fast.height)
        diff = np.abs(np.asarray(fast.sum(*q.bounds, **kw)) - compact.sum(*q.bounds, **kw))
        assert np.all(diff <= 2 * tol)
    else:
        try:
            a = fast.sum(*q.bounds, **kw)
        except OverflowError:
            with pytest.raises(OverflowError):
                compact.sum(*q.bounds, **kw)
        else:
            np.testing.assert_array_equal(a, compact.sum(*q.bounds, **kw))


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(1.0)
@given(data=st.data())
def test_small_and_empty_inputs(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(max_n=3, weights=("int_small", "float_int")))
    tree = pts.tree(layout)
    assert tree.height == pts.n.bit_length()  # ceil(log2(n + 1))
    q = data.draw(queries(pts))
    check_count(tree, pts, q)
    check_report(tree, pts, q)
    check_pairs(tree, pts, q)
    check_sum(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(1.0)
@given(data=st.data())
def test_heavy_duplicates(layout: str, data: st.DataObject) -> None:
    """Values from sets of one or two: nearly every bound ties with many points."""
    pts = data.draw(
        points(
            min_n=1, max_n=60, x_pool=data.draw(st.integers(1, 2)), y_pool=2, weights=("int_small",)
        )
    )
    tree = pts.tree(layout)
    q = data.draw(queries(pts))
    for inclusive in INCLUSIVE:
        q.inclusive = inclusive
        check_count(tree, pts, q)
        check_report(tree, pts, q)
        check_sum(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("constant_axis", ["x", "y"])
@examples(0.7)
@given(data=st.data())
def test_all_equal_axis(layout: str, constant_axis: str, data: st.DataObject) -> None:
    pools = {"x_pool": 1} if constant_axis == "x" else {"y_pool": 1}
    pts = data.draw(points(min_n=1, max_n=50, **pools))
    tree = pts.tree(layout)
    q = data.draw(queries(pts))
    check_count(tree, pts, q)
    check_report(tree, pts, q)


def _coordinate_box(pts: Points, data: st.DataObject) -> tuple:
    """A scalar box whose four bounds are coordinates of (possibly different) points."""
    i, j, k, m = (data.draw(st.integers(0, pts.n - 1)) for _ in range(4))
    return (pts.x.values[i], pts.x.values[j], pts.y.values[k], pts.y.values[m])


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_bounds_at_point_coordinates_every_inclusive(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(min_n=1, max_n=50))
    tree = pts.tree(layout)
    bounds = _coordinate_box(pts, data)
    counts = {}
    for inclusive in INCLUSIVE:
        q = Query(bounds, inclusive, ordered=True)
        counts[inclusive] = check_count(tree, pts, q)
        check_report(tree, pts, q)
    # Opening an edge can only drop points.
    assert counts["neither"] <= min(counts["left"], counts["right"])
    assert max(counts["left"], counts["right"]) <= counts["both"]
    # A degenerate box [v, v] x [w, w] holds exactly the points equal to (v, w), and nothing
    # once any edge is open.
    i = data.draw(st.integers(0, pts.n - 1))
    v, w = pts.x.values[i], pts.y.values[i]
    same = int(np.sum((pts.x.values == v) & (pts.y.values == w)))
    assert tree.count(v, v, w, w, inclusive="both") == same >= 1
    for inclusive in ("neither", "left", "right"):
        assert tree.count(v, v, w, w, inclusive=inclusive) == 0


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(0.7)
@given(data=st.data())
def test_infinite_bounds(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points())
    tree = pts.tree(layout)
    # The whole plane, closed, holds every point (±inf coordinates included).
    assert tree.count(-INF, INF, -INF, INF) == pts.n
    offsets, rows = tree.report(-INF, INF, -INF, INF, ordered=True)
    np.testing.assert_array_equal(rows, np.arange(pts.n))
    q = data.draw(queries(pts, kinds={"int": ("inf",), "float": ("inf",), "time": ("inf",)}))
    check_count(tree, pts, q)
    check_report(tree, pts, q)
    # Half-infinite boxes: one side from a coordinate-near bound, the other side infinite.
    q = data.draw(queries(pts, scalar=True))
    for lo_inf in (False, True):
        b = list(q.bounds)
        b[0 if lo_inf else 1] = -INF if lo_inf else INF
        b[3 if lo_inf else 2] = INF if lo_inf else -INF
        check_count(tree, pts, Query(tuple(b), q.inclusive))


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_inverted_boxes_are_empty(layout: str, data: st.DataObject) -> None:
    """lo > hi on either axis: the box is empty whatever inclusive says."""
    pts = data.draw(points(min_n=1, weights=("int_small",)))
    tree = pts.tree(layout)
    a, b, c, d = _coordinate_box(pts, data)
    # Put the bounds the wrong way round on x if they differ, else on y.
    if a != b:
        box = (max(a, b), min(a, b), min(c, d), max(c, d))
    else:
        assume(c != d)
        box = (min(a, b), max(a, b), max(c, d), min(c, d))
    for inclusive in INCLUSIVE:
        q = Query(box, inclusive)
        assert check_count(tree, pts, q) == 0
        offsets, rows = check_report(tree, pts, q)
        assert len(rows) == 0
        assert tree.sum(*box, inclusive=inclusive) == 0


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_huge_int64_and_nanosecond_timestamps(layout: str, data: st.DataObject) -> None:
    """Values one apart next to ±2**63 and at today's nanosecond timestamps: a single trip
    through float64 would merge them."""
    n = data.draw(st.integers(1, 40))
    near_edges = st.one_of(
        st.integers(INT64_MAX - 4, INT64_MAX), st.integers(INT64_MIN, INT64_MIN + 4)
    )
    x_raw = data.draw(st.lists(near_edges, min_size=n, max_size=n))
    y_raw = data.draw(st.lists(st.integers(NS_NOW - 3, NS_NOW + 3), min_size=n, max_size=n))
    w_raw = data.draw(st.lists(st.integers(-5, 5), min_size=n, max_size=n))
    pts = Points(
        make_axis(x_raw, "int64"),
        make_axis(y_raw, "datetime64[ns]"),
        np.array(w_raw, dtype=np.int64),
    )
    tree = pts.tree(layout)
    for _ in range(3):
        q = data.draw(queries(pts, kinds={"int": ("int",), "time": ("time",)}))
        check_count(tree, pts, q)
        check_report(tree, pts, q)
        check_sum(tree, pts, q)
    # Each single value, alone: the count of [v, v] is its multiplicity.
    i = data.draw(st.integers(0, n - 1))
    v, t = x_raw[i], pts.y.values[i]
    assert tree.count(v, v, -INF, INF) == x_raw.count(v)
    assert tree.count(-INF, INF, t, t) == y_raw.count(y_raw[i])


MIXED_PAIRS = [
    ("int64", "float32"),
    ("datetime64[ns]", "float64"),
    ("uint32", "int32"),
    ("timedelta64[ns]", "uint32"),
    ("int32", "timedelta64[ms]"),
    ("float32", "datetime64[s]"),
    ("uint8", "int16"),
    ("int8", "uint16"),
    ("datetime64[D]", "datetime64[us]"),
]


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize(("x_dtype", "y_dtype"), MIXED_PAIRS)
@examples(0.3)
@given(data=st.data())
def test_mixed_dtypes(layout: str, x_dtype: str, y_dtype: str, data: st.DataObject) -> None:
    pts = data.draw(points((x_dtype,), (y_dtype,), weights=("int_small", "float_int")))
    tree = pts.tree(layout)
    assert tree.x_dtype == np.dtype(x_dtype)
    assert tree.y_dtype == np.dtype(y_dtype)
    q = data.draw(queries(pts))
    check_count(tree, pts, q)
    check_report(tree, pts, q)
    check_pairs(tree, pts, q)
    check_sum(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_float_bounds_on_int_axes(layout: str, data: st.DataObject) -> None:
    """2.5 on an int axis, and floats next to huge ints, compare as exact numbers would."""
    int_dtypes = ("int64", "int32", "int8", "uint32", "uint8")
    pts = data.draw(points(int_dtypes, int_dtypes))
    tree = pts.tree(layout)
    for _ in range(3):
        q = data.draw(queries(pts, kinds={"int": ("float",)}))
        check_count(tree, pts, q)
        check_report(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_int_bounds_beyond_2_53_on_float_axes(layout: str, data: st.DataObject) -> None:
    """Above 2**53 not every int is a float: 2**53 + 1 lies strictly between two floats."""
    n = data.draw(st.integers(1, 40))
    base = data.draw(st.sampled_from([2**53, 2**60, -(2**53), 2**62]))
    step = max(2, abs(base) >> 52)  # the float spacing there
    offsets = st.integers(-4, 4)
    x_raw = [float(base + step * k) for k in data.draw(st.lists(offsets, min_size=n, max_size=n))]
    y_raw = data.draw(st.lists(elements("float64"), min_size=n, max_size=n))
    pts = Points(make_axis(x_raw, "float64"), make_axis(y_raw, "float64"))
    tree = pts.tree(layout)
    for _ in range(3):
        # Integer bounds exactly between the floats, or on them.
        raw = [
            base + d
            for d in data.draw(st.lists(st.integers(-5 * step, 5 * step), min_size=2, max_size=2))
        ]
        q = Query((raw[0], raw[1], -INF, INF), data.draw(st.sampled_from(INCLUSIVE)))
        check_count(tree, pts, q)
        check_report(tree, pts, q)
        arr = Query((np.array(raw, dtype=np.int64), raw[1], -INF, INF), q.inclusive)
        check_count(tree, pts, arr)
    q = data.draw(queries(pts, kinds={"float": ("int",)}))
    check_count(tree, pts, q)
    check_pairs(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_fractional_bounds_beside_ints_beyond_2_53_on_int_axes(
    layout: str, data: st.DataObject
) -> None:
    """One bound array mixing integers above 2**53 with fractional floats (a CSV column of
    both, or a Python list) on an int64 axis: each float admits the points Python's own exact
    int/float comparison admits (the reference), none is rounded through float64."""
    n = data.draw(st.integers(1, 40))
    base = data.draw(st.sampled_from([2**53, 2**60, -(2**60)]))
    x_raw = [base + k for k in data.draw(st.lists(st.integers(-6, 6), min_size=n, max_size=n))]
    y_raw = data.draw(st.lists(elements("float64"), min_size=n, max_size=n))
    pts = Points(make_axis(x_raw, "int64"), make_axis(y_raw, "float64"))
    tree = pts.tree(layout)
    fractions = st.sampled_from([-2.5, -0.5, 0.5, 1.5, 3.25, 7.0, -1e18 - 0.5])
    for _ in range(3):
        lo = np.array([base + data.draw(st.integers(-7, 7)), data.draw(fractions)], dtype=object)
        hi = np.array([base + data.draw(st.integers(-7, 7)), data.draw(fractions)], dtype=object)
        q = Query((lo, hi, -INF, INF), data.draw(st.sampled_from(INCLUSIVE)))
        check_count(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(0.7)
@given(data=st.data())
def test_broadcasting(layout: str, data: st.DataObject) -> None:
    """Scalars and arrays of different shapes broadcast like numpy; boxes flatten in C order."""
    pts = data.draw(points(NUMERIC_DTYPES, NUMERIC_DTYPES, weights=("int_small",)))
    tree = pts.tree(layout)
    shapes = ((), (3,), (2, 1), (1, 3), (2, 3), (4, 1, 1))
    picked = [data.draw(st.sampled_from(shapes)) for _ in range(4)]
    assume(any(s != () for s in picked))
    shape = np.broadcast_shapes(*picked)  # every pair of these shapes broadcasts
    bounds = []
    for axis, s in zip((pts.x, pts.x, pts.y, pts.y), picked):
        kind = "float" if axis.kind == "float" else "int"
        raw = [draw_bound(data.draw, axis, kind) for _ in range(math.prod(s))]
        dtype = np.float64 if kind == "float" else np.int64
        bounds.append(raw[0] if s == () else np.array(raw, dtype=dtype).reshape(s))
    q = Query(tuple(bounds), data.draw(st.sampled_from(INCLUSIVE)), ordered=True)
    counts = check_count(tree, pts, q)
    assert counts.shape == shape
    offsets, _ = check_report(tree, pts, q)
    assert len(offsets) == math.prod(shape) + 1
    check_pairs(tree, pts, q)
    check_sum(tree, pts, q)
    sums = tree.sum(*q.bounds, inclusive=q.inclusive)
    assert sums.shape == shape


@pytest.mark.parametrize("layout", LAYOUTS)
@given(data=st.data())
def test_ordered_true_sorts_rows(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(min_n=1, max_n=80))
    tree = pts.tree(layout)
    q = data.draw(queries(pts, max_boxes=8))
    q.ordered = True
    offsets, rows = check_report(tree, pts, q)
    for i in range(len(offsets) - 1):
        assert np.all(np.diff(rows[offsets[i] : offsets[i + 1]]) > 0)
    box, row = check_pairs(tree, pts, q)
    order = np.lexsort((row, box))
    np.testing.assert_array_equal(order, np.arange(len(box)))


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(0.7)
@given(data=st.data())
def test_tree_attributes(layout: str, data: st.DataObject) -> None:
    pts = data.draw(points(weights=WEIGHT_KINDS))
    tree = pts.tree(layout)
    assert len(tree) == pts.n
    assert tree.height == (math.ceil(math.log2(pts.n + 1)) if pts.n else 0)
    assert tree.layout == layout
    assert tree.x_dtype == pts.x.dtype and tree.y_dtype == pts.y.dtype
    expected_w = np.int64 if pts.weights.dtype.kind in "iu" else np.float64
    assert tree.weights_dtype == expected_w
    assert isinstance(tree.nbytes, int) and tree.nbytes >= 0
    parts = tree.nbytes_by_part
    assert sum(parts.values()) == tree.nbytes
    # Layout arithmetic: 8-byte keys on both axes, 4-byte row ids on the leaves and (fast
    # layout) on every level but the root and the leaves, 1 bit a point a level and more.
    n, h = pts.n, tree.height
    assert parts["sorted axes"] >= 2 * 8 * n
    assert parts["leaf rows"] == 4 * n
    assert parts["level rows"] == (4 * n * (h - 1) if layout == "fast" and n else 0)
    assert parts["cascade bits"] * 8 >= n * h
    assert (parts["level weights"] > 0) == (pts.weights is not None and n > 0)
    text = repr(tree)
    for part in (str(pts.n), layout, str(pts.x.dtype), str(pts.y.dtype), str(tree.height)):
        assert part in text, (part, text)


# --------------------------------------------------------------------------------------------
# Time bounds in the other accepted forms
# --------------------------------------------------------------------------------------------


def _time_bound_forms(value: np.datetime64 | np.timedelta64, unit: str) -> list:
    """The same instant (or duration) as each accepted scalar type, where it is exact."""
    out: list = [value]
    if value.dtype.kind == "M":
        ts = pd.Timestamp(value)
        out.append(ts)
        if ts.nanosecond == 0:
            out.append(ts.to_pydatetime())
    else:
        td = pd.Timedelta(value)
        out.append(td)
        if td.value % 1000 == 0:
            out.append(td.to_pytimedelta())
    return out


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("dtype", ["datetime64[ns]", "datetime64[us]", "timedelta64[ns]"])
@examples(0.5)
@given(data=st.data())
def test_time_bounds_as_pandas_and_stdlib_objects(layout: str, dtype: str, data: st.DataObject):
    """np.datetime64, pd.Timestamp and datetime.datetime (and the timedelta counterparts)
    name the same bound."""
    n = data.draw(st.integers(1, 30))
    unit = np.datetime_data(np.dtype(dtype))[0]
    centre = NS_NOW // _NS_PER[unit] if dtype.startswith("datetime") else 10**12 // _NS_PER[unit]
    # Spaced one microsecond apart (datetime.datetime's resolution), jittered by single ticks.
    us = 1000 // _NS_PER[unit] if unit == "ns" else 1
    ticks = st.tuples(st.integers(-3, 3), st.integers(-1, 1)).map(
        lambda t: centre + t[0] * us + t[1]
    )
    x_raw = data.draw(st.lists(ticks, min_size=n, max_size=n))
    y_raw = data.draw(st.lists(st.integers(0, 3), min_size=n, max_size=n))
    pts = Points(make_axis(x_raw, dtype), make_axis(y_raw, "int64"))
    tree = pts.tree(layout)
    lo, hi = (pts.x.values[data.draw(st.integers(0, n - 1))] for _ in range(2))
    inclusive = data.draw(st.sampled_from(INCLUSIVE))
    expected = ref.ref_count(pts.x.values, pts.y.values, lo, hi, 0, 3, inclusive=inclusive)
    for lo_form in _time_bound_forms(lo, unit):
        for hi_form in _time_bound_forms(hi, unit):
            got = tree.count(lo_form, hi_form, 0, 3, inclusive=inclusive)
            assert got == expected, (lo_form, hi_form)
    # Series and lists of bounds.
    many = pts.x.values[: min(n, 4)]
    series = pd.Series(many)
    q = Query((series, pd.Series(many[::-1]), -INF, INF), inclusive)
    check_count(tree, pts, q)
    check_report(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@examples(0.5)
@given(data=st.data())
def test_time_bounds_in_a_coarser_unit(layout: str, data: st.DataObject) -> None:
    """A bound in seconds or days on a nanosecond axis means the same instant."""
    n = data.draw(st.integers(1, 30))
    day_ns = 86_400 * 10**9
    base = (NS_NOW // day_ns) * day_ns
    offsets = st.sampled_from([-day_ns, -1, 0, 1, 10**9 - 1, 10**9, day_ns - 1, day_ns])
    x_raw = [base + o for o in data.draw(st.lists(offsets, min_size=n, max_size=n))]
    pts = Points(make_axis(x_raw, "datetime64[ns]"), make_axis([0] * n, "float64"))
    tree = pts.tree(layout)
    unit = data.draw(st.sampled_from(["s", "D", "ms", "us"]))
    per = {"s": 10**9, "D": day_ns, "ms": 10**6, "us": 10**3}[unit]
    k = st.integers(-2, 2).map(lambda d: np.datetime64(base // per + d, unit))
    q = Query((data.draw(k), data.draw(k), -INF, INF), data.draw(st.sampled_from(INCLUSIVE)), True)
    check_count(tree, pts, q)
    check_report(tree, pts, q)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("inclusive", INCLUSIVE)
def test_time_bound_in_a_finer_unit_compares_exactly(layout: str, inclusive: str) -> None:
    """Half a second on a seconds axis lies strictly between two ticks: it must not be rounded
    onto either of them."""
    x = np.datetime64("2031-05-06T07:00:00", "s") + np.arange(4).astype("timedelta64[s]")
    y = np.zeros(4)
    tree = boxwood.RangeTree(x, y, layout=layout)
    lo = x[1].astype("datetime64[ms]") - np.timedelta64(500, "ms")  # between x[0] and x[1]
    hi = x[2].astype("datetime64[ms]") + np.timedelta64(500, "ms")  # between x[2] and x[3]
    # Whatever the edges, the open and closed readings agree: only x[1] and x[2] lie inside.
    assert tree.count(lo, hi, -INF, INF, inclusive=inclusive) == 2
    assert ref.ref_count(x, y, lo, hi, -INF, INF, inclusive=inclusive) == 2


# --------------------------------------------------------------------------------------------
# Larger point sets (deterministic), where the tree has many levels
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("n", [1, 2, 31, 32, 33, 255, 1000, 4097])
def test_larger_random_point_sets(layout: str, n: int) -> None:
    rng = np.random.default_rng(n)
    x = rng.integers(-50, 50, n).astype(np.int64)
    y = rng.normal(size=n).round(1)
    w = rng.integers(-(10**6), 10**6, n)
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    assert tree.height == math.ceil(math.log2(n + 1))
    q = 25
    x_lo = rng.integers(-60, 60, q)
    x_hi = x_lo + rng.integers(-5, 60, q)
    y_lo = rng.normal(size=q).round(1)
    y_hi = y_lo + rng.uniform(-0.5, 2.5, q).round(1)
    pts = Points(Axis(x, x.tolist()), Axis(y, y.tolist()), w)
    for inclusive in INCLUSIVE:
        query = Query((x_lo, x_hi, y_lo, y_hi), inclusive, ordered=inclusive == "left")
        check_count(tree, pts, query)
        check_report(tree, pts, query)
        check_sum(tree, pts, query)
    check_pairs(tree, pts, Query((x_lo, x_hi, y_lo, y_hi), "both"))


def test_bounds_given_as_numpy_scalars_of_other_types() -> None:
    x = np.arange(10, dtype=np.int32)
    y = np.linspace(0, 1, 10, dtype=np.float32)
    tree = boxwood.RangeTree(x, y)
    forms = [np.int8(2), np.uint16(2), np.int32(2), np.float32(2.0), np.float64(2.0), 2, 2.0]
    expected = ref.ref_count(x, y, 2, 7, -INF, INF)
    assert expected == 6
    for lo in forms:
        assert tree.count(lo, np.int64(7), np.float32(-INF), INF) == expected, type(lo)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("inclusive", ["both", "neither", "left", "right"])
def test_plain_scalar_bounds_match_a_numpy_mask(layout: str, inclusive: str) -> None:
    """Row-by-row counts with plain Python floats and ints (answered inside the compiled
    module) against a boolean mask (NumPy): ints past int64, floats between the integer
    points, and bounds at the points' own coordinates, on a float and an int axis."""
    rng = np.random.default_rng(8)
    x = rng.integers(-50, 50, 3000).astype(np.float64)
    y = rng.integers(-50, 50, 3000)
    tree = boxwood.RangeTree(x, y, layout=layout)
    lo_closed, hi_closed = inclusive in ("both", "left"), inclusive in ("both", "right")

    def mask_count(xa, xb, ya, yb) -> int:
        inside = (x >= xa) if lo_closed else (x > xa)
        inside &= (x <= xb) if hi_closed else (x < xb)
        inside &= (y >= ya) if lo_closed else (y > ya)
        inside &= (y <= yb) if hi_closed else (y < yb)
        return int(inside.sum())

    for _ in range(150):
        a, b, c, d = (int(v) for v in rng.integers(-60, 60, 4))
        for xa, xb, ya, yb in [
            (float(a), float(b), c, d),
            (a, b, c + 0.5, d - 0.5),
            (a, 2**70, -(2**70), d),
            (-(2**63), 2**63 - 1, float(c), float(d)),
        ]:
            got = tree.count(xa, xb, ya, yb, inclusive=inclusive)
            assert type(got) is int
            assert got == mask_count(xa, xb, ya, yb), (xa, xb, ya, yb)


def test_plain_scalar_path_takes_plain_numbers_and_hands_on_the_rest() -> None:
    """The compiled scalar path answers Python floats and ints and numpy float64 (what
    ``DataFrame.apply`` hands over) and returns None for everything else, which the general
    path then takes; both agree with a boolean mask (NumPy)."""
    x = np.arange(100.0)
    y = np.arange(100) % 10
    tree = boxwood.RangeTree(x, y)
    fast = tree._tree.count_plain
    expected = int(((x >= 10) & (x <= 40) & (y >= 2) & (y <= 5)).sum())
    for bounds in [(10, 40, 2, 5), (10.0, 40.0, 2.0, 5.0), (np.float64(10), 40, 2, np.float64(5))]:
        assert fast(*bounds, "both") == expected
        assert tree.count(*bounds) == expected
    others = [
        (np.int64(10), 40, 2, 5),
        (np.float32(10), 40, 2, 5),
        (10, 2**63, 2, 5),
        (10, 40, True, 5),
        (10, 40, 2, "5"),
    ]
    for bounds in others:
        assert fast(*bounds, "both") is None, bounds
    assert fast(10, 40, 2, 5, np.str_("both")) is None
    for xa, xb, ya, yb in others[:3]:
        mask = (x >= xa) & (x <= xb) & (y >= ya) & (y <= yb)
        assert tree.count(xa, xb, ya, yb) == int(mask.sum())


@pytest.mark.parametrize("layout", LAYOUTS)
def test_batch_sums_equal_one_box_sums_bit_for_bit(layout: str) -> None:
    """A batch interleaves many boxes' walks; each box must still add the same runs in the same
    order as a one-box call. Both are checked against math.fsum of a mask (Python's correctly
    rounded sum), within the rounding of the per-level prefix sums: each run is a difference
    of two prefix sums, each within a rounding of exact (compensated summation), and a box adds
    at most 2 * height + 2 runs, so the error is below 4 * (2 * height + 2) * 2**-52 times the
    sum of all |w| (the textbook bound for summing k terms, k * u * sum |x|, from memory)."""
    rng = np.random.default_rng(11)
    n, q = 30_000, 400
    x, y = rng.random(n), rng.random(n)
    w = rng.standard_normal(n) * 10.0 ** rng.integers(-3, 4, n)
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    a, c = rng.random(q), rng.random(q)
    side = rng.random(q) * 0.3
    batch = tree.sum(a, a + side, c, c + side)
    tolerance = 4 * (2 * tree.height + 2) * 2.0**-52 * math.fsum(np.abs(w))
    for i in range(q):
        one = tree.sum(float(a[i]), float(a[i] + side[i]), float(c[i]), float(c[i] + side[i]))
        assert one == batch[i], i
        inside = (x >= a[i]) & (x <= a[i] + side[i]) & (y >= c[i]) & (y <= c[i] + side[i])
        exact = math.fsum(w[inside])
        assert abs(batch[i] - exact) <= tolerance, (i, batch[i], exact)


def test_plain_scalar_path_refuses_what_the_general_path_refuses() -> None:
    tree = boxwood.RangeTree(np.arange(10.0), np.arange(10))
    with pytest.raises(TypeError, match="x_lo must be a number, got a bool"):
        tree.count(True, 5, 0, 9)
    with pytest.raises(ValueError, match="inclusive must be"):
        tree.count(1.0, 2.0, 3.0, 4.0, inclusive="sideways")
    with pytest.raises(ValueError, match="inclusive must be"):
        tree.count(1.0, 2.0, 3.0, 4.0, inclusive=3)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="x_lo contains NaN"):
        tree.count(float("nan"), 2.0, 3.0, 4.0)


def test_datetime_column_from_pandas_with_timestamps_as_bounds() -> None:
    """A made-up bike-share log: trips of the Riverbend Cycle Hire over one morning."""
    start = pd.Series(
        pd.to_datetime(
            [
                "2031-04-01 07:00:00.000000001",
                "2031-04-01 07:00:00.000000002",
                "2031-04-01 07:15:00",
                "2031-04-01 08:00:00",
                "2031-04-01 08:00:00",
            ],
            format="ISO8601",
        )
    )
    minutes = pd.Series([12.5, 3.0, 40.0, 7.25, 7.25])
    tree = boxwood.RangeTree(start, minutes)
    lo = pd.Timestamp("2031-04-01 07:00:00.000000002")
    hi = dt.datetime(2031, 4, 1, 8, 0)
    for inclusive in INCLUSIVE:
        expected = ref.ref_count(start, minutes, lo, hi, 0.0, 40.0, inclusive=inclusive)
        assert tree.count(lo, hi, 0.0, 40.0, inclusive=inclusive) == expected
    # Hand-checked: rows 1..4 are within [lo, hi] x [0, 40].
    assert tree.count(lo, hi, 0.0, 40.0) == 4
    assert tree.count(lo, hi, 0.0, 40.0, inclusive="neither") == 0
