"""polars inputs: DataFrames and LazyFrames as points and boxes, polars answers.

Outside references: NumPy (boolean masks over the same points, numpy.quantile) for the
answers; pandas (the same frame read through ``DataFrame.to_pandas()`` and the pandas path)
for the answers and the dtypes of the frame calls; polars' own ``join_where`` for the
joins; polars' own ``Series.to_numpy()`` views for the reads without copies; polars' and
pyarrow's own values of zoned instants; Python's ordering of ``str`` for the key order.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest

import boxwood
from _optional import require

pl = require("polars")

N = 300
ZONE = "America/Santiago"


def _points(seed: int = 11) -> object:
    rng = np.random.default_rng(seed)
    return pl.DataFrame(
        {
            "x": rng.integers(0, 100, N),
            "y": rng.random(N),
            "w": rng.integers(-5, 10, N),
            "dock": pl.Series(rng.choice(["quay", "pier", "slip"], N), dtype=pl.Categorical),
            "crane": pl.Series(rng.choice(["c1", "c2"], N)),
            "tide": pl.Series(rng.choice(["ebb", "flood"], N), dtype=pl.Enum(["flood", "ebb"])),
            "at": pl.Series(rng.integers(0, 10**9, N)).cast(pl.Datetime("us", ZONE)),
            "stay": pl.Series(rng.integers(0, 500, N)).cast(pl.Duration("ms")),
            "day": pl.Series(rng.integers(0, 50, N).astype(np.int32)).cast(pl.Date),
        }
    )


def _boxes(seed: int = 12, m: int = 40) -> object:
    rng = np.random.default_rng(seed)
    return pl.DataFrame(
        {
            "x_lo": rng.integers(0, 50, m),
            "x_hi": rng.integers(40, 100, m),
            "y_lo": rng.random(m) / 2,
            "y_hi": 0.5 + rng.random(m) / 2,
            "dock": pl.Series(rng.choice(["quay", "pier", "berth"], m)),
            "crane": pl.Series(rng.choice(["c1", "c2"], m), dtype=pl.Categorical),
            "tide": pl.Series(rng.choice(["ebb", "flood"], m), dtype=pl.Enum(["flood", "ebb"])),
        }
    )


def _mask(points, box) -> np.ndarray:
    """NumPy reference: which points lie in one box (both edges closed)."""
    x = points["x"].to_numpy()
    y = points["y"].to_numpy()
    return (box["x_lo"] <= x) & (x <= box["x_hi"]) & (box["y_lo"] <= y) & (y <= box["y_hi"])


def _text(series) -> np.ndarray:
    return np.asarray(series.cast(pl.String).to_list(), dtype=object)


def _pandas(frame) -> object:
    """The frame as pandas, for the pandas path as a reference (polars converts through
    pyarrow): a skip where either is missing."""
    require("pandas")
    require("pyarrow", reason="polars' to_pandas needs pyarrow")
    return frame.to_pandas()


# ---------------------------------------------------------------- reading without copies


@pytest.mark.parametrize(
    "series",
    [
        pl.Series([3.0, 1.0, 2.0]),
        pl.Series([3, 1, 2]),
        pl.Series([3, 1, 2], dtype=pl.Int16),
        pl.Series([3, 1, 2]).cast(pl.Datetime("ns", "UTC")),
        pl.Series([3, 1, 2]).cast(pl.Duration("us")),
    ],
)
def test_primitive_columns_without_nulls_reach_the_engine_as_polars_own_buffer(series):
    from boxwood._columns import coordinate_column, weight_column

    # Reference: polars' to_numpy gives a view of its buffer (two calls share memory).
    view = series.to_numpy()
    assert np.shares_memory(view, series.to_numpy())
    data, _ = coordinate_column(series, "x")  # what the build passes to the engine
    if series.dtype.is_temporal():
        assert np.shares_memory(data, view)
    elif series.dtype in (pl.Int64, pl.Float64):
        assert np.shares_memory(data, view)
        assert np.shares_memory(weight_column(series, len(series)), view)
    else:  # an Int16 column is widened to int64: a copy, with the same values
        assert data.dtype == np.int64 and data.tolist() == series.to_list()


def test_a_column_in_several_chunks_or_of_dates_is_read_with_its_values():
    from boxwood._columns import coordinate_column

    chunked = pl.concat([pl.Series([4.0, 1.0]), pl.Series([3.0])], rechunk=False)
    days = pl.Series([3, 1, 2]).cast(pl.Date)
    for series in (chunked, days):
        data, _ = coordinate_column(series, "x")
        # Reference: polars' own values (days as their integer count for Date).
        assert data.tolist() == series.to_physical().to_list()
    assert chunked.n_chunks() == 2


def test_the_missing_mask_is_polars_nulls_and_numpys_nans():
    from boxwood._polars import series_values

    series = pl.Series([1.0, None, float("nan"), 4.0])
    values, missing = series_values(series)
    # Reference: polars' own null test and NumPy's NaN test.
    nulls = series.is_null().to_numpy()
    assert missing.tolist() == (nulls | np.isnan(series.fill_null(0.0).to_numpy())).tolist()
    ints, int_missing = series_values(pl.Series([2**62 + 1, None, 5]))
    assert ints.dtype == np.int64 and ints[[0, 2]].tolist() == [2**62 + 1, 5]  # not via float
    assert int_missing.tolist() == [False, True, False]


def test_polars_series_go_wherever_an_array_does_and_a_null_is_refused_naming_its_position():
    rng = np.random.default_rng(4)
    x, y = rng.random(500), rng.integers(0, 50, 500)
    tree = boxwood.RangeTree(pl.Series(x), pl.Series(y), weights=pl.Series(y))
    lo = pl.Series(rng.random(20) / 2)
    counts = tree.count(lo, 0.9, 10, 40)
    inside = [(a <= x) & (x <= 0.9) & (10 <= y) & (y <= 40) for a in lo.to_numpy()]
    assert counts.tolist() == [int(m.sum()) for m in inside]  # NumPy mask reference
    assert tree.sum(lo, 0.9, 10, 40).tolist() == [int(y[m].sum()) for m in inside]
    with pytest.raises(ValueError, match=r"x has a missing value \(null\) at position 2"):
        boxwood.RangeTree(pl.Series([1.0, 2.0, None]), [1, 2, 3])
    with pytest.raises(ValueError, match=r"x_hi has a missing value \(null\) at position 1"):
        tree.count(0, pl.Series([5.0, None]), 0, 9)
    zoned = pl.Series([0, 10, 20]).cast(pl.Datetime("ms", ZONE))
    assert boxwood.RangeTree(zoned, [1, 2, 3])._parts.x.tz == ZONE


# ---------------------------------------------------------------- frames as points and boxes


@pytest.mark.parametrize("lazy", [False, True])
def test_from_frame_and_box_calls_on_polars_match_numpy_and_the_pandas_path(lazy):
    points, boxes = _points(), _boxes()
    tree = boxwood.RangeTree.from_frame(points.lazy() if lazy else points, "x", "y", "w")
    counts = tree.count_boxes(boxes.lazy() if lazy else boxes)
    sums = tree.sum_boxes(boxes)
    assert isinstance(counts, pl.Series) and counts.dtype == pl.Int64 and counts.name == "count"
    assert sums.name == "sum" and sums.dtype == pl.Int64
    rows = boxes.to_dicts()
    w = points["w"].to_numpy()
    assert counts.to_list() == [int(_mask(points, b).sum()) for b in rows]  # NumPy
    assert sums.to_list() == [int(w[_mask(points, b)].sum()) for b in rows]  # NumPy
    report = tree.report_boxes(boxes.lazy() if lazy else boxes)
    assert isinstance(report, pl.DataFrame) and report.schema == {"box": pl.Int64, "row": pl.Int64}
    expected = [(i, r) for i, b in enumerate(rows) for r in np.flatnonzero(_mask(points, b))]
    assert list(zip(report["box"].to_list(), report["row"].to_list())) == expected
    # pandas reference: the same data through the pandas path.
    pd = require("pandas")
    frame = _pandas(points)
    via_pandas = boxwood.RangeTree.from_frame(frame, "x", "y", "w")
    box_frame = _pandas(boxes)
    assert isinstance(box_frame, pd.DataFrame)
    assert counts.to_list() == via_pandas.count_boxes(box_frame).tolist()
    assert sums.to_list() == via_pandas.sum_boxes(box_frame).tolist()
    assert boxes.with_columns(counts).columns[-1] == "count"  # beside the boxes


def test_time_columns_map_to_the_dtypes_of_the_pandas_path():
    points = _points()
    frame = _pandas(points)  # pandas reference: Datetime(tz) -> datetime64[us, tz], ...
    for x, y in (("at", "stay"), ("stay", "x")):
        polars_tree = boxwood.RangeTree.from_frame(points, x, y)
        pandas_tree = boxwood.RangeTree.from_frame(frame, x, y)
        assert repr(polars_tree) == repr(pandas_tree)
        assert polars_tree.x_range == pandas_tree.x_range
        assert polars_tree.y_range == pandas_tree.y_range
    tree = boxwood.RangeTree.from_frame(points, "at", "stay")
    assert tree._parts.x.tz == ZONE and tree.x_dtype == np.dtype("datetime64[us]")
    boxes = pl.DataFrame({"x_lo": points["at"][:30], "x_hi": points["at"][30:60]})
    counts = tree.count_boxes(boxes, y_lo=None, y_hi=None)
    at = points["at"].dt.epoch("us").to_numpy()  # the instants, as integers
    lo, hi = at[:30], at[30:60]
    assert counts.to_list() == [int(((a <= at) & (at <= b)).sum()) for a, b in zip(lo, hi)]
    naive = boxes.with_columns(pl.col("x_lo").dt.replace_time_zone(None))
    with pytest.raises(TypeError, match="tz-aware"):
        tree.count_boxes(naive, y_lo=None, y_hi=None)
    days = boxwood.RangeTree.from_frame(points, "day", "x")
    day = points["day"].to_numpy()
    first = day.min() + np.timedelta64(10, "D")
    counts = days.count_boxes(pl.DataFrame({"lo": np.array([first])}), "lo", None, None, None)
    assert counts.to_list() == [int((day >= first).sum())]  # NumPy reference


@pytest.mark.parametrize("by", ["dock", "crane", "tide", ["dock", "crane", "tide"]])
def test_string_categorical_and_enum_keys_match_numpy_per_key(by):
    points, boxes = _points(), _boxes()
    tree = boxwood.RangeTree.from_frame(points, "x", "y", by=by)
    counts = tree.count_boxes(boxes, by=by).to_list()
    names = [by] if isinstance(by, str) else by
    expected = []
    for b in boxes.to_dicts():
        same = np.ones(N, dtype=bool)
        for n in names:
            same &= _text(points[n]) == b[n]
        expected.append(int((_mask(points, b) & same).sum()))  # NumPy reference
    assert counts == expected
    # pandas reference: the same frames through the pandas path, keys and all.
    via_pandas = boxwood.RangeTree.from_frame(_pandas(points), "x", "y", by=by)
    assert via_pandas.count_boxes(_pandas(boxes), by=by).tolist() == counts
    assert [list(k) for k in np.atleast_2d(tree.keys)] == [
        list(k) for k in np.atleast_2d(via_pandas.keys)
    ]


def test_zoned_datetime_and_integer_keys_match_numpy():
    rng = np.random.default_rng(5)
    hours = pl.Series(rng.integers(0, 4, N) * 3600 * 10**6).cast(pl.Datetime("us", ZONE))
    points = _points().with_columns(hour=hours, bay=pl.Series(rng.integers(0, 3, N)))
    boxes = _boxes(m=8).with_columns(
        hour=pl.Series(rng.integers(0, 5, 8) * 3600 * 10**6).cast(pl.Datetime("us", ZONE)),
        bay=pl.Series(rng.integers(0, 4, 8)),
    )
    tree = boxwood.RangeTree.from_frame(points, "x", "y", by=["hour", "bay"])
    counts = tree.count_boxes(boxes, by=["hour", "bay"]).to_list()
    hour, bay = points["hour"].dt.epoch("us").to_numpy(), points["bay"].to_numpy()
    expected = [
        int((_mask(points, b) & (hour == h) & (bay == k)).sum())
        for b, h, k in zip(boxes.to_dicts(), boxes["hour"].dt.epoch("us"), boxes["bay"])
    ]
    assert counts == expected  # NumPy reference


def test_no_key_column_is_handed_to_pandas():
    from boxwood._keys import CodedColumn
    from boxwood._polars_frames import key_column

    coded = key_column(pl.Series(["b", "a", "b", "é", "Z"], dtype=pl.Categorical))
    assert isinstance(coded, CodedColumn)
    # Reference: Python's own ordering of str (code points), which pandas and NumPy share.
    assert coded.levels.tolist() == sorted({"b", "a", "é", "Z"})
    assert coded.levels[coded.codes].tolist() == ["b", "a", "b", "é", "Z"]


def test_stats_boxes_on_polars_match_numpy_and_the_pandas_path_with_empty_boxes_null():
    points = _points()
    boxes = pl.DataFrame({"x_lo": [0, 200, 10], "x_hi": [60, 300, 90]})
    tree = boxwood.RangeTree.from_frame(points, "x", "y", "w")
    stats = tree.stats_boxes(boxes.lazy(), y_lo=None, y_hi=None, quantiles=[0.5])
    assert isinstance(stats, pl.DataFrame)
    assert stats.columns == ["count", "sum", "mean", "min", "max", "q0.5"]
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    for i, (lo, hi) in enumerate([(0, 60), (200, 300), (10, 90)]):
        inside = y[(lo <= x) & (x <= hi)]
        row = stats.row(i, named=True)
        assert row["count"] == inside.size
        if inside.size == 0:
            assert row["min"] is None and row["q0.5"] is None and row["mean"] is None
        else:  # NumPy reference
            assert row["min"] == inside.min() and row["max"] == inside.max()
            assert row["q0.5"] == np.quantile(inside, 0.5)
    # pandas reference: the same statistics, empty boxes missing there too.
    via_pandas = boxwood.RangeTree.from_frame(_pandas(points), "x", "y", "w").stats_boxes(
        _pandas(boxes), y_lo=None, y_hi=None, quantiles=[0.5]
    )
    for name in stats.columns:
        theirs = [None if v != v else v for v in via_pandas[name].astype(object).tolist()]
        assert stats[name].to_list() == theirs, name


def test_stats_of_a_zoned_time_axis_come_back_in_its_zone_as_the_pandas_path_gives_them():
    points = _points()
    boxes = pl.DataFrame({"x_lo": [0, 20, 500], "x_hi": [60, 90, 600]})
    tree = boxwood.RangeTree.from_frame(points, "x", "at")
    stats = tree.stats_boxes(boxes, y_lo=None, y_hi=None, quantiles=[])
    assert stats.schema["min"] == pl.Datetime("us", ZONE)
    via_pandas = boxwood.RangeTree.from_frame(_pandas(points), "x", "at").stats_boxes(
        _pandas(boxes), y_lo=None, y_hi=None, quantiles=[]
    )  # pandas reference
    theirs = via_pandas["max"].tolist()
    assert [v.isoformat() for v in stats["max"].to_list()[:2]] == [
        v.isoformat() for v in theirs[:2]
    ]
    assert stats["max"][2] is None


def test_a_null_point_is_refused_naming_column_and_row_or_dropped():
    points = pl.DataFrame({"x": [1.0, None, 3.0, float("nan")], "y": pl.Series([1, 2, None, 4])})
    with pytest.raises(
        ValueError, match=r"x column 'x' has a missing value \(null or NaN\) at row 1"
    ):
        boxwood.RangeTree.from_frame(points, "x", "y")
    with pytest.raises(ValueError, match=r"y column 'y' .* at row 2"):
        boxwood.RangeTree.from_frame(points.with_columns(x=pl.lit(0.0)), "x", "y")
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 3 of 4 rows"):
        tree = boxwood.RangeTree.from_frame(points, "x", "y", on_missing="drop")
    assert tree.rows_dropped == 3 and tree.y_dtype == np.int64
    assert tree.report(0, 10, 0, 10)[1].tolist() == [0]  # positions in the frame
    boxes = pl.DataFrame({"x_lo": [0.0, None], "x_hi": [9.0, 9.0], "k": ["a", None]})
    with pytest.raises(ValueError, match=r"x_lo bound column 'x_lo' .* at box 1"):
        tree.count_boxes(boxes, y_lo=None, y_hi=None)
    with pytest.raises(boxwood.MissingColumnError, match="no column for x_lo='t0'.*'x_hi', 'k'"):
        tree.count_boxes(boxes.lazy(), x_lo="t0", y_lo=None, y_hi=None)
    boxes = boxes.with_columns(pl.col("x_lo").fill_null(0.0))
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 1 of 2 rows"):
        keyed = boxwood.RangeTree.from_frame(boxes, "x_lo", "x_hi", by="k", on_missing="drop")
    with pytest.raises(
        ValueError, match=r"by key column 'k' .* at box 1; 1 of 2 boxes .*every box needs its key"
    ):
        keyed.count_boxes(boxes, by="k", y_lo=None, y_hi=None)
    with pytest.raises(TypeError, match="boxes must be a polars DataFrame or LazyFrame"):
        boxwood.box_join(points, boxes.to_dicts(), x="x", y="y")


def test_a_polars_only_workflow_imports_neither_pandas_nor_pyarrow():
    script = textwrap.dedent(
        """
        import sys
        import boxwood
        import polars as pl

        points = pl.DataFrame({
            "x": [1.0, 2.0, 3.0, 4.0], "y": [1, 2, None, 4], "w": [1.5, 2.5, 3.5, 4.5],
            "lane": pl.Series(["a", "b", "a", "b"], dtype=pl.Categorical),
            "gate": ["n", "s", "n", "n"],
            "at": pl.Series([1, 2, 3, 4]).cast(pl.Datetime("us", "Asia/Tokyo")),
        })
        boxes = pl.DataFrame({"x_lo": [0, 2], "x_hi": [3, 9], "y_lo": [0, 0], "y_hi": [9, 9],
                              "lane": ["a", "b"], "gate": ["n", "s"]})
        tree = boxwood.RangeTree.from_frame(points.lazy(), "x", "y", "w", by=["lane", "gate"],
                                            on_missing="drop")
        tree.count_boxes(boxes, by=["lane", "gate"])
        tree.sum_boxes(boxes.lazy(), by=["lane", "gate"])
        tree.report_boxes(boxes, by=["lane", "gate"])
        tree.stats_boxes(boxes, by=["lane", "gate"])
        zoned = boxwood.RangeTree.from_frame(points, "x", "at")
        zoned.stats_boxes(boxes, y_lo=None, y_hi=None)
        boxwood.box_join(points, boxes, x="x", y="y", by="lane", on_missing="drop")
        list(boxwood.box_join_chunks(points, boxes, x="x", y="y", max_rows=1, on_missing="drop"))
        boxes.boxwood.count(zoned, y_lo=None, y_hi=None)
        print(sorted(m for m in ("pandas", "pyarrow") if m in sys.modules))
        """
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize("kind", ["polars", "arrow"])
def test_without_pandas_a_zoned_axis_answers_datetimes_in_its_zone(kind):
    if kind == "arrow":
        require("pyarrow")
    column = {
        "polars": f'pl.Series(ticks).cast(pl.Datetime("us", "{ZONE}"))',
        # A fixed offset as the zone (polars takes only zone names).
        "arrow": 'pa.array(ticks).cast(pa.timestamp("us", tz="+05:30"))',
    }[kind]
    script = textwrap.dedent(
        f"""
        import sys

        class NoPandas:  # as if pandas were not installed
            def find_spec(self, name, path=None, target=None):
                if name.split(".")[0] == "pandas":
                    raise ModuleNotFoundError("No module named 'pandas'", name="pandas")

        sys.meta_path.insert(0, NoPandas())
        import datetime
        import boxwood
        import polars as pl
        if {kind!r} == "arrow":
            import pyarrow as pa

        ticks = [5_000_001, 86_400_000_000, 3_600_000_007]
        at = {column}
        # Reference: the library's own value of each instant, in its zone.
        values = at.to_list() if {kind!r} == "polars" else at.to_pylist()
        tree = boxwood.RangeTree(at, [1, 2, 3])
        low, high = tree.x_range
        first = tree.min(-float("inf"), float("inf"), 0, 2, of="x")
        print(low == min(values), high == max(values), first == values[0],
              type(low) is datetime.datetime, low.utcoffset() == values[0].utcoffset())
        fine = pl.Series([1, 2]).cast(pl.Datetime("ns", "UTC"))
        try:
            boxwood.RangeTree(fine, [1, 2]).x_range
        except ImportError as error:
            print("finer than a microsecond" in str(error))
        """
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["True"] * 6


def test_import_boxwood_does_not_import_polars():
    script = "import sys, boxwood; print('polars' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"


def test_a_growing_tree_appends_polars_frames_and_answers_polars_boxes_in_polars():
    points, boxes = _points(), _boxes()
    grow = boxwood.GrowingTree(
        "int64", "float64", weights="int64", by="crane", names=("x", "y", "w")
    )
    first = grow.append(points.slice(0, 120))
    second = grow.append(points.slice(120).lazy())
    assert first.tolist() == list(range(120)) and second.tolist() == list(range(120, N))
    counts = grow.count_boxes(boxes, by="crane")
    assert isinstance(counts, pl.Series)
    crane = _text(points["crane"])
    # NumPy reference: boolean masks over the same points, key by key.
    want = [int((_mask(points, b) & (crane == b["crane"])).sum()) for b in boxes.to_dicts()]
    assert counts.to_list() == want


def test_a_growing_trees_join_of_polars_frames_matches_polars_join_where():
    points, boxes = _points(), _boxes(m=12)
    grow = boxwood.GrowingTree("int64", "float64", by="crane", names=("x", "y", "w"))
    grow.append(points.slice(0, 150))
    grow.append(points.slice(150).lazy())
    grow.delete(np.arange(0, N, 7))
    joined = grow.box_join(points.lazy(), boxes, by="crane", keep_index=True)
    assert isinstance(joined, pl.DataFrame) and joined.schema["dock_point"] == pl.Categorical
    assert "crane" in joined.columns and "crane_box" not in joined.columns  # the key once
    # Outside reference: polars' own join_where over the live rows (every 7th deleted).
    live = points.with_row_index("pid").filter(pl.col("pid") % 7 != 0)
    reference = live.with_columns(pl.col("crane").cast(pl.String)).join_where(
        boxes.with_row_index("bid").with_columns(pl.col("crane").cast(pl.String)),
        pl.col("crane") == pl.col("crane_right"),
        pl.col("x") >= pl.col("x_lo"),
        pl.col("x") <= pl.col("x_hi"),
        pl.col("y") >= pl.col("y_lo"),
        pl.col("y") <= pl.col("y_hi"),
    )
    assert reference.height > 10
    assert _pairs_of(joined, "index_point", "index_box") == _pairs_of(reference, "pid", "bid")
    with pytest.raises(ValueError, match="points has 10 rows but the growing tree"):
        grow.box_join(points.head(10), boxes, by="crane")


# ---------------------------------------------------------------- joins


def _pairs_of(frame, point: str, box: str) -> list[tuple[int, int]]:
    return sorted(zip(frame[point].to_list(), frame[box].to_list()))


@pytest.mark.parametrize("inclusive", ["both", "left"])
def test_box_join_on_polars_matches_polars_join_where(inclusive):
    points, boxes = _points(), _boxes(m=15)
    joined = boxwood.box_join(
        points, boxes.lazy(), x="x", y="y", by="dock", keep_index=True, inclusive=inclusive
    )
    assert isinstance(joined, pl.DataFrame)
    # Outside reference: polars' own join_where with the box predicates and the key.
    hi = (pl.col("x") <= pl.col("x_hi")) if inclusive == "both" else (pl.col("x") < pl.col("x_hi"))
    y_hi = (
        (pl.col("y") <= pl.col("y_hi")) if inclusive == "both" else (pl.col("y") < pl.col("y_hi"))
    )
    reference = (
        points.with_row_index("pid")
        .with_columns(pl.col("dock").cast(pl.String))
        .join_where(
            boxes.with_row_index("bid"),
            pl.col("dock") == pl.col("dock_right"),
            pl.col("x") >= pl.col("x_lo"),
            hi,
            pl.col("y") >= pl.col("y_lo"),
            y_hi,
        )
    )
    assert reference.height > 20  # the check has pairs to compare
    assert _pairs_of(joined, "index_point", "index_box") == _pairs_of(reference, "pid", "bid")


def test_box_join_on_polars_keeps_dtypes_and_matches_the_pandas_join():
    points, boxes = _points(), _boxes(m=15)
    joined = boxwood.box_join(points, boxes, x="x", y="y", by="dock")
    # The key is carried once (the points'); the other shared names get both suffixes.
    assert joined.columns[: points.width] == [
        "x",
        "y",
        "w",
        "dock",
        "crane_point",
        "tide_point",
        "at",
        "stay",
        "day",
    ]
    assert joined.columns[points.width :] == [
        "x_lo",
        "x_hi",
        "y_lo",
        "y_hi",
        "crane_box",
        "tide_box",
    ]
    for name, dtype in points.schema.items():
        suffixed = name if name in joined.columns else f"{name}_point"
        assert joined.schema[suffixed] == dtype, name  # Categorical, Enum, zoned Datetime, ...
    assert joined.schema["crane_box"] == pl.Categorical
    # pandas reference: the same frames through the pandas join.
    via_pandas = boxwood.box_join(_pandas(points), _pandas(boxes), x="x", y="y", by="dock")
    assert list(via_pandas.columns) == joined.columns
    for name in ("x", "y", "w", "x_lo", "y_hi"):
        assert via_pandas[name].tolist() == joined[name].to_list(), name
    assert via_pandas["dock"].astype(str).tolist() == joined["dock"].cast(pl.String).to_list()
    assert [t.isoformat() for t in via_pandas["at"]] == [
        t.isoformat() for t in joined["at"].to_list()
    ]


def test_box_join_chunks_on_polars_are_the_join_in_pieces():
    points, boxes = _points(), _boxes(m=15)
    joined = boxwood.box_join(points, boxes, x="x", y="y")
    chunks = list(boxwood.box_join_chunks(points.lazy(), boxes, x="x", y="y", max_rows=7))
    assert all(isinstance(c, pl.DataFrame) and c.height <= 7 for c in chunks)
    # Boxes of more than max_rows matches are cut along x: the same rows, in another order.
    assert pl.concat(chunks).sort(pl.all()).equals(joined.sort(pl.all()))
    whole = boxwood.box_join_chunks(points, boxes, x="x", y="y", max_rows=N * 15)
    assert pl.concat(list(whole)).equals(joined)
    none = list(boxwood.box_join_chunks(points, boxes.head(0), x="x", y="y"))
    assert len(none) == 1 and none[0].height == 0 and none[0].schema == joined.schema


def test_box_join_on_polars_refuses_a_tree_of_other_columns_and_a_taken_index_name():
    points, boxes = _points(), _boxes(m=5)
    tree = boxwood.RangeTree.from_frame(points, "x", "y", layout="fast")
    same = boxwood.box_join(points, boxes, x="x", y="y", tree=tree)
    assert same.equals(boxwood.box_join(points, boxes, x="x", y="y"))
    shuffled = points.sample(fraction=1.0, shuffle=True, seed=3)
    with pytest.raises(ValueError, match="sampled rows differ"):
        boxwood.box_join(shuffled, boxes, x="x", y="y", tree=tree)
    with pytest.raises(ValueError, match="the tree was built from columns x='x', y='y'"):
        boxwood.box_join(points, boxes, x="w", y="y", tree=tree)
    taken = boxes.with_columns(index=pl.lit(0))
    with pytest.raises(ValueError, match="the boxes frame has a column 'index' already"):
        boxwood.box_join(points, taken, x="x", y="y", keep_index=True)
    with pytest.raises(TypeError, match="boxes must be a polars DataFrame or LazyFrame"):
        boxwood.box_join(points, boxes.to_dicts(), x="x", y="y")


# ---------------------------------------------------------------- the namespace


def test_the_boxwood_namespace_answers_as_the_tree_calls_do():
    points, boxes = _points(), _boxes()
    tree = points.lazy().boxwood.tree("x", "y", "w", by="dock")
    # Reference: the same calls on the tree, checked against NumPy above.
    direct = boxwood.RangeTree.from_frame(points, "x", "y", "w", by="dock")
    for frame in (boxes, boxes.lazy()):
        assert frame.boxwood.count(tree, by="dock").equals(direct.count_boxes(boxes, by="dock"))
        assert frame.boxwood.sum(tree, by="dock").equals(direct.sum_boxes(boxes, by="dock"))
        report = frame.boxwood.report(tree, by="dock")
        assert report.equals(direct.report_boxes(boxes, by="dock"))
        stats = frame.boxwood.stats(tree, by="dock", quantiles=[0.5])
        assert stats.equals(direct.stats_boxes(boxes, by="dock", quantiles=[0.5]))
    joined = boxes.boxwood.join(points, x="x", y="y", by="dock")
    assert joined.equals(boxwood.box_join(points, boxes, x="x", y="y", by="dock"))
    chunks = boxes.boxwood.join_chunks(points, x="x", y="y", by="dock", max_rows=5)
    assert pl.concat(list(chunks)).height == joined.height


@pytest.mark.parametrize("first", ["boxwood", "polars"])
def test_the_namespace_is_registered_whichever_is_imported_first(first):
    second = "polars" if first == "boxwood" else "boxwood"
    script = textwrap.dedent(
        f"""
        import sys
        import {first}
        import {second}
        import polars as pl
        frame = pl.DataFrame({{"x": [1.0, 2.0], "y": [3, 4]}})
        tree = frame.boxwood.tree("x", "y")
        print(frame.lazy().boxwood.count(tree, 0, 1.5, 0, 9).to_list(), "pandas" in sys.modules)
        """
    )
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[1, 1] False"  # both boxes hold x = 1.0
