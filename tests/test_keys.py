"""Keyed trees (``by=``) against the keyed reference (tests/reference.py) and bad input.

The reference scans every point for every box and compares keys with Python's ``==``; the
tree orders its x axis by (key code, x) and searches inside each key's run. Property tests
draw every key type (integers, strings sharing prefixes, booleans, dates, two columns),
keys with one point, keys absent from the tree, many keys of a few points and a few of many.
"""

from __future__ import annotations

import json
import math
import pickle

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import boxwood
from _optional import require
from reference import INCLUSIVE, keyed_ref_rows

LAYOUTS = ("fast", "compact")

# Strings that share prefixes, so a key comparison that looked at a prefix would show.
_WORDS = ("a", "ab", "abc", "abd", "b", "ba", "", "é", "ab\x00")
_DATES = np.array(["2024-01-01", "2024-01-02", "2023-12-31", "2024-02-29"], dtype="datetime64[D]")


def _plain(v, kind: str):
    """A key as a Python value (dates stay numpy datetime64, which compare exactly)."""
    return v if kind == "date" or not hasattr(v, "item") else v.item()


def key_pool(kind: str, size: int) -> list:
    """`size` distinct keys of a kind, as numpy-friendly Python values."""
    if kind == "int":  # far apart (a sorted search) or, past 9, a dense run (offsets)
        return [(-3) ** i for i in range(size)] if size <= 9 else list(range(-5, size - 5))
    if kind == "str":
        return list(_WORDS[:size])
    if kind == "bool":
        return [False, True][:size]
    return list(_DATES[:size])


@st.composite
def keyed_points(draw):
    kind = draw(st.sampled_from(["int", "str", "bool", "date", "pair"]))
    n = draw(st.integers(0, 80))
    # A few keys of many points, or many keys of a few (down to one point a key).
    pool_size = draw(st.sampled_from([1, 2, 4, 9] + ([40] if kind == "int" else [])))
    if kind == "pair":
        firsts = key_pool("int", min(pool_size, 3))
        seconds = key_pool("str", 3)
        a = draw(st.lists(st.sampled_from(firsts), min_size=n, max_size=n))
        b = draw(st.lists(st.sampled_from(seconds), min_size=n, max_size=n))
        by = (np.array(a, dtype=np.int64), np.array(b, dtype=object))
        point_keys = list(zip(a, b))
        absent = [(firsts[0], "zz"), (999, seconds[0])]
        pool = [(f, s) for f in firsts for s in seconds]
    else:
        real = "date" if kind == "date" else kind
        pool = key_pool(real, pool_size if kind != "bool" else 2)
        chosen = draw(st.lists(st.sampled_from(pool), min_size=n, max_size=n))
        if kind == "date":
            by = np.array(chosen, dtype="datetime64[D]")
        elif kind == "str":
            by = np.array(chosen, dtype=object)
        else:
            by = np.array(chosen, dtype=bool if kind == "bool" else np.int64)
        point_keys = [_plain(by[i], kind) for i in range(n)]
        pool = [_plain(p, kind) for p in pool]
        absent = {
            "int": [12345, -100, 35],
            "str": ["abcd", "zz", "A"],
            "bool": [],
            "date": [np.datetime64("2030-01-01", "D")],
        }[kind]
    x = np.array(draw(st.lists(st.integers(-5, 5), min_size=n, max_size=n)), dtype=np.int64)
    y = np.array(draw(st.lists(st.integers(-3, 3), min_size=n, max_size=n)), dtype=np.float64)
    w = np.array(draw(st.lists(st.integers(-9, 9), min_size=n, max_size=n)), dtype=np.int64)
    return kind, x, y, w, by, point_keys, pool + absent


def _as_box_keys(kind: str, keys: list):
    """Box keys as the tree takes them: a tuple of arrays for two columns."""
    if kind == "pair":
        return (np.array([k[0] for k in keys]), np.array([k[1] for k in keys], dtype=object))
    if kind == "date":
        return np.array(keys, dtype="datetime64[D]")
    return np.array(keys, dtype=object) if kind == "str" else np.array(keys)


@st.composite
def keyed_case(draw):
    kind, x, y, w, by, point_keys, candidates = draw(keyed_points())
    q = draw(st.integers(1, 12))
    keys = draw(st.lists(st.sampled_from(candidates), min_size=q, max_size=q))
    edge = st.integers(-6, 6)
    bounds = [
        np.array(draw(st.lists(edge, min_size=q, max_size=q)), dtype=np.float64) for _ in "abcd"
    ]
    inclusive = draw(st.sampled_from(INCLUSIVE))
    return kind, x, y, w, by, point_keys, keys, bounds, inclusive


def _reference_keys(kind: str, keys: list):
    return tuple(np.array(c, dtype=object) for c in zip(*keys)) if kind == "pair" else keys


@pytest.mark.parametrize("layout", LAYOUTS)
@settings(max_examples=150, deadline=None)
@given(case=keyed_case())
def test_keyed_queries_match_the_keyed_reference(layout: str, case) -> None:
    kind, x, y, w, by, point_keys, keys, bounds, inclusive = case
    tree = boxwood.RangeTree(x, y, weights=w, by=by, layout=layout)
    box_keys = _as_box_keys(kind, keys)
    ref_keys = np.empty(len(keys), dtype=object)
    ref_keys[:] = keys
    _, expected = keyed_ref_rows(x, y, point_keys, *bounds, ref_keys, inclusive)
    counts = tree.count(*bounds, by=box_keys, inclusive=inclusive)
    assert counts.tolist() == [len(r) for r in expected]
    sums = tree.sum(*bounds, by=box_keys, inclusive=inclusive)
    assert sums.tolist() == [int(w[r].sum()) for r in expected]
    offsets, rows = tree.report(*bounds, by=box_keys, inclusive=inclusive)
    assert [rows[offsets[i] : offsets[i + 1]].tolist() for i in range(len(keys))] == expected
    boxes, pair_rows = tree.pairs(*bounds, by=box_keys, inclusive=inclusive)
    assert pair_rows.tolist() == [r for rs in expected for r in rs]
    assert boxes.tolist() == [i for i, rs in enumerate(expected) for _ in rs]
    # One box at a time, a scalar key (a tuple of scalars for two columns).
    for i in range(len(keys)):
        one = tuple(box_keys[j][i] for j in range(2)) if kind == "pair" else box_keys[i]
        b = [float(v[i]) for v in bounds]
        assert tree.count(*b, by=one, inclusive=inclusive) == len(expected[i])
        assert tree.sum(*b, by=one, inclusive=inclusive) == int(w[expected[i]].sum())
    # Every key's total from the key offsets, against the points' own keys.
    totals = tree.count_by_key()
    assert sum(totals.values()) == len(x)
    for key, total in totals.items():
        assert total == sum(1 for k in point_keys if k == key) > 0


# x values that make the keyed presort drop more than 32 of x's bits beside the key codes
# (spans of 2^61 to 2^64) or fewer (one key): both sides, both zeros, infinities, the
# extremes, values a unit in the last place apart, nanosecond times before and after 1970.
_EPS = np.finfo(np.float64).eps
_AWKWARD_X = {
    "float": np.array(
        [-1e300, -np.inf, -2.5, -1 - _EPS, -1.0, -0.0, 0.0, 5e-324, 1.0, 1 + _EPS, 1e300, np.inf]
    ),
    "int": np.array([np.iinfo(np.int64).min, -3, -1, 0, 1, 2, 2**40, np.iinfo(np.int64).max]),
    "time": np.array(
        [
            -(10**18),
            -86_400 * 10**9,
            -1,
            0,
            1,
            1_796_000_000_000_000_000,
            1_796_000_000_000_000_001,
        ],
        dtype="datetime64[ns]",
    ),
}


def _numpy_inside(v, lo, hi, inclusive: str):
    """NumPy's comparisons, the ends closed or open as `inclusive` says (outside reference)."""
    low = v >= lo if inclusive in ("both", "left") else v > lo
    high = v <= hi if inclusive in ("both", "right") else v < hi
    return low & high


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("x_kind", sorted(_AWKWARD_X))
@settings(max_examples=40, deadline=None)
@given(data=st.data())
def test_keyed_x_of_every_kind_matches_numpy_masks(layout: str, x_kind: str, data) -> None:
    # Outside reference: NumPy boolean masks (key ==, x and y compared with NumPy's own
    # operators) over the same arrays.
    pool = _AWKWARD_X[x_kind]
    n = data.draw(st.integers(1, 120))
    x = pool[data.draw(st.lists(st.integers(0, len(pool) - 1), min_size=n, max_size=n))]
    y = np.array(data.draw(st.lists(st.integers(-3, 3), min_size=n, max_size=n)), dtype=float)
    keys = data.draw(st.sampled_from([1, 3, 60]))
    key = np.array(data.draw(st.lists(st.integers(0, keys - 1), min_size=n, max_size=n)))
    inclusive = data.draw(st.sampled_from(INCLUSIVE))
    tree = boxwood.RangeTree(x, y, by=key, layout=layout)
    q = 8

    def some_x():
        """Box edges at the points' own x values, so that ties fall on the edges."""
        return x[data.draw(st.lists(st.integers(0, n - 1), min_size=q, max_size=q))]

    lo, hi = np.sort(np.stack([some_x(), some_x()]), axis=0)
    y_lo = np.array(data.draw(st.lists(st.integers(-4, 1), min_size=q, max_size=q)), float)
    box_keys = np.array(data.draw(st.lists(st.integers(0, keys), min_size=q, max_size=q)))
    offsets, rows = tree.report(lo, hi, y_lo, y_lo + 3, by=box_keys, inclusive=inclusive)
    counts = tree.count(lo, hi, y_lo, y_lo + 3, by=box_keys, inclusive=inclusive)
    for i in range(q):
        mask = (
            (key == box_keys[i])
            & _numpy_inside(x, lo[i], hi[i], inclusive)
            & _numpy_inside(y, y_lo[i], y_lo[i] + 3, inclusive)
        )
        assert rows[offsets[i] : offsets[i + 1]].tolist() == np.flatnonzero(mask).tolist()
        assert counts[i] == int(mask.sum())


@settings(max_examples=60, deadline=None)
@given(case=keyed_case())
def test_keyed_trees_survive_save_load_and_pickle(tmp_path_factory, case) -> None:
    kind, x, y, w, by, point_keys, keys, bounds, inclusive = case
    tree = boxwood.RangeTree(x, y, weights=w, by=by)
    path = tmp_path_factory.mktemp("keys") / "t.boxwood"
    tree.save(path)
    box_keys = _as_box_keys(kind, keys)
    for again in (
        boxwood.load(path),
        boxwood.load(path, verify="full"),
        pickle.loads(pickle.dumps(tree)),
    ):
        assert again.count_by_key() == tree.count_by_key()
        np.testing.assert_array_equal(
            again.count(*bounds, by=box_keys, inclusive=inclusive),
            tree.count(*bounds, by=box_keys, inclusive=inclusive),
        )


@pytest.mark.parametrize("layout", LAYOUTS)
def test_keyed_grid_is_each_keys_histogram(layout: str) -> None:
    # numpy.histogram2d of each key's points (numpy docs: bins half-open, the last closed).
    rng = np.random.default_rng(7)
    n = 2000
    x, y = rng.integers(0, 20, n).astype(float), rng.integers(0, 20, n).astype(float)
    station = rng.choice(np.array(["north", "north-east", "south"], dtype=object), n)
    tree = boxwood.RangeTree(x, y, by=station, layout=layout)
    xe, ye = [0, 5, 10, 19], [0, 7, 19]
    grids = tree.grid(xe, ye, by=tree.keys)
    assert grids.shape == (3, 3, 2)
    for k, key in enumerate(tree.keys):
        mine = station == key
        expected, _, _ = np.histogram2d(x[mine], y[mine], bins=[xe, ye])
        np.testing.assert_array_equal(grids[k], expected.astype(np.int64))
        np.testing.assert_array_equal(tree.grid(xe, ye, by=key), expected.astype(np.int64))
    np.testing.assert_array_equal(tree.grid(xe, ye, by="west"), np.zeros((3, 2), dtype=np.int64))


def test_pandas_groupby_with_boolean_masks() -> None:
    # Outside reference: pandas, counting each group's rows with boolean masks, then groupby.
    pd = require("pandas")
    rng = np.random.default_rng(11)
    n = 5000
    frame = pd.DataFrame(
        {
            "sensor": pd.Categorical(rng.choice(["s1", "s10", "s2", "s20"], n)),
            "minute": rng.integers(0, 1440, n),
            "reading": rng.normal(20, 5, n).round(1),
            "volume": rng.integers(1, 50, n),
        }
    )
    tree = boxwood.RangeTree.from_frame(frame, "minute", "reading", "volume", by="sensor")
    boxes = pd.DataFrame(
        {
            "sensor": rng.choice(["s1", "s10", "s2", "s20", "s3"], 200),
            "t0": rng.integers(0, 1440, 200),
            "r0": rng.normal(15, 5, 200).round(1),
        }
    )
    boxes["t1"] = boxes["t0"] + rng.integers(0, 300, 200)
    boxes["r1"] = boxes["r0"] + 8
    counts = tree.count(boxes.t0, boxes.t1, boxes.r0, boxes.r1, by=boxes.sensor)
    sums = tree.sum(boxes.t0, boxes.t1, boxes.r0, boxes.r1, by=boxes.sensor)
    for i, b in boxes.iterrows():
        mask = frame.minute.between(b.t0, b.t1) & frame.reading.between(b.r0, b.r1)
        per_sensor = frame[mask].groupby("sensor", observed=False)["volume"].agg(["size", "sum"])
        if b.sensor in per_sensor.index:
            got = (per_sensor.loc[b.sensor, "size"], per_sensor.loc[b.sensor, "sum"])
        else:
            got = (0, 0)
        assert (counts[i], sums[i]) == got
    assert counts.sum() > 0 and (counts == 0).any()  # not vacuous either way


def test_duckdb_keyed_inequality_join() -> None:
    # Outside reference: DuckDB, p.key = b.key and p.x between b.x_lo and b.x_hi and p.y
    # between b.y_lo and b.y_hi (BETWEEN is inclusive at both ends: DuckDB docs).
    duckdb = require("duckdb")
    pd = require("pandas")
    rng = np.random.default_rng(5)
    n, q = 3000, 300
    p = pd.DataFrame(
        {
            "key": rng.integers(0, 40, n),
            "x": rng.integers(0, 100, n),
            "y": rng.integers(0, 100, n).astype(float),
        }
    )
    b = pd.DataFrame({"key": rng.integers(-2, 42, q), "x_lo": rng.integers(0, 100, q)})
    b["x_hi"] = b.x_lo + rng.integers(0, 30, q)
    b["y_lo"] = rng.integers(0, 100, q).astype(float)
    b["y_hi"] = b.y_lo + 25
    b["box"] = np.arange(q)
    p["row"] = np.arange(n)
    con = duckdb.connect()
    con.register("p", p)
    con.register("b", b)
    joined = con.execute(
        "select b.box, p.row from b join p on p.key = b.key "
        "and p.x between b.x_lo and b.x_hi and p.y between b.y_lo and b.y_hi "
        "order by b.box, p.row"
    ).fetchnumpy()
    tree = boxwood.RangeTree.from_frame(p, "x", "y", by="key")
    boxes, rows = tree.pairs(b.x_lo, b.x_hi, b.y_lo, b.y_hi, by=b.key)
    np.testing.assert_array_equal(boxes, joined["box"])
    np.testing.assert_array_equal(rows, joined["row"])
    counts = tree.count(b.x_lo, b.x_hi, b.y_lo, b.y_hi, by=b.key)
    np.testing.assert_array_equal(counts, np.bincount(joined["box"], minlength=q))
    assert len(rows) > q


# ---------------------------------------------------------------- bad input


def test_a_keyed_tree_needs_keys_and_an_unkeyed_one_refuses_them() -> None:
    keyed = boxwood.RangeTree([1.0, 2.0], [1.0, 2.0], by=[3, 4])
    plain = boxwood.RangeTree([1.0, 2.0], [1.0, 2.0])
    with pytest.raises(ValueError, match="built with keys"):
        keyed.count(0, 5, 0, 5)
    with pytest.raises(ValueError, match="built with keys"):
        keyed.report([0], [5], [0], [5])
    with pytest.raises(ValueError, match="built without keys"):
        plain.count(0, 5, 0, 5, by=3)
    with pytest.raises(ValueError, match="built without keys"):
        plain.count_by_key()
    assert plain.keys is None and plain.key_names is None


@pytest.mark.parametrize(
    ("points", "box", "names"),
    [
        ([1, 2], "1", ("string", "integer")),
        ([1, 2], 1.5, ("float", "integer")),
        ([1, 2], True, ("boolean", "integer")),
        (["a", "b"], 1, ("integer", "string")),
        ([True, False], 1, ("integer", "boolean")),
        (
            np.array(["2024-01-01"], dtype="datetime64[D]").repeat(2),
            "2024-01-01",
            ("string", "datetime64[D]"),
        ),
    ],
)
def test_a_key_of_another_type_raises_type_error_naming_both(points, box, names) -> None:
    tree = boxwood.RangeTree(
        [1.0, 2.0],
        [1.0, 2.0],
        by=np.array(points, dtype=object) if isinstance(points[0], str) else np.array(points),
    )
    with pytest.raises(TypeError) as info:
        tree.count(0, 5, 0, 5, by=box)
    for name in names:
        assert name in str(info.value)


def test_absent_keys_answer_nothing_not_another_keys_points() -> None:
    tree = boxwood.RangeTree(
        [1.0, 2.0, 3.0], [1.0, 2.0, 3.0], weights=[1.5, 2.5, 4.0], by=["ab", "abc", "b"]
    )
    for absent in ("a", "abcd", "", "bb"):
        assert tree.count(-math.inf, math.inf, -math.inf, math.inf, by=absent) == 0
        assert tree.sum(-math.inf, math.inf, -math.inf, math.inf, by=absent) == 0.0
        offsets, rows = tree.report(-math.inf, math.inf, -math.inf, math.inf, by=absent)
        assert offsets.tolist() == [0, 0] and rows.size == 0


def test_integer_keys_beyond_int64_are_absent_not_an_overflow() -> None:
    """A Python int no int64 holds is no key of an int64-keyed tree: it answers 0 (the
    README: a key the tree does not hold answers 0), compared exactly, never rounded onto
    a held key or raised as numpy's conversion OverflowError."""
    big = 2**62
    tree = boxwood.RangeTree([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], by=[big, -big, 7])
    everything = (-math.inf, math.inf, -math.inf, math.inf)
    for absent in (2**63, 2**70, -(2**63) - 1, 2**64 + 7):
        assert tree.count(*everything, by=absent) == 0
        assert tree.report(*everything, by=absent)[1].size == 0
    counts = tree.count(*everything, by=[2**70, big, 7, -(2**70), -big])
    assert counts.tolist() == [0, 1, 1, 0, 1]


def test_missing_keys_are_refused_naming_column_and_row_or_dropped() -> None:
    pd = require("pandas")
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [1, 2, 3], "dock": ["a", None, "b"]})
    with pytest.raises(ValueError, match=r"by column 'dock' has a missing value .* row 1"):
        boxwood.RangeTree.from_frame(frame, "x", "y", by="dock")
    with pytest.warns(boxwood.MissingValuesDropped):
        tree = boxwood.RangeTree.from_frame(frame, "x", "y", by="dock", on_missing="drop")
    assert tree.count_by_key() == {"a": 1, "b": 1}
    assert tree.report(0, 5, 0, 5, by="b")[1].tolist() == [2]  # positions in the frame
    with pytest.raises(ValueError, match="key column by has a missing value .* position 1"):
        boxwood.RangeTree([1.0, 2.0], [1.0, 2.0], by=np.array(["a", None], dtype=object))
    with pytest.raises(ValueError, match="position 0"):
        boxwood.RangeTree([1.0], [1.0], by=np.array(["NaT"], dtype="datetime64[s]"))


def test_unsupported_key_types_are_refused() -> None:
    with pytest.raises(TypeError, match="float64"):
        boxwood.RangeTree([1.0, 2.0], [1.0, 2.0], by=np.array([1.0, 2.0]))
    with pytest.raises(ValueError, match="has 1 rows but x has 2"):
        boxwood.RangeTree([1.0, 2.0], [1.0, 2.0], by=[1])
    with pytest.raises(TypeError, match="mixes strings"):
        boxwood.RangeTree([1.0, 2.0], [1.0, 2.0], by=np.array(["a", 3], dtype=object))


def test_more_keys_than_codes_are_refused_by_the_engine() -> None:
    # 2^32 - 1 distinct keys cannot be drawn here; the engine's own limit is checked directly.
    with pytest.raises(ValueError, match="more than a tree holds"):
        boxwood._boxwood._Tree(
            np.zeros(1),
            np.zeros(1),
            None,
            "fast",
            np.zeros(1, dtype=np.uint32),
            boxwood._boxwood.MAX_KEYS + 1,
        )
    with pytest.raises(ValueError, match="not below the number of keys"):
        boxwood._boxwood._Tree(
            np.zeros(1), np.zeros(1), None, "fast", np.ones(1, dtype=np.uint32), 1
        )


def test_estimate_counts_the_key_offsets_exactly() -> None:
    for n, k in [(0, 0), (1, 1), (1000, 17), (5000, 5000)]:
        by = np.arange(n) % max(k, 1)
        tree = boxwood.RangeTree(np.arange(n, dtype=float), np.arange(n, dtype=float), by=by)
        keys = len(tree.keys)
        assert boxwood.estimate_bytes(n, keys=keys).index_bytes == tree.nbytes


# ---------------------------------------------------------------- frames and joins


def _sensor_frames(seed: int = 3):
    pd = require("pandas")
    rng = np.random.default_rng(seed)
    n, q = 600, 60
    readings = pd.DataFrame(
        {
            "sensor": rng.choice(["s1", "s10", "s2"], n),
            "minute": rng.integers(0, 100, n),
            "celsius": rng.integers(10, 30, n).astype(float),
            "volume": rng.integers(1, 9, n),
        }
    )
    windows = pd.DataFrame(
        {
            "sensor": rng.choice(["s1", "s10", "s2", "s3"], q),
            "t0": rng.integers(0, 100, q),
            "c0": rng.integers(10, 30, q).astype(float),
            "label": [f"w{i}" for i in range(q)],
        },
        index=[f"box{i}" for i in range(q)],
    )
    windows["t1"] = windows.t0 + rng.integers(0, 30, q)
    windows["c1"] = windows.c0 + 5
    return readings, windows


def _merged_reference(readings, windows, key_points="sensor", key_boxes="sensor"):
    """Outside reference: pandas merge on the key, then boolean masks on the bounds."""
    pd = require("pandas")
    left = readings.reset_index(drop=True).rename_axis("row").reset_index()
    right = windows.reset_index(names="box_label")
    right["box"] = np.arange(len(windows))
    m = left.merge(right, left_on=key_points, right_on=key_boxes, suffixes=("", "_b"))
    inside = m.minute.between(m.t0, m.t1) & m.celsius.between(m.c0, m.c1)
    return m[inside].sort_values(["box", "row"]), pd


def test_frame_methods_and_accessor_take_the_boxes_key_column() -> None:
    readings, windows = _sensor_frames()
    tree = boxwood.RangeTree.from_frame(readings, "minute", "celsius", "volume", by="sensor")
    bounds = dict(x_lo="t0", x_hi="t1", y_lo="c0", y_hi="c1")
    expected, pd = _merged_reference(readings, windows)
    want_counts = expected.groupby("box").size().reindex(range(len(windows)), fill_value=0)
    want_sums = expected.groupby("box").volume.sum().reindex(range(len(windows)), fill_value=0)
    counts = tree.count_boxes(windows, **bounds, by="sensor")
    assert counts.index.equals(windows.index)
    assert counts.tolist() == want_counts.tolist()
    assert tree.sum_boxes(windows, **bounds, by="sensor").tolist() == want_sums.tolist()
    assert windows.boxwood.count(tree, **bounds, by="sensor").tolist() == want_counts.tolist()
    assert windows.boxwood.sum(tree, **bounds, by="sensor").tolist() == want_sums.tolist()
    accessed = windows.boxwood.report(tree, **bounds, by="sensor")
    assert accessed.row.tolist() == expected.row.tolist()
    chunks = list(
        windows.boxwood.join_chunks(
            readings, x="minute", y="celsius", by="sensor", max_rows=50, **bounds
        )
    )
    assert len(chunks) > 1 and pd.concat(chunks).label.tolist() == expected.label.tolist()
    report = tree.report_boxes(windows, **bounds, by="sensor")
    assert report.row.tolist() == expected.row.tolist()
    assert report.box.tolist() == expected.box_label.tolist()
    assert (want_counts == 0).any() and want_counts.sum() > len(windows)
    with pytest.raises(ValueError, match="built with keys"):
        tree.count_boxes(windows, **bounds)
    missing = windows.copy()
    missing.loc["box3", "sensor"] = None
    with pytest.raises(
        ValueError, match=r"by key column 'sensor' has a missing value .* at row 'box3'"
    ):
        tree.count_boxes(missing, **bounds, by="sensor")


@pytest.mark.parametrize("max_rows", [None, 7, 1])
def test_keyed_box_join_matches_pandas_merge_then_masks(max_rows) -> None:
    readings, windows = _sensor_frames(9)
    bounds = dict(x_lo="t0", x_hi="t1", y_lo="c0", y_hi="c1")
    expected, pd = _merged_reference(readings, windows)
    if max_rows is None:
        joined = boxwood.box_join(readings, windows, x="minute", y="celsius", by="sensor", **bounds)
    else:
        chunks = list(
            boxwood.box_join_chunks(
                readings, windows, x="minute", y="celsius", by="sensor", max_rows=max_rows, **bounds
            )
        )
        assert all(len(c) <= max_rows for c in chunks)
        joined = pd.concat(chunks)
    # The key once: the points' column, no suffixed copy from the boxes.
    assert list(joined.columns).count("sensor") == 1
    assert not any(str(c).startswith("sensor_") for c in joined.columns)
    # Boxes in order; within a box the points' order, except that chunks cut a box with more
    # than max_rows matches into pieces along x (documented), so compare each box's set.
    assert joined.label.tolist() == expected.label.tolist()
    columns = ["label", "minute", "celsius", "volume", "sensor"]
    got = joined[columns].sort_values(columns).to_numpy().tolist()
    assert got == expected[columns].sort_values(columns).to_numpy().tolist()
    if max_rows is None:
        assert joined.minute.tolist() == expected.minute.tolist()


def test_keyed_join_with_differently_named_keys_and_a_given_tree() -> None:
    readings, windows = _sensor_frames(4)
    windows = windows.rename(columns={"sensor": "probe"})
    bounds = dict(x_lo="t0", x_hi="t1", y_lo="c0", y_hi="c1")
    expected, _ = _merged_reference(readings, windows, "sensor", "probe")
    tree = boxwood.RangeTree.from_frame(readings, "minute", "celsius", by="sensor")
    joined = boxwood.box_join(
        readings,
        windows,
        x="minute",
        y="celsius",
        tree=tree,
        points_by="sensor",
        boxes_by="probe",
        **bounds,
    )
    assert "probe" not in joined.columns and list(joined.columns).count("sensor") == 1
    assert joined.label.tolist() == expected.label.tolist()
    assert (
        windows.boxwood.join(
            readings, x="minute", y="celsius", points_by="sensor", boxes_by="probe", **bounds
        ).label.tolist()
        == expected.label.tolist()
    )
    with pytest.raises(ValueError, match="built with keys sensor but the join asks for no keys"):
        boxwood.box_join(readings, windows, x="minute", y="celsius", tree=tree, **bounds)
    with pytest.raises(ValueError, match="go together"):
        boxwood.box_join(readings, windows, x="minute", y="celsius", points_by="sensor", **bounds)


# ---------------------------------------------------------------- command line


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_command_line_by_on_build_count_sum_join_grid_describe(tmp_path, capsys, suffix) -> None:
    pd = require("pandas")
    require("pyarrow")
    from boxwood import cli

    readings, windows = _sensor_frames(21)
    readings["sensor"] = readings.sensor.replace({"s1": "007"})  # a string that looks like a number
    windows["sensor"] = windows.sensor.replace({"s1": "007"})
    points, boxes = tmp_path / f"points{suffix}", tmp_path / f"boxes{suffix}"
    for frame, path in ((readings, points), (windows.reset_index(drop=True), boxes)):
        frame.to_csv(path, index=False) if suffix == ".csv" else frame.to_parquet(path)
    index, counted, summed, joined = (
        str(tmp_path / n) for n in ("t.boxwood", f"c{suffix}", f"s{suffix}", f"j{suffix}")
    )
    bounds = ["--x-lo", "t0", "--x-hi", "t1", "--y-lo", "c0", "--y-hi", "c1"]
    build = ["build", str(points), "--x", "minute", "--y", "celsius", "--weights", "volume"]
    assert cli.main([*build, "--by", "sensor", "-o", index, "-q"]) == 0
    assert (
        cli.main(["count", index, str(boxes), *bounds, "--by", "sensor", "-o", counted, "-q"]) == 0
    )
    assert cli.main(["sum", index, str(boxes), *bounds, "--by", "sensor", "-o", summed, "-q"]) == 0
    assert cli.main(["join", index, str(boxes), *bounds, "--by", "sensor", "-o", joined, "-q"]) == 0
    read = pd.read_csv if suffix == ".csv" else pd.read_parquet
    expected, _ = _merged_reference(readings, windows)  # outside reference: pandas merge + masks
    want = expected.groupby("box").size().reindex(range(len(windows)), fill_value=0)
    assert read(counted)["count"].tolist() == want.tolist()
    want_sums = expected.groupby("box").volume.sum().reindex(range(len(windows)), fill_value=0)
    assert read(summed)["sum"].tolist() == want_sums.tolist()
    result = read(joined)
    assert result.box_row.tolist() == expected.box.tolist()
    assert result.point_row.tolist() == expected.row.tolist()
    assert [c for c in result.columns if "sensor" in c] == ["sensor"]  # the key once
    # From the points file itself: the same rows, the key from the points' columns.
    from_points = ["join", str(points), str(boxes), "--x", "minute", "--y", "celsius", *bounds]
    assert cli.main([*from_points, "--by", "sensor", "-o", joined, "-q"]) == 0
    result = read(joined)
    assert result.point_row.tolist() == expected.row.tolist()
    assert [c for c in result.columns if "sensor" in c] == ["sensor"]
    assert result.minute.tolist() == expected.minute.tolist()
    # A keyed index asked without --by, and --by for an index without keys: usage errors.
    assert cli.main(["count", index, str(boxes), *bounds, "-o", counted, "-q"]) == 2
    plain = str(tmp_path / "plain.boxwood")
    assert cli.main([*build, "-o", plain, "-q"]) == 0
    assert cli.main(["count", plain, str(boxes), *bounds, "--by", "sensor", "-o", counted]) == 2
    capsys.readouterr()
    assert cli.main(["describe", index, "--json"]) == 0
    facts = json.loads(capsys.readouterr().out)
    assert facts["keys"] == readings.sensor.nunique() and facts["key_columns"] == "sensor"
    grid = ["grid", index, "--x-edges", "0,50,100", "--y-edges", "10,20,30", "-q"]
    assert cli.main([*grid, "--key", "007"]) == 0
    shown = capsys.readouterr().out
    mine = readings[readings.sensor == "007"]
    expected_grid, _, _ = np.histogram2d(
        mine.minute, mine.celsius, bins=[[0, 50, 100], [10, 20, 30]]
    )
    tree = boxwood.load(index)
    np.testing.assert_array_equal(tree.grid([0, 50, 100], [10, 20, 30], by="007"), expected_grid)
    for value in expected_grid.astype(int).ravel():
        assert str(value) in shown
    assert cli.main(grid) == 2  # a keyed index's grid needs --key
    capsys.readouterr()
    # --by names a points file's key columns; an index file's keys were fixed at its build.
    assert cli.main([*grid, "--key", "007", "--by", "sensor"]) == 2
    err = capsys.readouterr().err
    assert "--by" in err and "index file" in err and "--key" in err


def _two_key_frames(seed: int):
    """Readings keyed by two columns: (site, bay), a string with a comma and an integer, or
    (shift, heated), a tz-aware time and a boolean; windows asking keys absent too."""
    pd = require("pandas")
    rng = np.random.default_rng(seed)
    n, q = 700, 70
    shifts = pd.to_datetime(["2024-01-01 05:00", "2024-01-01 13:00", "2024-01-02 05:00"])
    shifts = shifts.tz_localize("Europe/Paris")

    def keys(m: int, extra: bool) -> dict:
        return {
            "site": rng.choice(["Dock, north", "yard", "007"] + (["roof"] if extra else []), m),
            "bay": rng.integers(0, 4 if not extra else 5, m),
            "shift": shifts[rng.integers(0, 3, m)],
            "heated": rng.integers(0, 2, m).astype(bool),
        }

    readings = pd.DataFrame(
        {
            **keys(n, False),
            "minute": rng.integers(0, 100, n),
            "celsius": rng.integers(10, 30, n).astype(float),
            "volume": rng.integers(1, 9, n),
        }
    )
    windows = pd.DataFrame(
        {
            **keys(q, True),
            "t0": rng.integers(0, 100, q),
            "c0": rng.integers(10, 30, q).astype(float),
            "label": [f"w{i}" for i in range(q)],
        }
    )
    windows["t1"] = windows.t0 + rng.integers(0, 60, q)
    windows["c1"] = windows.c0 + 8
    return readings, windows


@pytest.mark.parametrize("by", [["site", "bay"], ["shift", "heated"]])
@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_command_line_two_key_columns_on_build_count_sum_join_grid(
    tmp_path, capsys, suffix, by
) -> None:
    pd = require("pandas")
    require("pyarrow")
    from boxwood import cli

    readings, windows = _two_key_frames(5 if by[0] == "site" else 6)
    points, boxes = tmp_path / f"points{suffix}", tmp_path / f"boxes{suffix}"
    for frame, path in ((readings, points), (windows, boxes)):
        if suffix == ".csv":
            frame.to_csv(path, index=False)
        else:  # the site as a categorical: an Arrow dictionary column in the file
            frame.assign(site=frame.site.astype("category")).to_parquet(path)
    index, counted, summed, joined = (
        str(tmp_path / n) for n in ("t.boxwood", f"c{suffix}", f"s{suffix}", f"j{suffix}")
    )
    keys = ["--by", ",".join(by), "-q"]
    bounds = ["--x-lo", "t0", "--x-hi", "t1", "--y-lo", "c0", "--y-hi", "c1"]
    build = ["build", str(points), "--x", "minute", "--y", "celsius", "--weights", "volume"]
    assert cli.main([*build, *keys, "-o", index]) == 0
    assert cli.main(["count", index, str(boxes), *bounds, *keys, "-o", counted]) == 0
    assert cli.main(["sum", index, str(boxes), *bounds, *keys, "-o", summed]) == 0
    assert cli.main(["join", index, str(boxes), *bounds, *keys, "-o", joined]) == 0
    read = pd.read_csv if suffix == ".csv" else pd.read_parquet
    # Outside reference: pandas merge on both key columns, then boolean masks on the bounds.
    expected, _ = _merged_reference(readings, windows, by, by)
    assert expected.box.nunique() < len(windows) and len(expected) > len(windows) // 2
    want = expected.groupby("box").size().reindex(range(len(windows)), fill_value=0)
    assert read(counted)["count"].tolist() == want.tolist()
    want_sums = expected.groupby("box").volume.sum().reindex(range(len(windows)), fill_value=0)
    assert read(summed)["sum"].tolist() == want_sums.tolist()
    result = read(joined)
    assert result.box_row.tolist() == expected.box.tolist()
    assert result.point_row.tolist() == expected.row.tolist()
    for column in by:  # the key once, as the points' columns
        assert [c for c in result.columns if c.startswith(column)] == [column]
    # The points file itself, keyed on the fly: the same rows.
    on_the_fly = ["join", str(points), str(boxes), "--x", "minute", "--y", "celsius", *bounds]
    assert cli.main([*on_the_fly, *keys, "-o", joined]) == 0
    assert read(joined).point_row.tolist() == expected.row.tolist()
    # grid --key: one CSV record, a value per key column in --by's order.
    if by[0] == "site":
        key, mine = '"Dock, north",2', (readings.site == "Dock, north") & (readings.bay == 2)
    else:  # 05:00 in Paris is 04:00 UTC: an offset (Z) makes the time UTC
        instant = pd.Timestamp("2024-01-01 04:00", tz="UTC")
        key, mine = "2024-01-01T04:00Z,true", (readings["shift"] == instant) & readings.heated
    assert mine.sum() > 0
    grid = ["grid", index, "--x-edges", "0,50,100", "--y-edges", "10,20,30", "-q"]
    cells = str(tmp_path / "g.csv")
    assert cli.main([*grid, "--key", key, "-o", cells]) == 0
    want_grid, _, _ = np.histogram2d(
        readings.minute[mine], readings.celsius[mine], bins=[[0, 50, 100], [10, 20, 30]]
    )
    assert pd.read_csv(cells)["count"].tolist() == want_grid.astype(int).ravel().tolist()
    # The same grid from the points file, keyed with --by on the fly.
    from_points = ["grid", str(points), "--x", "minute", "--y", "celsius", *grid[2:]]
    assert cli.main([*from_points, *keys, "--key", key, "-o", cells]) == 0
    assert pd.read_csv(cells)["count"].tolist() == want_grid.astype(int).ravel().tolist()
    capsys.readouterr()
    # One value for two key columns, an unclosed quote, a value of the wrong type: usage.
    bad_value = ("yard,two", "'two'") if by[0] == "site" else ("2024-01-01T04:00Z,maybe", "maybe")
    for bad, named in (("yard", "1 value(s)"), ('"Dock, north,2', "not one CSV"), bad_value):
        assert cli.main([*grid, "--key", bad]) == 2
        err = capsys.readouterr().err
        assert err.startswith("boxwood grid: error: --key") and named in err
    assert cli.main([*grid, "--key", "Dock, north,2" if by[0] == "site" else "x,y,z"]) == 2
    assert "double quotes" in capsys.readouterr().err
    # A boxes file without one of the key columns names it (exit 4).
    assert cli.main(["count", index, str(boxes), *bounds, "--by", f"{by[0]},nope", "-q"]) == 4


def test_command_line_refuses_missing_and_mistyped_keys_and_too_many(
    tmp_path, capsys, monkeypatch
) -> None:
    pd = require("pandas")
    require("pyarrow")
    from boxwood import cli

    # An empty cell of a CSV key column is a missing key, not the key "" (pyarrow would read
    # it as ""); a Parquet file's null is one.
    points = tmp_path / "points.csv"
    points.write_text("minute,celsius,site,bay\n1,20,yard,1\n2,21,roof,1\n3,22,,2\n4,23,yard,\n")
    boxes = tmp_path / "boxes.csv"
    boxes.write_text("x_lo,x_hi,y_lo,y_hi,site,bay\n0,9,0,30,yard,1\n0,9,0,30,roof,1\n")
    index = str(tmp_path / "t.boxwood")
    build = ["build", str(points), "--x", "minute", "--y", "celsius", "--by", "site,bay"]
    assert cli.main([*build, "-o", index, "-q"]) == 5
    err = capsys.readouterr().err
    assert "column 'site' has a missing value" in err and "at row 2" in err
    assert "--on-missing drop" in err
    assert cli.main([*build, "-o", index, "--on-missing", "drop"]) == 0
    assert "dropped 2 of 4 rows" in capsys.readouterr().err
    counted = str(tmp_path / "c.csv")
    ask = ["count", index, str(boxes), "--by", "site,bay", "-q", "-o", counted]
    assert cli.main(ask) == 0
    assert pd.read_csv(counted)["count"].tolist() == [1, 1]  # the kept rows 0 and 1
    # A box with an empty key cell, and one whose key is of another type, are refused.
    boxes.write_text("x_lo,x_hi,y_lo,y_hi,site,bay\n0,9,0,30,yard,1\n0,9,0,30,,1\n")
    assert cli.main(ask) == 5
    err = capsys.readouterr().err
    assert "column 'site' has a missing value" in err and "row 1" in err
    assert "every box needs its key" in err
    boxes.write_text("x_lo,x_hi,y_lo,y_hi,site,bay\n0,9,0,30,yard,one\n")
    assert cli.main(ask) == 5
    err = capsys.readouterr().err
    assert "string" in err and "integer" in err and "'bay'" in err
    parquet = tmp_path / "boxes.parquet"
    pd.DataFrame(
        {"x_lo": [0], "x_hi": [9], "y_lo": [0], "y_hi": [30], "site": [7], "bay": [1]}
    ).to_parquet(parquet)
    assert cli.main([*ask[:2], str(parquet), *ask[3:]]) == 5
    err = capsys.readouterr().err
    assert "integer" in err and "string" in err and "'site'" in err
    # More distinct keys than 32-bit codes hold is refused (the limit made small here).
    monkeypatch.setattr(boxwood._keys, "MAX_KEYS", 1)
    assert cli.main([*build, "-o", index, "--on-missing", "drop", "-q"]) == 5
    assert "2 distinct keys is more than a tree holds (at most 1" in capsys.readouterr().err


def test_tz_aware_keys_compare_as_instants() -> None:
    pd = require("pandas")
    shifts = pd.to_datetime(["2024-01-01 05:00", "2024-01-01 06:00", "2024-01-02 00:00"])
    frame = pd.DataFrame(
        {"x": [1.0, 2.0, 3.0], "y": [1, 2, 3], "shift": shifts.tz_localize("Europe/Paris")}
    )
    tree = boxwood.RangeTree.from_frame(frame, "x", "y", by="shift")
    # 05:00 in Paris (UTC+1 in January) is 04:00 UTC, however the key is written.
    for key in (
        pd.Timestamp("2024-01-01 04:00", tz="UTC"),
        pd.Timestamp("2024-01-01 05:00", tz="Europe/Paris"),
        np.datetime64("2024-01-01T04:00"),
    ):
        assert tree.count(0, 9, 0, 9, by=key) == 1
    series = pd.Series(
        pd.to_datetime(["2024-01-01 06:00", "2024-01-09 00:00"]).tz_localize("Europe/Paris")
    )
    assert tree.count(0, 9, 0, 9, by=series).tolist() == [1, 0]
