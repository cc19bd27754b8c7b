"""Arrow inputs: pyarrow Arrays, ChunkedArrays, Tables and RecordBatches.

Outside references: NumPy (boolean masks over the same points, numpy.quantile) for the
answers; pandas (the same table read with ``to_pandas(types_mapper=pd.ArrowDtype)`` through
the pandas path) for dtypes and answers of the frame calls; pyarrow's own buffer addresses
for the zero-copy reads.
"""

from __future__ import annotations

import numpy as np
import pytest

import boxwood
from _optional import require
from boxwood._arrow import arrow_values

pa = require("pyarrow")
pd = require("pandas")

N = 300


def _points(seed: int = 7) -> object:
    rng = np.random.default_rng(seed)
    ticks = rng.integers(0, 10**6, N).astype("datetime64[s]")
    return pa.table(
        {
            "x": rng.integers(0, 100, N),
            "y": rng.random(N),
            "w": rng.integers(-5, 10, N),
            "site": pa.array(rng.choice(["east", "west", "north"], N)).dictionary_encode(),
            "bay": pa.array(rng.choice(["b1", "b2"], N)),
            "at": pa.array(ticks).cast(pa.timestamp("s", tz="Asia/Tokyo")),
            "day": pa.array(rng.integers(0, 50, N).astype(np.int32), pa.date32()),
            "wait": pa.array(rng.integers(0, 500, N), pa.duration("s")),
        }
    )


def _boxes(seed: int = 8, m: int = 40) -> object:
    rng = np.random.default_rng(seed)
    return pa.table(
        {
            "x_lo": rng.integers(0, 50, m),
            "x_hi": rng.integers(40, 100, m),
            "y_lo": rng.random(m) / 2,
            "y_hi": 0.5 + rng.random(m) / 2,
            "site": pa.array(rng.choice(["east", "west", "south"], m)),
            "bay": pa.array(rng.choice(["b1", "b2"], m)).dictionary_encode(),
        }
    )


def _mask(points, box) -> np.ndarray:
    """NumPy reference: which points lie in one box (both edges closed)."""
    x = points["x"].to_numpy()
    y = points["y"].to_numpy()
    return (box["x_lo"] <= x) & (x <= box["x_hi"]) & (box["y_lo"] <= y) & (y <= box["y_hi"])


# ---------------------------------------------------------------- reading without copies


@pytest.mark.parametrize(
    "array",
    [
        pa.array([3.0, 1.0, 2.0]),
        pa.array([3, 1, 2], pa.int64()),
        pa.array([3, 1, 2], pa.int16()),
        pa.array(np.array([3, 1, 2], dtype="datetime64[ms]")).cast(pa.timestamp("ms", tz="UTC")),
        pa.array([3, 1, 2], pa.duration("us")),
        pa.chunked_array([pa.array([5.0, 6.0])]),
        pa.array([9.0, 3.0, 1.0, 2.0]).slice(1),
    ],
)
def test_primitive_arrays_without_nulls_in_one_chunk_are_read_as_views(array):
    values, missing = arrow_values(array)
    chunk = array.chunk(0) if isinstance(array, pa.ChunkedArray) else array
    data = chunk.buffers()[1]
    # Reference: the address pyarrow gives for the array's data buffer, plus its offset.
    start = data.address + chunk.offset * values.itemsize
    assert values.ctypes.data == start
    assert np.shares_memory(values, np.frombuffer(data, dtype=np.uint8))
    assert not missing.any() and values.tolist() == [v for v in chunk.to_numpy().tolist()]


@pytest.mark.parametrize(
    "array",
    [
        pa.array([3.0, None, 2.0]),
        pa.chunked_array([pa.array([1, 2]), pa.array([3])]),
        pa.array([1, 2], pa.date32()),
    ],
)
def test_nulls_several_chunks_and_date32_are_copied(array):
    values, missing = arrow_values(array)
    buffers = array.chunk(0).buffers() if isinstance(array, pa.ChunkedArray) else array.buffers()
    assert not np.shares_memory(values, np.frombuffer(buffers[1], dtype=np.uint8))
    assert missing.tolist() == array.is_null().to_pylist()


@pytest.mark.parametrize(
    "array",
    [
        pa.array([3.0, 1.0, 2.0]),
        pa.array([3, 1, 2], pa.int64()),
        pa.array(np.array([3, 1, 2], dtype="datetime64[ns]")).cast(pa.timestamp("ns", "UTC")),
    ],
)
def test_the_engine_is_handed_the_arrow_buffer_itself(array):
    from boxwood._columns import coordinate_column, weight_column

    data, _ = coordinate_column(array, "x")  # what the build passes to the engine
    assert np.shares_memory(data, np.frombuffer(array.buffers()[1], dtype=np.uint8))
    if not pa.types.is_timestamp(array.type):
        weights = weight_column(array, len(array))
        assert np.shares_memory(weights, np.frombuffer(array.buffers()[1], dtype=np.uint8))


@pytest.mark.parametrize(
    "array",
    [
        pa.array([1.0, None, float("nan"), 4.0]),
        pa.array([1.0, 2.0, float("nan")], pa.float32()),
        pa.array(["a", None, "b"]).dictionary_encode(),
        pa.chunked_array([pa.array([1, None]), pa.array([None, 4])]),
        pa.array([1, None, 3], pa.date32()),
    ],
)
def test_the_missing_mask_alone_is_the_mask_of_the_values(array):
    from boxwood._arrow import arrow_missing

    # Reference: pyarrow's own null test, and NumPy's NaN test of the floats.
    nulls = np.asarray(array.is_null().to_pylist())
    values = array.to_pylist()
    nans = np.array([isinstance(v, float) and v != v for v in values])
    assert arrow_missing(array).tolist() == (nulls | nans).tolist()
    assert arrow_values(array)[1].tolist() == (nulls | nans).tolist()


def test_a_tree_built_from_arrow_columns_reads_them_in_place_and_answers_as_numpy():
    rng = np.random.default_rng(3)
    x, y = rng.random(1000), rng.integers(0, 50, 1000)
    tree = boxwood.RangeTree(pa.array(x), pa.chunked_array([pa.array(y[:500]), pa.array(y[500:])]))
    lo = pa.array(rng.random(20) / 2)
    counts = tree.count(lo, 0.9, 10, 40)
    expected = [int(((a <= x) & (x <= 0.9) & (10 <= y) & (y <= 40)).sum()) for a in lo.to_numpy()]
    assert counts.tolist() == expected  # NumPy mask reference
    assert tree.x_dtype == np.float64 and tree.y_dtype == np.int64


def test_an_arrow_array_with_a_null_is_refused_naming_its_position():
    with pytest.raises(ValueError, match=r"x has a missing value \(null\) at position 2"):
        boxwood.RangeTree(pa.array([1.0, 2.0, None]), [1, 2, 3])
    tree = boxwood.RangeTree([1.0, 2.0, 3.0], [1, 2, 3])
    with pytest.raises(ValueError, match=r"x_hi has a missing value \(null\) at position 1"):
        tree.count(0, pa.array([5.0, None]), 0, 9)


# ---------------------------------------------------------------- tables as points and boxes


@pytest.mark.parametrize("kind", ["table", "batch"])
def test_from_frame_and_box_calls_on_arrow_match_numpy_and_the_pandas_path(kind):
    points, boxes = _points(), _boxes()
    if kind == "batch":
        points, boxes = points.to_batches()[0], boxes.to_batches()[0]
        assert isinstance(points, pa.RecordBatch)
    tree = boxwood.RangeTree.from_frame(points, "x", "y", "w")
    counts = tree.count_boxes(boxes)
    sums = tree.sum_boxes(boxes)
    assert isinstance(counts, pa.Array) and counts.type == pa.int64()
    rows = boxes.to_pylist()
    w = points["w"].to_numpy()
    assert counts.to_pylist() == [int(_mask(points, b).sum()) for b in rows]  # NumPy
    assert sums.to_pylist() == [int(w[_mask(points, b)].sum()) for b in rows]  # NumPy
    report = tree.report_boxes(boxes)
    expected = [(i, r) for i, b in enumerate(rows) for r in np.flatnonzero(_mask(points, b))]
    assert list(zip(report["box"].to_pylist(), report["row"].to_pylist())) == expected
    # pandas reference: the same data through the pandas path.
    frame = pa.table(points).to_pandas(types_mapper=pd.ArrowDtype)
    via_pandas = boxwood.RangeTree.from_frame(frame, "x", "y", "w")
    box_frame = pa.table(boxes).to_pandas()
    assert counts.to_pylist() == via_pandas.count_boxes(box_frame).tolist()
    assert sums.to_pylist() == via_pandas.sum_boxes(box_frame).tolist()


def test_time_columns_map_to_the_dtypes_of_the_pandas_path():
    points = _points()
    frame = points.to_pandas(types_mapper=pd.ArrowDtype)
    for x, y in (("at", "wait"), ("day", "wait"), ("wait", "day")):
        arrow_tree = boxwood.RangeTree.from_frame(points, x, y)
        pandas_tree = boxwood.RangeTree.from_frame(frame, x, y)  # pandas reference
        assert repr(arrow_tree) == repr(pandas_tree)
        assert arrow_tree.x_range == pandas_tree.x_range
        assert arrow_tree.y_range == pandas_tree.y_range
    tree = boxwood.RangeTree.from_frame(points, "at", "wait")
    assert tree._parts.x.tz == "Asia/Tokyo" and tree.x_dtype == np.dtype("datetime64[s]")
    boxes = pa.table({"x_lo": points["at"].slice(0, 30), "x_hi": points["at"].slice(30, 30)})
    counts = tree.count_boxes(boxes, y_lo=None, y_hi=None)
    at = points["at"].cast(pa.int64()).to_numpy()
    lo, hi = at[:30], at[30:60]
    assert counts.to_pylist() == [int(((a <= at) & (at <= b)).sum()) for a, b in zip(lo, hi)]
    naive = pa.table({"x_lo": points["at"].cast(pa.timestamp("s")).slice(0, 3), "x_hi": [None] * 3})
    with pytest.raises(TypeError, match="tz-aware"):
        tree.count_boxes(naive.select(["x_lo"]), x_hi=None, y_lo=None, y_hi=None)


@pytest.mark.parametrize("by", ["site", ["site", "bay"]])
def test_dictionary_and_string_keys_match_numpy_per_key(by):
    points, boxes = _points(), _boxes()
    tree = boxwood.RangeTree.from_frame(points, "x", "y", by=by)
    counts = tree.count_boxes(boxes, by=by).to_pylist()
    names = [by] if isinstance(by, str) else by
    keys = {n: np.asarray(points[n].cast(pa.string()).to_pylist()) for n in names}
    expected = []
    for b in boxes.to_pylist():
        same = np.ones(N, dtype=bool)
        for n in names:
            same &= keys[n] == b[n]
        expected.append(int((_mask(points, b) & same).sum()))  # NumPy reference
    assert counts == expected
    assert tree.keys is not None


def test_stats_boxes_on_arrow_match_numpy_with_empty_boxes_null():
    points = _points()
    boxes = pa.table({"x_lo": [0, 200, 10], "x_hi": [60, 300, 90]})
    tree = boxwood.RangeTree.from_frame(points, "x", "y", "w")
    stats = tree.stats_boxes(boxes, y_lo=None, y_hi=None, quantiles=[0.5])
    assert isinstance(stats, pa.Table)
    assert stats.schema.names == ["count", "sum", "mean", "min", "max", "q0.5"]
    x, y = points["x"].to_numpy(), points["y"].to_numpy()
    for i, (lo, hi) in enumerate([(0, 60), (200, 300), (10, 90)]):
        inside = y[(lo <= x) & (x <= hi)]
        row = {name: stats[name][i].as_py() for name in stats.schema.names}
        assert row["count"] == inside.size
        if inside.size == 0:
            assert row["min"] is None and row["q0.5"] is None and row["mean"] is None
        else:  # NumPy reference
            assert row["min"] == inside.min() and row["max"] == inside.max()
            assert row["q0.5"] == pytest.approx(np.quantile(inside, 0.5), rel=0, abs=0)


def test_a_null_point_is_refused_naming_column_and_row_or_dropped():
    points = pa.table({"x": [1.0, None, 3.0, 4.0], "y": [1, 2, None, 4]})
    with pytest.raises(
        ValueError, match=r"x column 'x' has a missing value \(null or NaN\) at row 1"
    ):
        boxwood.RangeTree.from_frame(points, "x", "y")
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 2 of 4 rows"):
        tree = boxwood.RangeTree.from_frame(points, "x", "y", on_missing="drop")
    assert tree.rows_dropped == 2
    assert tree.report(0, 10, 0, 10)[1].tolist() == [0, 3]  # positions in the table
    boxes = pa.table({"x_lo": [0.0, None], "x_hi": [9.0, 9.0]})
    with pytest.raises(ValueError, match=r"x_lo bound column 'x_lo' .* at box 1"):
        tree.count_boxes(boxes, y_lo=None, y_hi=None)
    with pytest.raises(boxwood.MissingColumnError, match="no column for x_lo='t0'"):
        tree.count_boxes(boxes, x_lo="t0", y_lo=None, y_hi=None)


# ---------------------------------------------------------------- joins


def test_box_join_on_arrow_matches_numpy_pairs_and_the_pandas_join():
    points, boxes = _points(), _boxes(m=15)
    joined = boxwood.box_join(points, boxes, x="x", y="y", by="site")
    assert isinstance(joined, pa.Table)
    site = np.asarray(points["site"].cast(pa.string()).to_pylist())
    expected = [
        (i, r)
        for i, b in enumerate(boxes.to_pylist())
        for r in np.flatnonzero(_mask(points, b) & (site == b["site"]))
    ]
    x = points["x"].to_numpy()
    assert joined["x"].to_pylist() == [int(x[r]) for _, r in expected]  # NumPy pairs
    assert joined["x_lo"].to_pylist() == [boxes["x_lo"][i].as_py() for i, _ in expected]
    # The key is carried once (the points'); the other shared name gets both suffixes.
    assert "site" in joined.schema.names and "bay_point" in joined.schema.names
    via_pandas = boxwood.box_join(
        points.to_pandas(types_mapper=pd.ArrowDtype),
        boxes.to_pandas(types_mapper=pd.ArrowDtype),
        x="x",
        y="y",
        by="site",
    )  # pandas reference
    assert list(via_pandas.columns) == joined.schema.names
    assert via_pandas["y"].tolist() == joined["y"].to_pylist()
    chunks = list(boxwood.box_join_chunks(points, boxes, x="x", y="y", by="site", max_rows=7))
    assert all(c.num_rows <= 7 for c in chunks)

    # Boxes of more than max_rows matches are cut along x: the same rows, in another order.
    def rows(table):
        return sorted(tuple(map(str, row.values())) for row in table.to_pylist())

    assert rows(pa.concat_tables(chunks)) == rows(joined)
    whole = boxwood.box_join_chunks(points, boxes, x="x", y="y", by="site", max_rows=N * 15)
    assert pa.concat_tables(list(whole)).to_pylist() == joined.to_pylist()


def test_box_join_on_arrow_keeps_positions_and_refuses_mixed_kinds():
    points = pa.table({"t": [0.0, 10.0, 25.0], "m": [12, 5, 8]})
    boxes = pa.table({"x_lo": [0, 20], "x_hi": [15, 30], "y_lo": [0, 0], "y_hi": [10, 10]})
    joined = boxwood.box_join(points, boxes, x="t", y="m", keep_index=True)
    assert joined.schema.names[:3] == ["index_point", "t", "m"]
    assert joined["index_point"].to_pylist() == [1, 2]
    assert joined["index_box"].to_pylist() == [0, 1]
    with pytest.raises(TypeError, match="boxes must be a pyarrow Table or RecordBatch"):
        boxwood.box_join(points, boxes.to_pandas(), x="t", y="m")


def test_a_growing_tree_takes_arrow_columns_and_answers_arrow_boxes_in_arrow():
    points, boxes = _points(), _boxes()
    grow = boxwood.GrowingTree("int64", "float64", weights="int64")
    grow.append(points["x"].slice(0, 100), points["y"].slice(0, 100), weights=points["w"][:100])
    grow.append(points["x"].slice(100), points["y"].slice(100), weights=points["w"][100:])
    counts = grow.count_boxes(boxes)
    assert isinstance(counts, pa.Array)
    assert counts.to_pylist() == [int(_mask(points, b).sum()) for b in boxes.to_pylist()]  # NumPy
    w = points["w"].to_numpy()
    sums = grow.sum_boxes(boxes).to_pylist()
    assert sums == [int(w[_mask(points, b)].sum()) for b in boxes.to_pylist()]


def test_a_growing_tree_appends_whole_tables_and_batches_read_by_its_column_names():
    points, boxes = _points(), _boxes()
    grow = boxwood.GrowingTree(
        "int64", "float64", weights="int64", by="site", names=("x", "y", "w")
    )
    first = grow.append(points.slice(0, 120))
    second = grow.append(points.slice(120).to_batches()[0])
    assert first.tolist() == list(range(120)) and second.tolist() == list(range(120, N))
    # NumPy reference: boolean masks over the same points, key by key.
    sites = np.array(points["site"].to_pylist())
    for b in boxes.to_pylist():
        want = int((_mask(points, b) & (sites == b["site"])).sum())
        assert grow.count(b["x_lo"], b["x_hi"], b["y_lo"], b["y_hi"], by=b["site"]) == want


def test_an_appended_table_with_a_null_is_refused_naming_it_or_its_row_dropped():
    grow = boxwood.GrowingTree("datetime64[s]", "float64", names=("at", "m", "w"))
    ticks = pa.array(np.arange(3).astype("datetime64[s]"))
    table = pa.table({"at": ticks, "m": pa.array([1.0, None, 3.0])})
    with pytest.raises(ValueError, match=r"y column 'm' has a missing value .* at row 1"):
        grow.append(table)
    assert len(grow) == 0  # nothing went in
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 1 of 3 rows"):
        ids = grow.append(table, on_missing="drop")
    assert ids.tolist() == [0, 1] and len(grow) == 2
    _, rows = grow.report(np.datetime64(2, "s"), np.datetime64(2, "s"), 0, 9)
    assert rows.tolist() == [1]
    with pytest.raises(boxwood.MissingColumnError, match="no column for y='m'"):
        grow.append(table.drop_columns(["m"]))


def test_stats_of_a_zoned_time_axis_come_back_in_its_zone_as_the_pandas_path_gives_them():
    points = _points()
    boxes = pa.table({"x_lo": [0, 20, 500], "x_hi": [60, 90, 600]})
    tree = boxwood.RangeTree.from_frame(points, "x", "at")
    stats = tree.stats_boxes(boxes, y_lo=None, y_hi=None, quantiles=[0.5])
    assert stats.schema.field("min").type == pa.timestamp("s", tz="Asia/Tokyo")
    # pandas reference: the same data and boxes through the pandas path.
    frame = points.to_pandas(types_mapper=pd.ArrowDtype)
    via_pandas = boxwood.RangeTree.from_frame(frame, "x", "at").stats_boxes(
        boxes.to_pandas(), y_lo=None, y_hi=None, quantiles=[0.5]
    )
    for name in ("min", "max", "q0.5"):
        got = stats[name].to_pylist()
        want = [None if pd.isna(v) else v.to_pydatetime() for v in via_pandas[name]]
        assert got == want, name
    assert got[-1] is None  # the empty box


def test_a_join_refuses_a_tree_built_from_other_arrow_columns():
    points = pa.table({"t": [0.0, 10.0, 25.0], "m": [12.0, 5.0, 8.0], "u": [1.0, 2.0, 3.0]})
    boxes = pa.table({"x_lo": [0.0], "x_hi": [30.0], "y_lo": [0.0], "y_hi": [30.0]})
    tree = boxwood.RangeTree.from_frame(points, "t", "m", layout="fast")
    joined = boxwood.box_join(points, boxes, x="t", y="m", tree=tree)
    assert joined["t"].to_pylist() == [0.0, 10.0, 25.0]  # the tree fits: used as it is
    with pytest.raises(ValueError, match="built from columns x='t', y='m', not x='t', y='u'"):
        boxwood.box_join(points, boxes, x="t", y="u", tree=tree)
    other = points.set_column(1, "m", pa.array([12.0, 5.0, 9.0]))
    with pytest.raises(ValueError, match="other values of columns 't', 'm'"):
        boxwood.box_join(other, boxes, x="t", y="m", tree=tree)
    narrow = points.set_column(1, "m", pa.array([12, 5, 8], pa.int32()))
    with pytest.raises(ValueError, match="dtypes double, double, but the points' 't', 'm' are"):
        boxwood.box_join(narrow, boxes, x="t", y="m", tree=tree)


def test_a_growing_trees_join_of_arrow_tables_is_a_table_of_its_live_pairs():
    points, boxes = _points(), _boxes(m=10)
    grow = boxwood.GrowingTree("int64", "float64", names=("x", "y", "w"))
    grow.append(points)
    grow.delete(np.arange(0, N, 5))
    joined = grow.box_join(points, boxes, keep_index=True)
    assert isinstance(joined, pa.Table)
    live = np.arange(N) % 5 != 0
    # NumPy reference: each box's live points, box by box, rows ascending.
    expected = [
        (i, r)
        for i, b in enumerate(boxes.to_pylist())
        for r in np.flatnonzero(_mask(points, b) & live)
    ]
    got = list(zip(joined["index_box"].to_pylist(), joined["index_point"].to_pylist()))
    assert got == expected and joined.schema.names[-1] == "bay_box"
