"""min, max, quantile and extreme_rows against numpy, pandas and the plain reference.

The outside references, named beside each check: ``numpy.quantile`` (and
``numpy.percentile``) of the box's values picked by a numpy boolean mask, for every method
numpy has, compared to the last bit and in dtype; ``numpy.min`` / ``numpy.max`` of the same;
``pandas.Series.quantile`` for the five interpolations pandas offers; ``pandas.Series.nlargest``
/ ``nsmallest`` (``keep="first"``) for the extreme rows. The plain reference
(``tests/reference.py``: sort each box's exact values, apply the definition) checks the same
on both layouts, every ``inclusive``, ties, one-point and empty boxes, int64 values next to
2**63 and nanosecond datetimes.
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, note
from hypothesis import strategies as st

import boxwood
import reference as ref

LAYOUTS = ("fast", "compact")
METHODS = (
    "inverted_cdf",
    "averaged_inverted_cdf",
    "closest_observation",
    "interpolated_inverted_cdf",
    "hazen",
    "weibull",
    "linear",
    "median_unbiased",
    "normal_unbiased",
    "lower",
    "higher",
    "midpoint",
    "nearest",
)
PICKING = ("inverted_cdf", "closest_observation", "lower", "higher", "nearest")
NEAR_TOP = 2**63 - 1
KINDS = ("int64", "float64", "float32", "int32", "near_2_63", "datetime64[ns]", "timedelta64[s]")


def column(draw: Any, kind: str, n: int) -> np.ndarray:
    """A column with ties: values drawn from a small pool, or nearly all distinct."""
    pool = draw(st.integers(1, max(1, n)))
    codes = draw(st.lists(st.integers(0, pool - 1), min_size=n, max_size=n))
    base = np.array(codes, dtype=np.int64)
    if kind == "near_2_63":  # the largest int64s, one tick apart, and the smallest
        flip = draw(st.booleans())
        return (-NEAR_TOP - 1 + base) if flip else (NEAR_TOP - base)
    if kind == "datetime64[ns]":  # nanosecond timestamps one tick apart, in 2023
        return (np.int64(1_700_000_000_000_000_000) + base * draw(st.sampled_from([1, 7]))).view(
            "datetime64[ns]"
        )
    if kind == "timedelta64[s]":
        return (base * 3 - 5).view("timedelta64[s]")
    if kind in ("float64", "float32"):
        big = 1e300 if kind == "float64" else 1e30
        scale = draw(st.sampled_from([1.0, 0.1, big, -2.5e-3]))
        return (base * scale).astype(kind)
    return (base * draw(st.sampled_from([1, -3, 1000]))).astype(kind)


@st.composite
def cases(draw: Any) -> dict[str, Any]:
    n = draw(st.integers(0, 40))
    x_kind, y_kind = draw(st.sampled_from(KINDS)), draw(st.sampled_from(KINDS))
    x, y = column(draw, x_kind, n), column(draw, y_kind, n)
    boxes = draw(st.integers(1, 5))

    def bounds(col: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # Bounds at point coordinates (or the column's extremes when it is empty), so that
        # ties with the edges and one-point boxes are common; some boxes come out inverted.
        pick = np.sort(col) if n else np.array([0, 1]).astype(col.dtype)
        i = draw(st.lists(st.integers(0, len(pick) - 1), min_size=boxes, max_size=boxes))
        j = draw(st.lists(st.integers(0, len(pick) - 1), min_size=boxes, max_size=boxes))
        return pick[i], pick[j]

    (x_lo, x_hi), (y_lo, y_hi) = bounds(x), bounds(y)
    return {
        "x": x,
        "y": y,
        "bounds": (x_lo, x_hi, y_lo, y_hi),
        "inclusive": draw(st.sampled_from(ref.INCLUSIVE)),
        "layout": draw(st.sampled_from(LAYOUTS)),
        "of": draw(st.sampled_from(("x", "y"))),
    }


def mask_of(c: dict[str, Any], i: int) -> np.ndarray:
    """Box i's points by numpy comparisons (the masked-values reference's mask)."""
    x_lo, x_hi, y_lo, y_hi = (b[i] for b in c["bounds"])
    lo_closed = c["inclusive"] in ("both", "left")
    hi_closed = c["inclusive"] in ("both", "right")

    def side(v: np.ndarray, lo: Any, hi: Any) -> np.ndarray:
        above = v >= lo if lo_closed else v > lo
        below = v <= hi if hi_closed else v < hi
        return above & below

    return side(c["x"], x_lo, x_hi) & side(c["y"], y_lo, y_hi)


def values_of(c: dict[str, Any]) -> np.ndarray:
    return c["x"] if c["of"] == "x" else c["y"]


def assert_same(got: Any, want: Any, what: str) -> None:
    """Equal to the last bit and of the same dtype (NaN equal to NaN, NaT to NaT)."""
    got, want = np.asarray(got), np.asarray(want)
    assert got.dtype == want.dtype, (what, got.dtype, want.dtype)
    if want.dtype.kind == "f":
        # Equal as numbers: the tree keeps -0.0 and 0.0 as one value (they compare equal).
        assert np.array_equal(got, want, equal_nan=True), (what, got, want)
    elif want.dtype.kind in "Mm":
        assert np.array_equal(got.view(np.int64), want.view(np.int64)), (what, got, want)
    else:
        assert np.array_equal(got, want), (what, got, want)


def row(result: Any, i: int) -> tuple[Any, bool]:
    """Box i of a result, and whether it is missing (masked, NaN or NaT)."""
    if isinstance(result, np.ma.MaskedArray):
        return result.data[i], bool(np.ma.getmaskarray(result)[i].all())
    value = np.asarray(result)[i]
    missing = np.isnat(value) if value.dtype.kind in "Mm" else np.isnan(value)
    return value, bool(np.all(missing))


def tree_of(c: dict[str, Any]) -> boxwood.RangeTree:
    return boxwood.RangeTree(c["x"], c["y"], layout=c["layout"])


# ---------------------------------------------------------------- numpy, every method


@given(
    c=cases(),
    method=st.sampled_from(METHODS),
    q=st.one_of(
        st.sampled_from([0.0, 1.0, 0.5, 0.25, 0.75, 0.99, 1 / 3]),
        st.floats(0, 1),
        st.lists(st.floats(0, 1), min_size=1, max_size=4),
    ),
)
def test_quantile_is_numpy_quantile_of_the_masked_values(
    c: dict[str, Any], method: str, q: Any
) -> None:
    tree = tree_of(c)
    got = tree.quantile(*c["bounds"], q, of=c["of"], method=method, inclusive=c["inclusive"])
    note(f"got {got!r}")
    values = values_of(c)
    for i in range(len(c["bounds"][0])):
        inside = values[mask_of(c, i)]
        value, missing = row(got, i)
        if inside.size == 0:
            assert missing, (i, value)
            continue
        assert not missing
        # numpy.quantile of the box's values (outside reference), to the last bit and dtype.
        want = np.quantile(inside, q, method=method)
        assert_same(value, want, f"box {i} {method} q={q}")
        if not isinstance(q, list) and q in (0.0, 0.25, 0.5, 0.75, 1.0):
            # numpy.percentile (outside reference) at 100 q, where q * 100 / 100 is q exactly.
            assert_same(value, np.percentile(inside, 100 * q, method=method), f"box {i} %")


@given(c=cases())
def test_min_and_max_are_numpy_min_and_max(c: dict[str, Any]) -> None:
    tree = tree_of(c)
    lo = tree.min(*c["bounds"], of=c["of"], inclusive=c["inclusive"])
    hi = tree.max(*c["bounds"], of=c["of"], inclusive=c["inclusive"])
    values = values_of(c)
    for i in range(len(c["bounds"][0])):
        inside = values[mask_of(c, i)]
        for got, fn in ((lo, np.min), (hi, np.max)):
            value, missing = row(got, i)
            assert missing == (inside.size == 0)
            if inside.size:
                assert_same(value, fn(inside), f"box {i} {fn.__name__}")  # numpy (outside)


# ---------------------------------------------------------------- the plain reference


@given(c=cases(), method=st.sampled_from(PICKING + ("linear", "midpoint")), q=st.floats(0, 1))
def test_quantile_matches_the_reference_definition(
    c: dict[str, Any], method: str, q: float
) -> None:
    tree = tree_of(c)
    got = tree.quantile(*c["bounds"], q, of=c["of"], method=method, inclusive=c["inclusive"])
    samples = ref.ref_sorted_values(c["x"], c["y"], c["bounds"], c["inclusive"], c["of"])
    values = values_of(c)
    for i, sample in enumerate(samples):
        want = ref.ref_quantile(sample, q, method)
        value, missing = row(got, i)
        assert missing == (want is None)
        if want is None:
            continue
        if method in PICKING:
            (exact,) = ref.exact_values(np.asarray(value).astype(values.dtype))
            assert exact == want, (i, value, want)
        elif values.dtype.kind in "fi":
            # Interpolated in floating point: within a few roundings of the exact value.
            spread = max(abs(Fraction(sample[0])), abs(Fraction(sample[-1])), Fraction(1, 10**300))
            assert abs(Fraction(float(value)) - want) <= spread * Fraction(
                1, 2**20 if values.dtype == np.float32 else 2**50
            ), (i, value, float(want))


@given(c=cases(), k=st.integers(0, 6), largest=st.booleans())
def test_extreme_rows_match_the_reference_definition(
    c: dict[str, Any], k: int, largest: bool
) -> None:
    tree = tree_of(c)
    offsets, rows = tree.extreme_rows(
        *c["bounds"], k, of=c["of"], largest=largest, inclusive=c["inclusive"]
    )
    want = ref.ref_extreme_rows(c["x"], c["y"], c["bounds"], c["inclusive"], c["of"], k, largest)
    got = [rows[offsets[i] : offsets[i + 1]].tolist() for i in range(len(want))]
    assert got == want


# ---------------------------------------------------------------- pandas


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("dtype", ["float64", "int64"])
def test_quantile_is_pandas_series_quantile(layout: str, dtype: str) -> None:
    rng = np.random.default_rng(3)
    n = 3000
    x = rng.integers(0, 50, n).astype(dtype)
    y = (rng.standard_normal(n) * 1000).round().astype(dtype)
    tree = boxwood.RangeTree(x, y, layout=layout)
    lo = rng.integers(0, 50, 40)
    hi = lo + rng.integers(0, 10, 40)
    qs = [0.0, 0.1, 0.25, 0.5, 0.9, 0.99, 1.0]
    for interpolation in ("linear", "lower", "higher", "nearest", "midpoint"):
        got = tree.quantile(lo, hi, -np.inf, np.inf, qs, method=interpolation)
        for i in range(len(lo)):
            inside = pd.Series(y[(x >= lo[i]) & (x <= hi[i])])
            if inside.empty:
                continue
            # pandas.Series.quantile (outside reference).
            want = inside.quantile(qs, interpolation=interpolation).to_numpy()
            np.testing.assert_allclose(np.asarray(got[i], dtype=float), want, rtol=1e-12)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("of", ["x", "y"])
def test_extreme_rows_are_pandas_nlargest_and_nsmallest(layout: str, of: str) -> None:
    rng = np.random.default_rng(5)
    n = 4000
    x, y = rng.integers(0, 100, n), rng.integers(0, 30, n)  # many ties on both axes
    tree = boxwood.RangeTree(x, y, layout=layout)
    lo = rng.integers(0, 100, 50)
    hi = lo + rng.integers(0, 20, 50)
    for k in (1, 3, 10, 500):
        for largest in (True, False):
            offsets, rows = tree.extreme_rows(lo, hi, 3, 25, k, of=of, largest=largest)
            for i in range(len(lo)):
                mask = (x >= lo[i]) & (x <= hi[i]) & (y >= 3) & (y <= 25)
                series = pd.Series((x if of == "x" else y)[mask], index=np.flatnonzero(mask))
                # pandas nlargest / nsmallest, keep="first" (outside reference): ties by the
                # order of the rows.
                pick = series.nlargest(k) if largest else series.nsmallest(k)
                want = np.sort(pick.index.to_numpy())
                assert rows[offsets[i] : offsets[i + 1]].tolist() == want.tolist()


# ---------------------------------------------------------------- keys, dtypes, edges


@pytest.mark.parametrize("layout", LAYOUTS)
def test_keyed_quantiles_are_per_key_numpy_quantiles(layout: str) -> None:
    rng = np.random.default_rng(8)
    n = 2000
    x, y = rng.random(n), rng.integers(0, 1000, n)
    shop = rng.choice(np.array(["north", "south", "east"]), n)
    tree = boxwood.RangeTree(x, y, by=shop, layout=layout)
    keys = np.array(["north", "south", "east", "west"])
    lo = rng.random(4) * 0.5
    got = tree.quantile(lo, lo + 0.3, 100, 900, [0.1, 0.5], by=keys, method="nearest")
    top = tree.max(lo, lo + 0.3, 100, 900, by=keys, of="x")
    for i, key in enumerate(keys):
        mask = (shop == key) & (x >= lo[i]) & (x <= lo[i] + 0.3) & (y >= 100) & (y <= 900)
        if not mask.any():
            assert np.ma.getmaskarray(got)[i].all() and np.isnan(top[i])
            continue
        # numpy.quantile / numpy.max of the key's masked values (outside reference).
        assert got[i].tolist() == np.quantile(y[mask], [0.1, 0.5], method="nearest").tolist()
        assert top[i] == x[mask].max()


def test_result_dtypes_follow_numpy_and_empty_boxes_are_missing() -> None:
    t = np.array(["2024-03-01T08:00", "2024-03-01T08:01", "2024-03-01T08:05"], "datetime64[ns]")
    ints = np.array([2**63 - 1, 2**63 - 2, 5], dtype=np.int64)
    tree = boxwood.RangeTree(t, ints)
    start, end = t[0], t[-1]
    # int64 next to 2**63 stays exact for the methods that pick.
    assert tree.max(start, end, 0, np.inf) == 2**63 - 1
    picked = tree.quantile(start, end, 0, np.inf, 0.5, method="lower")
    assert picked == 2**63 - 2 and picked.dtype == np.int64
    assert tree.quantile(start, end, 0, np.inf, 0.5).dtype == np.float64
    # Datetimes stay datetimes, interpolated too (numpy.quantile of the same values).
    mid = tree.quantile(start, end, 0, np.inf, 0.5, of="x")
    assert mid == np.quantile(t, 0.5) and mid.dtype == t.dtype
    assert tree.min(start, end, 0, np.inf, of="x") == t[0]
    # Empty boxes: NaT, NaN, masked; never an error.
    assert np.isnat(tree.min(end, start, 0, np.inf, of="x"))
    assert np.isnan(tree.quantile(end, start, 0, np.inf, 0.5))
    assert tree.quantile(end, start, 0, np.inf, 0.5, method="higher") is np.ma.masked
    many = tree.min([start, end], [end, start], 0, np.inf)
    assert isinstance(many, np.ma.MaskedArray) and many.mask.tolist() == [False, True]
    assert many.dtype == np.int64 and many[0] == 5
    # A trailing axis for an array of probabilities.
    assert tree.quantile([start, start], end, 0, np.inf, [0.0, 0.5, 1.0]).shape == (2, 3)


def test_y_statistics_derive_the_transposed_cascade_once() -> None:
    rng = np.random.default_rng(1)
    tree = boxwood.RangeTree(rng.random(5000), rng.random(5000))
    assert tree.nbytes_by_part["transposed cascade"] == 0
    tree.min(0, 1, 0, 1, of="x")
    assert tree.nbytes_by_part["transposed cascade"] == 0  # x needs only the count cascade
    tree.min(0, 1, 0, 1, of="y")
    extra = boxwood.estimate_bytes(5000).y_statistics_bytes
    assert tree.nbytes_by_part["transposed cascade"] == extra > 0
    assert sum(tree.nbytes_by_part.values()) == tree.nbytes


def test_loaded_trees_answer_the_same(tmp_path: Any) -> None:
    rng = np.random.default_rng(2)
    x, y = rng.integers(0, 100, 3000), rng.random(3000)
    tree = boxwood.RangeTree(x, y, layout="fast")
    tree.save(tmp_path / "t.boxwood")
    loaded = boxwood.load(tmp_path / "t.boxwood")
    lo = rng.integers(0, 90, 30)
    for of in ("x", "y"):
        a = tree.quantile(lo, lo + 10, 0.2, 0.8, [0.5, 0.95], of=of)
        b = loaded.quantile(lo, lo + 10, 0.2, 0.8, [0.5, 0.95], of=of)
        np.testing.assert_array_equal(np.ma.filled(a, -1), np.ma.filled(b, -1))


@pytest.mark.parametrize(
    ("call", "error", "match"),
    [
        (lambda t: t.quantile(0, 1, 0, 1, 1.5), ValueError, r"range \[0, 1\]"),
        (lambda t: t.quantile(0, 1, 0, 1, [[0.5]]), ValueError, "scalar or 1-D"),
        (lambda t: t.quantile(0, 1, 0, 1, 0.5, method="mean"), ValueError, "method must be"),
        (lambda t: t.min(0, 1, 0, 1, of="z"), ValueError, "of must be 'x' or 'y'"),
        (lambda t: t.extreme_rows(0, 1, 0, 1, -1), ValueError, "non-negative integer"),
        (lambda t: t.extreme_rows(0, 1, 0, 1, 2.5), ValueError, "non-negative integer"),
        (lambda t: t.extreme_rows([0, 1], 1, 0, 1, [1, 2, 3]), ValueError, "broadcast"),
        (lambda t: t.max(0, 1, 0, 1, by="a"), ValueError, "without keys"),
        (lambda t: t.min(np.nan, 1, 0, 1), ValueError, "NaN"),
    ],
)
def test_bad_input_is_refused_clearly(call: Any, error: type, match: str) -> None:
    tree = boxwood.RangeTree([0.0, 0.5, 1.0], [0.0, 0.5, 1.0])
    with pytest.raises(error, match=match):
        call(tree)


# ---------------------------------------------------------------- frames


@pytest.mark.parametrize("keyed", [False, True])
def test_stats_boxes_is_pandas_over_each_box(keyed: bool) -> None:
    rng = np.random.default_rng(21)
    n = 3000
    points = pd.DataFrame(
        {
            "t": rng.integers(0, 500, n),
            "ms": rng.integers(1, 2000, n),
            "bytes": rng.random(n) * 100,
            "desk": rng.choice(np.array(["a", "b"]), n),
        }
    )
    by = "desk" if keyed else None
    tree = boxwood.RangeTree.from_frame(points, x="t", y="ms", weights="bytes", by=by)
    boxes = pd.DataFrame(
        {"t0": [0, 100, 480, 600], "t1": [99, 250, 499, 700], "desk": ["a", "b", "a", "b"]},
        index=["w1", "w2", "w3", "empty"],
    )
    got = tree.stats_boxes(boxes, "t0", "t1", None, None, quantiles=(0.5, 0.99), by=by)
    also = boxes.boxwood.stats(tree, "t0", "t1", None, None, quantiles=(0.5, 0.99), by=by)
    pd.testing.assert_frame_equal(got, also)
    assert list(got.columns) == ["count", "sum", "mean", "min", "max", "q0.5", "q0.99"]
    for label, box in boxes.iterrows():
        inside = points[points.t.between(box.t0, box.t1)]
        if keyed:
            inside = inside[inside.desk == box.desk]
        row = got.loc[label]
        assert row["count"] == len(inside)
        if inside.empty:
            assert pd.isna(row["min"]) and pd.isna(row["q0.5"]) and pd.isna(row["mean"])
            continue
        # pandas and numpy over the box's rows (outside references).
        assert row["sum"] == pytest.approx(inside.bytes.sum(), rel=1e-12)
        assert row["mean"] == pytest.approx(inside.bytes.mean(), rel=1e-12)
        assert row["min"] == inside.ms.min() and row["max"] == inside.ms.max()
        assert row["q0.5"] == np.quantile(inside.ms, 0.5)
        assert row["q0.99"] == np.quantile(inside.ms, 0.99)
    assert str(got["min"].dtype) == "Int64" and got["count"].dtype == np.int64


def test_stats_boxes_of_a_tz_aware_time_axis_keeps_its_zone() -> None:
    when = pd.Series(pd.date_range("2024-05-01 09:00", periods=6, freq="7min", tz="Europe/Oslo"))
    points = pd.DataFrame({"when": when, "level": [3, 1, 4, 1, 5, 9]})
    tree = boxwood.RangeTree.from_frame(points, x="level", y="when")
    boxes = pd.DataFrame({"lo": [0, 4], "hi": [3, 9]})
    got = tree.stats_boxes(boxes, "lo", "hi", None, None, quantiles=[0.5])
    assert got["min"].dtype == points.when.dtype
    low = points[points.level <= 3].when
    assert got["min"].iloc[0] == low.min() and got["max"].iloc[0] == low.max()
    # numpy.quantile of the naive UTC values, back in the zone.
    utc = low.dt.tz_convert("UTC").dt.tz_localize(None).to_numpy()
    assert got["q0.5"].iloc[0] == pd.Timestamp(np.quantile(utc, 0.5)).tz_localize("UTC")


def test_a_damaged_file_refuses_y_statistics_with_its_own_error(tmp_path: Any) -> None:
    """The transposed cascade is derived from the cascade bits, which a loaded tree checks
    first: damaged bits raise the file's error from the first y statistic (x statistics read
    only the count path, checked at load, and still answer)."""
    from test_index_files import _section

    rng = np.random.default_rng(4)
    tree = boxwood.RangeTree(rng.random(5000), rng.random(5000))
    path = tmp_path / "t.boxwood"
    tree.save(path)
    data = bytearray(path.read_bytes())
    data[_section(data, 7, 3) + 64 * 5 + 9] ^= 0x10  # a bit of level 3's cascade bits
    damaged = tmp_path / "damaged.boxwood"
    damaged.write_bytes(bytes(data))
    loaded = boxwood.load(damaged)
    assert loaded.min(0.2, 0.6, 0.1, 0.9, of="x") == tree.min(0.2, 0.6, 0.1, 0.9, of="x")
    with pytest.raises(boxwood.IndexFileError, match=str(damaged)):
        loaded.quantile(0.2, 0.6, 0.1, 0.9, 0.5, of="y")
    assert loaded.nbytes_by_part["transposed cascade"] == 0
