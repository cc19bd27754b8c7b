"""boxwood.dask on a real two-process Dask cluster: sharded and broadcast trees.

Every answer is checked twice: against a single-machine ``boxwood.RangeTree`` built from the
same rows (row for row), and against the outside reference, pandas itself: boolean masks made
with pandas' own comparison operators on the concatenated points frame (the same convention
as ``Series.between``). Workers are killed mid-job to check that Dask reruns the lost work and
that the answers and the shard folder come out the same.
"""

from __future__ import annotations

import inspect
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from _optional import require

dd = require("dask.dataframe", reason="Dask is not installed (boxwood[dask])")
distributed = require("distributed", reason="Dask distributed is not installed")

import cloudpickle  # noqa: E402  (a dependency of distributed)

import boxwood  # noqa: E402
import boxwood._columns  # noqa: E402
import boxwood.dask as bd  # noqa: E402

INCLUSIVE = ("both", "neither", "left", "right")
TIMEOUT = 60  # seconds any one Dask call may take before the test fails


@pytest.fixture(scope="module")
def client():
    # The workers cannot import this test module: send its helpers by value.
    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    cluster = distributed.LocalCluster(
        n_workers=2,
        processes=True,
        threads_per_worker=1,
        dashboard_address=":0",  # any free port: other runs may hold the default
        silence_logs=50,  # a killed worker logs errors on purpose
    )
    c = distributed.Client(cluster, timeout=TIMEOUT)
    try:
        yield c
    finally:
        c.close(timeout=TIMEOUT)
        cluster.close(timeout=TIMEOUT)
        cloudpickle.unregister_pickle_by_value(sys.modules[__name__])


# ------------------------------------------------------------------------- data and references


def _points(rng, n=3000):
    # Integer-valued x: many ties, so equal x values meet shard boundaries.
    return pd.DataFrame(
        {
            "start": rng.integers(0, 200, n).astype(np.float64),
            "minutes": rng.integers(0, 60, n),
            "fare": rng.integers(-500, 3000, n),
            "bike": pd.Categorical(rng.choice(["dock", "ebike", "cargo"], n)),
        },
        index=pd.Index(rng.permutation(n) * 3, name="trip"),  # labels unrelated to positions
    )


def _boxes(rng, m, x_span, edges=()):
    lo = rng.integers(-10, 200, m).astype(np.float64)
    width = rng.choice([0, 3, 40, x_span], m).astype(np.float64)
    if len(edges):  # boxes whose x edges sit exactly on shard boundaries
        lo[: len(edges)] = edges
        width[: len(edges)] = np.roll(edges, -1)[: len(edges)] - edges
    lo_y = rng.integers(-5, 60, m)
    return pd.DataFrame(
        {
            "t0": lo,
            "t1": lo + width,
            "m0": lo_y,
            "m1": lo_y + rng.integers(0, 40, m),
            "zone": [f"Z{i}" for i in range(m)],
        },
        index=pd.Index(rng.permutation(m) + 1000, name="box_id"),
    )


BOUNDS = ("t0", "t1", "m0", "m1")


def _between(values, lo, hi, inclusive):
    # Reference: pandas' own comparison operators (Series.between's convention).
    lo_ok = values >= lo if inclusive in ("both", "left") else values > lo
    hi_ok = values <= hi if inclusive in ("both", "right") else values < hi
    return np.asarray(lo_ok & hi_ok, dtype=bool)


def _masks(points, boxes, inclusive, x="start", y="minutes"):
    """One boolean mask over the points per box, from pandas comparisons (the reference)."""
    for i in range(len(boxes)):
        box = boxes.iloc[i]
        yield _between(points[x], box["t0"], box["t1"], inclusive) & _between(
            points[y], box["m0"], box["m1"], inclusive
        )


def _check_against_pandas(points, boxes, inclusive, counts, sums, report):
    masks = list(_masks(points, boxes, inclusive))
    # Reference: pandas boolean masks over the whole frame.
    assert counts.tolist() == [int(mk.sum()) for mk in masks]
    if sums is not None:
        assert sums.tolist() == [int(points["fare"][mk].sum()) for mk in masks]
    expected_rows = np.concatenate([np.flatnonzero(mk) for mk in masks])
    assert report["row"].tolist() == expected_rows.tolist()


# ------------------------------------------------------------------------- sharded trees


@pytest.mark.parametrize("shards", [1, 3, 7])
def test_sharded_answers_equal_one_tree_and_pandas_masks(client, shards):
    rng = np.random.default_rng(shards)
    points = _points(rng)
    frame = dd.from_pandas(points, npartitions=4)  # sorted by the index labels
    # Rows are positions in the concatenated partitions: the reference is that frame.
    points = frame.compute()
    sharded = bd.ShardedTree.from_frame(
        frame, x="start", y="minutes", weights="fare", shards=shards, client=client
    )
    assert sharded.num_shards == shards  # 200 distinct x values: every shard is placed
    local = boxwood.RangeTree.from_frame(points, x="start", y="minutes", weights="fare")
    edges = sharded.boundaries
    boxes = _boxes(rng, 120, x_span=400, edges=edges)
    spanning = (
        ((boxes["t0"] < edges.min()) & (boxes["t1"] > edges.max())).sum() if shards > 1 else 1
    )
    assert spanning > 0  # some boxes cover every shard
    for inclusive in INCLUSIVE:
        counts = sharded.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
        sums = sharded.sum_boxes(boxes, *BOUNDS, inclusive=inclusive)
        report = sharded.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
        pd.testing.assert_series_equal(
            counts, local.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
        )
        pd.testing.assert_series_equal(sums, local.sum_boxes(boxes, *BOUNDS, inclusive=inclusive))
        pd.testing.assert_frame_equal(
            report, local.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
        )
        _check_against_pandas(points, boxes, inclusive, counts, sums, report)
    joined = sharded.join(frame, boxes, *BOUNDS, keep_index=True)
    expected = boxwood.box_join(
        points,
        boxes,
        x="start",
        y="minutes",
        x_lo="t0",
        x_hi="t1",
        y_lo="m0",
        y_hi="m1",
        keep_index=True,
    )
    pd.testing.assert_frame_equal(joined, expected)


def test_dask_boxes_come_back_partition_by_partition(client):
    rng = np.random.default_rng(5)
    points = _points(rng)
    frame = dd.from_pandas(points, npartitions=3, sort=False)
    sharded = bd.ShardedTree.from_frame(frame, "start", "minutes", "fare", shards=4, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    boxes = _boxes(rng, 90, x_span=300, edges=sharded.boundaries)
    parts = dd.from_pandas(boxes, npartitions=4, sort=False)
    counts = sharded.count_boxes(parts, *BOUNDS, inclusive="left")
    assert isinstance(counts, dd.Series) and counts.npartitions == 4
    pd.testing.assert_series_equal(
        counts.compute(), local.count_boxes(boxes, *BOUNDS, inclusive="left")
    )
    pd.testing.assert_series_equal(
        sharded.sum_boxes(parts, *BOUNDS).compute(), local.sum_boxes(boxes, *BOUNDS)
    )
    report = sharded.report_boxes(parts, *BOUNDS, inclusive="right").compute()
    expected = local.report_boxes(boxes, *BOUNDS, inclusive="right")
    pd.testing.assert_frame_equal(report.reset_index(drop=True), expected)
    _check_against_pandas(
        points, boxes, "right", local.count_boxes(boxes, *BOUNDS, inclusive="right"), None, report
    )
    joined = sharded.join(frame, parts, *BOUNDS).compute().reset_index(drop=True)
    # The boxes as Dask holds them (Dask may store their strings as another string dtype).
    expected = boxwood.box_join(
        points, parts.compute(), x="start", y="minutes", x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1"
    )
    pd.testing.assert_frame_equal(joined, expected)
    assert list(joined["bike"].cat.categories) == list(points["bike"].cat.categories)


def test_empty_shards_and_ties_never_double_count(client):
    rng = np.random.default_rng(9)
    n = 800
    # Three distinct x values only, and boundaries of our own with empty intervals between.
    points = pd.DataFrame(
        {
            "start": rng.choice([10.0, 20.0, 30.0], n),
            "minutes": rng.integers(0, 60, n),
            "fare": rng.integers(0, 100, n),
        }
    )
    frame = dd.from_pandas(points, npartitions=3, sort=False)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", "fare", boundaries=[0, 5, 20, 25, 31, 1000], client=client
    )
    assert sharded.num_shards == 7
    sizes = sharded.shard_rows
    # Reference: pandas value counts of the three x values.
    by_x = points["start"].value_counts()
    assert sizes == [0, 0, int(by_x[10.0]), int(by_x[20.0]), int(by_x[30.0]), 0, 0]
    assert sum(sizes) == n
    ties = bd.ShardedTree.from_frame(frame, "start", "minutes", shards=8, client=client)
    assert ties.num_shards <= 3 and sum(ties.shard_rows) == n  # one shard per value at most
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    boxes = _boxes(rng, 60, x_span=50, edges=np.array([0.0, 5.0, 10.0, 20.0, 25.0, 30.0]))
    for inclusive in INCLUSIVE:
        for tree in (sharded, ties):
            counts = tree.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
            report = tree.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
            pd.testing.assert_series_equal(
                counts, local.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
            )
            _check_against_pandas(points, boxes, inclusive, counts, None, report)
        pd.testing.assert_series_equal(
            sharded.sum_boxes(boxes, *BOUNDS, inclusive=inclusive),
            local.sum_boxes(boxes, *BOUNDS, inclusive=inclusive),
        )


def test_tz_aware_x_dropped_rows_and_float_weights(client):
    rng = np.random.default_rng(3)
    n = 1500
    start = pd.Timestamp("2025-06-09", tz="Europe/Berlin") + pd.to_timedelta(
        rng.integers(0, 7 * 86_400, n), unit="s"
    )
    points = pd.DataFrame(
        {"start": start, "minutes": rng.integers(0, 60, n), "fare": rng.uniform(1, 30, n)}
    )
    points.loc[[3, 700, 1499], "start"] = pd.NaT
    points.loc[12, "fare"] = np.nan
    frame = dd.from_pandas(points, npartitions=4, sort=False)
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 4 of 1500 rows") as caught:
        sharded = bd.ShardedTree.from_frame(
            frame, "start", "minutes", "fare", shards=5, on_missing="drop", client=client
        )
    dropped = [w for w in caught if issubclass(w.category, boxwood.MissingValuesDropped)]
    assert [w.filename for w in dropped] == [__file__]  # the caller's line, not sys:1
    assert sharded.rows_dropped == 4 and len(sharded) == n - 4
    # Boundaries are x values of the data, as naive UTC times of the column's unit.
    utc = points["start"].dt.tz_convert("UTC").dt.tz_localize(None).dropna().to_numpy()
    assert sharded.boundaries.dtype == utc.dtype and np.isin(sharded.boundaries, utc).all()
    with pytest.warns(boxwood.MissingValuesDropped):
        local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", on_missing="drop")
    # Boxes in another zone: compared as instants.
    t0 = pd.Timestamp("2025-06-09", tz="America/New_York") + pd.to_timedelta(
        rng.integers(-86_400, 7 * 86_400, 50), unit="s"
    )
    boxes = pd.DataFrame(
        {
            "t0": t0,
            "t1": t0 + pd.to_timedelta(rng.integers(0, 3 * 86_400, 50), unit="s"),
            "m0": rng.integers(0, 30, 50),
            "m1": rng.integers(20, 60, 50),
        }
    )
    complete = points.dropna()
    for inclusive in ("both", "neither"):
        counts = sharded.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
        report = sharded.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
        pd.testing.assert_series_equal(
            counts, local.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
        )
        pd.testing.assert_frame_equal(
            report, local.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
        )
        masks = list(_masks(complete, boxes, inclusive))
        # Reference: pandas masks; rows are positions in the frame with the dropped rows.
        assert counts.tolist() == [int(mk.sum()) for mk in masks]
        positions = np.concatenate([points.index.get_indexer(complete.index[mk]) for mk in masks])
        assert report["row"].tolist() == positions.tolist()
        sums = sharded.sum_boxes(boxes, *BOUNDS, inclusive=inclusive)
        # Reference: math.fsum, the exactly rounded sum of each box's fares; float sums across
        # shards agree to a few units in the last place (README, "Weights").
        exact = [math.fsum(complete["fare"][mk]) for mk in masks]
        np.testing.assert_allclose(sums.to_numpy(), exact, rtol=1e-12, atol=1e-9)


def test_bad_input_raises_before_any_work(client):
    points = pd.DataFrame({"start": [1.0, None, 3.0], "minutes": [1, 2, 3]}, index=["a", "b", "c"])
    frame = dd.from_pandas(points, npartitions=2, sort=False)
    with pytest.raises(
        ValueError, match=r"x column 'start' has a missing value .* row 'b' \(position 1\)"
    ):
        bd.ShardedTree.from_frame(frame, "start", "minutes", client=client)
    with pytest.raises(TypeError, match="Dask DataFrame.*RangeTree.from_frame"):
        bd.ShardedTree.from_frame(points, "start", "minutes", client=client)
    with pytest.raises(boxwood.MissingColumnError, match="'begin'"):
        bd.ShardedTree.from_frame(frame, "begin", "minutes", client=client)
    complete = dd.from_pandas(points.dropna(), npartitions=1)
    with pytest.raises(ValueError, match="shards must be a positive integer"):
        bd.ShardedTree.from_frame(complete, "start", "minutes", shards=0, client=client)
    with pytest.raises(ValueError, match="strictly ascending"):
        bd.ShardedTree.from_frame(complete, "start", "minutes", boundaries=[2, 2], client=client)
    with pytest.raises(TypeError, match="boundaries must be .* numbers"):
        bd.ShardedTree.from_frame(complete, "start", "minutes", boundaries=["2"], client=client)
    with pytest.warns(boxwood.MissingValuesDropped):
        sharded = bd.ShardedTree.from_frame(
            frame, "start", "minutes", on_missing="drop", client=client
        )
    boxes = pd.DataFrame({"x_lo": [0], "x_hi": [5], "y_lo": [0], "y_hi": [5]})
    with pytest.raises(ValueError, match="without weights"):
        sharded.sum_boxes(boxes)
    with pytest.raises(ValueError, match="x_hi bound column 'x_hi' has a missing value"):
        sharded.count_boxes(boxes.assign(x_hi=[np.nan]))
    with pytest.raises(TypeError, match="x_lo column 'x_lo'"):
        sharded.count_boxes(boxes.assign(x_lo=pd.to_datetime(["2025-01-01"])))
    with pytest.raises(TypeError, match="x_lo column 'x_lo' holds time values"):
        sharded.count_boxes(
            dd.from_pandas(boxes.assign(x_lo=pd.to_datetime(["2025-01-01"])), npartitions=1)
        )  # type checked on the meta
    with pytest.raises(ValueError, match="built from 3 rows"):
        sharded.join(dd.from_pandas(points.iloc[:2], npartitions=1, sort=False), boxes)


def test_integer_sums_that_overflow_across_shards_raise(client):
    # Reference: int64's range (2**63 - 1 is its largest value).
    points = pd.DataFrame({"start": [1.0, 2.0], "minutes": [0, 0], "fare": [2**62, 2**62]})
    sharded = bd.ShardedTree.from_frame(
        dd.from_pandas(points, npartitions=1, sort=False),
        "start",
        "minutes",
        "fare",
        boundaries=[1.5],
        client=client,
    )
    assert sharded.shard_rows == [1, 1]
    boxes = pd.DataFrame({"x_lo": [0, 0], "x_hi": [1, 3], "y_lo": [0, 0], "y_hi": [0, 0]})
    with pytest.raises(OverflowError, match="box 1"):
        sharded.sum_boxes(boxes)
    assert sharded.sum_boxes(boxes.iloc[:1]).tolist() == [2**62]


def _keyed_reference(points, boxes, inclusive):
    """Counts, fare sums and row positions per box, from pandas groupby of the points by
    key and boolean masks (pandas' comparisons) within the box's group: the reference."""
    frame = points.reset_index(drop=True)
    groups = {key: group for key, group in frame.groupby("bike", observed=True)}
    counts, sums, rows = [], [], []
    for i in range(len(boxes)):
        box = boxes.iloc[i]
        group = groups.get(box["bike"], frame.iloc[:0])
        mask = _between(group["start"], box["t0"], box["t1"], inclusive) & _between(
            group["minutes"], box["m0"], box["m1"], inclusive
        )
        counts.append(int(mask.sum()))
        sums.append(int(group["fare"][mask].sum()))
        rows.extend(sorted(group.index[mask].tolist()))
    return counts, sums, rows


@pytest.mark.parametrize("shards", [1, 3, 7])
def test_keyed_shards_by_key_and_x_answer_as_one_keyed_tree_and_pandas_groupby(
    client, shards, tmp_path
):
    rng = np.random.default_rng(41 + shards)
    points = _points(rng, n=2000)
    parts = dd.from_pandas(points, npartitions=4, sort=False)
    sharded = bd.ShardedTree.from_frame(
        parts, "start", "minutes", "fare", shards=shards, by="bike", client=client
    )
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", by="bike")
    assert sharded.num_shards == shards and len(sharded) == len(points)
    assert sharded.keys.tolist() == tree.keys.tolist() == ["cargo", "dock", "ebike"]
    codes = sharded._plan.key_codes
    if shards == 7:  # 7 shards over 3 keys: some key's points span several shards
        assert np.unique(codes).size < codes.size
        # A box of one key, its x range everything, goes only to the shards of that key:
        # those from the first boundary pair of a larger code or its own on.
        plan = sharded._plan
        every = [np.array([-math.inf]), np.array([math.inf])]
        for code in range(3):
            first, last = plan.route(every, "both", np.array([code]))
            held = [s for s in range(shards) if s == 0 or codes[s - 1] <= code]
            held = [s for s in held if s == shards - 1 or codes[s] >= code]
            assert (first[0], last[0]) == (held[0], held[-1]) and len(held) < shards
        first, last = plan.route(every, "both", np.array([-1]))  # an absent key: no shard
        assert first[0] > last[0]
    boxes = _boxes(rng, 90, x_span=300)
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo", "tandem"], len(boxes))
    assert (boxes["bike"] == "tandem").any()  # a key no point has: 0 and no rows
    dask_boxes = dd.from_pandas(boxes.sort_index(), npartitions=3)
    for inclusive in ("both", "neither", "right"):
        kw = {"inclusive": inclusive, "by": "bike"}
        counts = sharded.count_boxes(boxes, *BOUNDS, **kw)
        sums = sharded.sum_boxes(boxes, *BOUNDS, **kw)
        report = sharded.report_boxes(boxes, *BOUNDS, **kw)
        pd.testing.assert_series_equal(counts, tree.count_boxes(boxes, *BOUNDS, **kw))
        pd.testing.assert_series_equal(sums, tree.sum_boxes(boxes, *BOUNDS, **kw))
        pd.testing.assert_frame_equal(report, tree.report_boxes(boxes, *BOUNDS, **kw))
        want_counts, want_sums, want_rows = _keyed_reference(points, boxes, inclusive)
        assert counts.tolist() == want_counts and sum(want_counts) > 0
        assert sums.tolist() == want_sums
        assert report["row"].tolist() == want_rows
        assert counts[boxes["bike"] == "tandem"].eq(0).all()
        ordered = boxes.sort_index()
        from_dask = sharded.count_boxes(dask_boxes, *BOUNDS, **kw).compute()
        pd.testing.assert_series_equal(from_dask, tree.count_boxes(ordered, *BOUNDS, **kw))
        dask_report = sharded.report_boxes(dask_boxes, *BOUNDS, **kw).compute()
        pd.testing.assert_frame_equal(
            dask_report.reset_index(drop=True), tree.report_boxes(ordered, *BOUNDS, **kw)
        )
    with pytest.raises(ValueError, match="every box needs its key"):
        sharded.count_boxes(boxes, *BOUNDS)
    # A saved folder records the keys; the loaded tree answers the same.
    folder = tmp_path / "keyed.shards"
    sharded.save(folder)
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["keys"]["names"] == ["bike"] and manifest["keys"]["count"] == 3
    again = bd.ShardedTree.load(folder, client=client)
    pd.testing.assert_series_equal(
        again.count_boxes(boxes, *BOUNDS, by="bike"), tree.count_boxes(boxes, *BOUNDS, by="bike")
    )
    # A manifest whose keys are not the shards' is refused.
    manifest["keys"]["names"] = ["kind"]
    (folder / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(boxwood.CorruptIndexFileError, match="other keys than the manifest"):
        bd.ShardedTree.load(folder, client=client)


def test_keyed_shards_join_as_duckdb_does(client):
    """Outside reference: DuckDB's keyed inequality join, p.bike = b.bike and p.start between
    b.t0 and b.t1 and p.minutes between b.m0 and b.m1 (BETWEEN is inclusive at both ends:
    DuckDB docs), against a tree sharded by (key, x) over 5 shards."""
    duckdb = require("duckdb")
    rng = np.random.default_rng(77)
    points = _points(rng, n=2500)
    sharded = bd.ShardedTree.from_frame(
        dd.from_pandas(points, npartitions=3, sort=False),
        "start",
        "minutes",
        shards=5,
        by="bike",
        client=client,
    )
    boxes = _boxes(rng, 120, x_span=250)
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo", "tandem"], len(boxes))
    p = pd.DataFrame(
        {
            "row": np.arange(len(points)),
            "bike": points["bike"].astype(str).to_numpy(),
            "start": points["start"].to_numpy(),
            "minutes": points["minutes"].to_numpy(),
        }
    )
    b = pd.DataFrame({"box": np.arange(len(boxes))})
    for column in ("bike", *BOUNDS):
        b[column] = boxes[column].to_numpy()
    con = duckdb.connect()
    con.register("p", p)
    con.register("b", b)
    joined = con.execute(
        "select b.box, p.row from b join p on p.bike = b.bike "
        "and p.start between b.t0 and b.t1 and p.minutes between b.m0 and b.m1 "
        "order by b.box, p.row"
    ).fetchnumpy()
    counts = sharded.count_boxes(boxes, *BOUNDS, by="bike")
    np.testing.assert_array_equal(
        counts.to_numpy(), np.bincount(joined["box"], minlength=len(boxes))
    )
    report = sharded.report_boxes(boxes, *BOUNDS, by="bike")
    np.testing.assert_array_equal(report["row"].to_numpy(), joined["row"])
    assert len(joined["row"]) > len(boxes)  # not vacuous


KEYED_JOIN = dict(x="start", y="minutes", x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1")


@pytest.mark.parametrize("inclusive", ["both", "left"])
def test_keyed_shards_join_as_one_tree_box_join_and_duckdb(client, inclusive):
    """A keyed sharded join, checked row for row against one tree's ``box_join`` and
    against the outside reference, DuckDB's keyed inequality join (p.bike = b.bike and
    the bounds compared with >= / <= / < as `inclusive` says; DuckDB docs)."""
    duckdb = require("duckdb")
    rng = np.random.default_rng(91)
    points = _points(rng, n=2200).assign(pos=np.arange(2200))
    frame = dd.from_pandas(points, npartitions=3, sort=False)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", shards=6, by="bike", client=client
    )
    assert np.unique(sharded._plan.key_codes).size < sharded.num_shards - 1  # keys span shards
    boxes = _boxes(rng, 110, x_span=250)
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo", "tandem"], len(boxes))
    boxes["fare"] = rng.integers(0, 9, len(boxes))  # a name on both sides: suffixed
    kw = {"inclusive": inclusive}
    joined = sharded.join(frame, boxes, *BOUNDS, by="bike", **kw)
    expected = boxwood.box_join(points, boxes, by="bike", **KEYED_JOIN, **kw)
    pd.testing.assert_frame_equal(joined, expected)
    assert list(joined.columns).count("bike") == 1 and "fare_point" in joined.columns
    assert list(joined.columns)[: points.shape[1]] == [  # points first
        "start",
        "minutes",
        "fare_point",
        "bike",
        "pos",
    ]
    # Outside reference: DuckDB, the boxes numbered in their order.
    lo = ">=" if inclusive in ("both", "left") else ">"
    hi = "<=" if inclusive in ("both", "right") else "<"
    p = points.assign(bike=points["bike"].astype(str)).reset_index(drop=True)
    b = boxes.reset_index(drop=True).assign(box=np.arange(len(boxes)))
    con = duckdb.connect()
    con.register("p", p)
    con.register("b", b)
    want = con.execute(
        f"select b.box, p.pos from b join p on p.bike = b.bike and p.start {lo} b.t0 and "
        f"p.start {hi} b.t1 and p.minutes {lo} b.m0 and p.minutes {hi} b.m1 "
        "order by b.box, p.pos"
    ).fetchnumpy()
    np.testing.assert_array_equal(joined["pos"].to_numpy(), want["pos"])
    np.testing.assert_array_equal(joined["zone"].to_numpy(), boxes["zone"].to_numpy()[want["box"]])
    assert len(want["pos"]) > len(boxes) and (boxes["bike"] == "tandem").any()
    # Boxes naming the key otherwise, and Dask boxes: the same rows.
    renamed = boxes.rename(columns={"bike": "cycle"})
    again = sharded.join(frame, renamed, *BOUNDS, boxes_by="cycle", **kw)
    pd.testing.assert_frame_equal(again, expected)
    ordered = boxes.sort_index()
    parts = dd.from_pandas(ordered, npartitions=3)
    from_dask = sharded.join(frame, parts, *BOUNDS, by="bike", **kw).compute()
    pd.testing.assert_frame_equal(
        from_dask.reset_index(drop=True),
        boxwood.box_join(points, parts.compute(), by="bike", **KEYED_JOIN, **kw),
    )


def test_keyed_shards_join_refuses_boxes_without_keys_or_other_key_columns(client):
    rng = np.random.default_rng(12)
    points = _points(rng, n=300)
    frame = dd.from_pandas(points, npartitions=2, sort=False)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", shards=2, by="bike", client=client
    )
    boxes = _boxes(rng, 5, x_span=50).assign(bike="dock", kind="dock")
    with pytest.raises(ValueError, match="every box needs its key"):
        sharded.join(frame, boxes, *BOUNDS)
    with pytest.raises(ValueError, match="built with keys bike but the join asks for keys kind"):
        sharded.join(frame, boxes, *BOUNDS, by="kind")
    with pytest.raises(ValueError, match="not both"):
        sharded.join(frame, boxes, *BOUNDS, by="bike", boxes_by="kind")
    with pytest.raises(KeyError, match="no column for by='cycle'"):
        sharded.join(frame, boxes, *BOUNDS, boxes_by="cycle")
    with pytest.raises(TypeError, match="integer"):  # a box key of another type
        sharded.join(frame, boxes.assign(bike=3), *BOUNDS, by="bike")
    plain = bd.ShardedTree.from_frame(frame, "start", "minutes", shards=2, client=client)
    with pytest.raises(ValueError, match="built without keys"):
        plain.join(frame, boxes, *BOUNDS, by="bike")


def test_keyed_shards_of_two_key_columns_with_dropped_rows(client):
    rng = np.random.default_rng(8)
    points = _points(rng, n=1500).assign(dock=rng.integers(0, 4, 1500)).reset_index(drop=True)
    points["dock"] = points["dock"].astype("Int64")
    points.loc[[3, 400], "dock"] = pd.NA  # left out, positions of the others kept
    parts = dd.from_pandas(points, npartitions=3, sort=False)
    by = ["bike", "dock"]
    with pytest.warns(boxwood.MissingValuesDropped):
        sharded = bd.ShardedTree.from_frame(
            parts, "start", "minutes", shards=5, by=by, on_missing="drop", client=client
        )
    with pytest.warns(boxwood.MissingValuesDropped):
        tree = boxwood.RangeTree.from_frame(points, "start", "minutes", by=by, on_missing="drop")
    assert all((a == b).all() for a, b in zip(sharded.keys, tree.keys))
    boxes = _boxes(rng, 70, x_span=300)
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo"], len(boxes))
    boxes["dock"] = rng.integers(0, 6, len(boxes))  # docks 4 and 5 hold no points
    counts = sharded.count_boxes(boxes, *BOUNDS, by=by)
    pd.testing.assert_series_equal(counts, tree.count_boxes(boxes, *BOUNDS, by=by))
    pd.testing.assert_frame_equal(
        sharded.report_boxes(boxes, *BOUNDS, by=by), tree.report_boxes(boxes, *BOUNDS, by=by)
    )
    # Reference: pandas boolean masks, each box's key columns compared too.
    for count, (_, box), mask in zip(counts, boxes.iterrows(), _masks(points, boxes, "both")):
        same = (points["bike"] == box["bike"]).to_numpy() & (points["dock"] == box["dock"]).fillna(
            False
        ).to_numpy(dtype=bool)
        assert count == int((mask & same).sum())
    assert counts[boxes["dock"] >= 4].eq(0).all() and counts.sum() > 0


def _typed_keys(kind, rng, n, m):
    """Points' key column of a kind, and boxes' keys of the same kind (one key absent from
    the points where the kind has one to spare), as a caller would write them."""
    if kind in ("datetime", "tz-aware"):
        days = pd.to_datetime(["2025-03-01 06:00", "2025-03-01 14:00", "2025-03-04 06:00"])
        if kind == "tz-aware":
            days = days.tz_localize("Europe/Paris")
        points = pd.Series(days[rng.integers(0, 3, n)])
        absent = pd.Timestamp("2025-03-09 06:00", tz=days.tz)
        boxes = pd.Series([*days, absent])[rng.integers(0, 4, m)].reset_index(drop=True)
        if kind == "tz-aware":  # the same instants, written in UTC
            boxes = boxes.dt.tz_convert("UTC")
        return points, boxes
    if kind == "bool":
        return pd.Series(rng.integers(0, 2, n).astype(bool)), pd.Series(rng.integers(0, 2, m) == 1)
    if kind == "categorical":  # categories of integers
        points = pd.Series(pd.Categorical(rng.choice([3, 7, 11], n), categories=[3, 7, 11]))
        return points, pd.Series(rng.choice([3, 5, 7, 11], m))
    words = ["aft", "fore", "forecastle"]  # Arrow-backed strings sharing a prefix
    points = pd.Series(pd.array(rng.choice(words, n), dtype="string[pyarrow]"))
    return points, pd.Series(rng.choice([*words, "for"], m), dtype=object)


@pytest.mark.parametrize("kind", ["datetime", "tz-aware", "bool", "categorical", "arrow-string"])
def test_keyed_shards_of_every_key_type_answer_as_pandas_masks(client, kind):
    """Keys of each type on a tree sharded by (key, x): counts, sums, rows and the join
    against one keyed tree and the outside reference, pandas boolean masks (the key
    compared with ``==``, for tz-aware keys as instants)."""
    rng = np.random.default_rng(60 + len(kind))
    points = _points(rng, n=1800).reset_index(drop=True).drop(columns="bike")
    boxes = _boxes(rng, 80, x_span=300).reset_index(drop=True)
    points["key"], boxes["key"] = _typed_keys(kind, rng, len(points), len(boxes))
    frame = dd.from_pandas(points, npartitions=3, sort=False)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", "fare", shards=5, by="key", client=client
    )
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", by="key")
    assert np.array_equal(sharded.keys, tree.keys)
    # Reference: pandas value_counts of the key column (tz-aware keys as naive UTC).
    counted = points["key"].value_counts()
    if kind == "tz-aware":
        counted.index = counted.index.tz_convert("UTC").tz_localize(None)
    by_key = sharded.count_by_key()
    assert by_key == tree.count_by_key() and len(by_key) == len(counted)
    assert [by_key[k] for k in tree.count_by_key()] == [
        int(counted[k]) for k in sorted(counted.index.tolist())
    ]
    if kind == "tz-aware":  # listed as naive UTC instants
        utc = points["key"].dt.tz_convert("UTC").dt.tz_localize(None)
        assert sharded.keys.dtype.kind == "M"
        assert sharded.keys.tolist() == sorted(utc.unique().tolist())
    kw = {"by": "key"}
    counts = sharded.count_boxes(boxes, *BOUNDS, **kw)
    sums = sharded.sum_boxes(boxes, *BOUNDS, **kw)
    report = sharded.report_boxes(boxes, *BOUNDS, **kw)
    pd.testing.assert_series_equal(counts, tree.count_boxes(boxes, *BOUNDS, **kw))
    pd.testing.assert_frame_equal(report, tree.report_boxes(boxes, *BOUNDS, **kw))
    # Reference: pandas boolean masks, the key compared with == as well as the bounds.
    rows, want_counts, want_sums = [], [], []
    for i, mask in enumerate(_masks(points, boxes, "both")):
        mask = mask & (points["key"] == boxes["key"].iloc[i]).to_numpy(dtype=bool)
        want_counts.append(int(mask.sum()))
        want_sums.append(int(points["fare"][mask].sum()))
        rows.extend(np.flatnonzero(mask).tolist())
    assert counts.tolist() == want_counts and sum(want_counts) > 0
    assert sums.tolist() == want_sums and report["row"].tolist() == rows
    if kind != "bool":  # a key no point has counts nothing
        absent = ~boxes["key"].isin(points["key"].unique())
        assert absent.any() and counts[absent].eq(0).all()
    joined = sharded.join(frame, boxes, *BOUNDS, by="key")
    pd.testing.assert_frame_equal(joined, boxwood.box_join(points, boxes, by="key", **KEYED_JOIN))
    assert len(joined) == len(rows) and list(joined.columns).count("key") == 1


def test_keyed_shards_refuse_missing_keys_other_key_types_and_too_many_keys(client, monkeypatch):
    rng = np.random.default_rng(14)
    points = _points(rng, n=400)
    points["bike"] = points["bike"].astype(object)
    label = points.index[7]
    points.loc[label, "bike"] = None
    frame = dd.from_pandas(points, npartitions=2, sort=False)
    # A missing key names the column, the row's label and its position.
    with pytest.raises(ValueError, match=rf"by column 'bike' .* at row {label} \(position 7\)"):
        bd.ShardedTree.from_frame(frame, "start", "minutes", shards=3, by="bike", client=client)
    with pytest.warns(boxwood.MissingValuesDropped, match="by 'bike': 1"):
        sharded = bd.ShardedTree.from_frame(
            frame, "start", "minutes", shards=3, by="bike", on_missing="drop", client=client
        )
    assert len(sharded) == len(points) - 1 and sharded.rows_dropped == 1
    boxes = _boxes(rng, 20, x_span=100)
    boxes["bike"] = rng.choice(["dock", "cargo"], len(boxes)).astype(object)
    tree_rows = sharded.report_boxes(boxes, *BOUNDS, by="bike")["row"]
    assert 7 not in tree_rows.tolist() and len(tree_rows) > 0  # positions of the whole frame
    missing = boxes.copy()
    missing.loc[missing.index[3], "bike"] = None
    at = rf"by key column 'bike' has a missing value .* at row {missing.index[3]}"
    with pytest.raises(ValueError, match=at):
        sharded.count_boxes(missing, *BOUNDS, by="bike")
    with pytest.raises(ValueError, match=at):
        sharded.count_boxes(dd.from_pandas(missing, npartitions=2), *BOUNDS, by="bike").compute()
    # A key of another type names both types, for pandas and for Dask boxes (checked early).
    for asked in (boxes.assign(bike=3), dd.from_pandas(boxes.assign(bike=3), npartitions=2)):
        with pytest.raises(TypeError, match="integer.*string"):
            sharded.count_boxes(asked, *BOUNDS, by="bike")
    # More distinct keys than 32-bit codes hold is refused (the limit made small here).
    monkeypatch.setattr(boxwood._keys, "MAX_KEYS", 2)
    too_many = pytest.raises(
        ValueError, match="3 distinct keys is more than a tree holds .at most 2"
    )
    with too_many, pytest.warns(boxwood.MissingValuesDropped):
        bd.ShardedTree.from_frame(
            frame, "start", "minutes", shards=3, by="bike", on_missing="drop", client=client
        )


def test_unkeyed_sharded_trees_refuse_by_and_keyed_ones_refuse_boundaries(client):
    rng = np.random.default_rng(5)
    parts = dd.from_pandas(_points(rng, n=300), npartitions=2)
    plain = bd.ShardedTree.from_frame(parts, "start", "minutes", shards=2, client=client)
    boxes = _boxes(rng, 5, x_span=50).assign(bike="dock")
    with pytest.raises(ValueError, match="built without keys"):
        plain.count_boxes(boxes, *BOUNDS, by="bike")
    with pytest.raises(ValueError, match="built without keys"):
        plain.count_by_key()
    with pytest.raises(ValueError, match="boundaries= cannot be given with by="):
        bd.ShardedTree.from_frame(
            parts, "start", "minutes", boundaries=[50.0], by="bike", client=client
        )


# ------------------------------------------------------------------------- routing, by property


def _lex_le(a, b):
    return a[0] < b[0] or (a[0] == b[0] and a[1] <= b[1])


def _can_hold(lower, upper, code, lo, hi, inclusive):
    """Whether shard [lower, upper) of the (code, x) order (None: unbounded) holds some
    (code, x) with x in the box's interval, x a real number (the reference, by cases)."""
    lo_closed, hi_closed = inclusive in ("both", "left"), inclusive in ("both", "right")
    start, start_closed = lo, lo_closed  # the shard's x interval for this code, met with the box's
    if lower is not None:
        if lower[0] > code:
            return False
        if lower[0] == code and lower[1] > start:
            start, start_closed = lower[1], True
    end, end_closed = hi, hi_closed
    if upper is not None:
        if upper[0] < code:
            return False
        if upper[0] == code and upper[1] <= end:
            end, end_closed = upper[1], False
    return start < end or (start == end and start_closed and end_closed)


@settings(max_examples=300, deadline=None)
@given(data=st.data())
def test_keyed_routing_sends_a_box_to_exactly_the_shards_that_can_hold_it(data):
    """Plan.route against the reference above (interval arithmetic in the (key, x) order)
    and against the shards of drawn points: every matching point's shard is routed to."""
    keys = data.draw(st.integers(1, 4))
    pair = st.tuples(st.integers(0, keys - 1), st.integers(-4, 4).map(float))
    cuts = sorted(set(data.draw(st.lists(pair, max_size=7))))
    codes = np.array([c for c, _ in cuts], dtype=np.int64)
    xs = np.array([x for _, x in cuts], dtype=np.float64)
    axis = boxwood._columns.AxisInfo("x", np.dtype("float64"), "float")
    plan = bd._routing.Plan(axis, axis, xs, codes, keys)
    inclusive = data.draw(st.sampled_from(INCLUSIVE))
    boxes = data.draw(
        st.lists(
            st.tuples(st.integers(-1, keys), st.integers(-5, 5), st.integers(0, 6)),
            min_size=1,
            max_size=8,
        )
    )
    box_codes = np.array([c if c < keys else -1 for c, _, _ in boxes], dtype=np.int64)
    lo = np.array([b[1] for b in boxes], dtype=np.float64)
    hi = lo + np.array([b[2] for b in boxes], dtype=np.float64)
    first, last = plan.route([lo, hi], inclusive, box_codes)
    bounds = [None, *cuts, None]
    points = data.draw(st.lists(pair, max_size=30))
    for i, code in enumerate(box_codes.tolist()):
        holding = [
            s
            for s in range(len(cuts) + 1)
            if code >= 0 and _can_hold(bounds[s], bounds[s + 1], code, lo[i], hi[i], inclusive)
        ]
        if holding:
            assert (first[i], last[i]) == (holding[0], holding[-1])
        elif lo[i] < hi[i] or inclusive == "both":  # an empty x range may still go somewhere
            assert first[i] > last[i]
        for point in points:  # a point of the box's key inside its x range: routed to
            inside = _between(np.array([point[1]]), lo[i], hi[i], inclusive)[0]
            if point[0] == code and inside:
                shard = sum(_lex_le(c, point) for c in cuts)
                assert first[i] <= shard <= last[i]


# ------------------------------------------------------------------------- broadcast


def test_broadcast_tree_answers_dask_boxes_partition_by_partition(client):
    rng = np.random.default_rng(17)
    points = _points(rng, n=1000)
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", layout="compact")
    copied = bd.broadcast(tree, client)
    assert len(client.who_has(copied.future)[copied.future.key]) == 2  # on both workers
    parts = dd.from_pandas(_boxes(rng, 80, x_span=300), npartitions=3)  # sorted by label
    boxes = parts.compute()
    for inclusive in ("both", "neither"):
        counts = copied.count_boxes(parts, *BOUNDS, inclusive=inclusive)
        assert counts.divisions == parts.divisions
        counts = counts.compute()
        sums = copied.sum_boxes(parts, *BOUNDS, inclusive=inclusive).compute()
        report = copied.report_boxes(parts, *BOUNDS, inclusive=inclusive).compute()
        pd.testing.assert_series_equal(
            counts, tree.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
        )
        pd.testing.assert_series_equal(sums, tree.sum_boxes(boxes, *BOUNDS, inclusive=inclusive))
        _check_against_pandas(points, boxes, inclusive, counts, sums, report)
    pd.testing.assert_series_equal(
        copied.count_boxes(boxes, *BOUNDS), tree.count_boxes(boxes, *BOUNDS)
    )


def test_broadcast_keyed_tree_answers_by_as_the_tree_and_pandas_groupby(client):
    rng = np.random.default_rng(23)
    points = _points(rng, n=1000)
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", by="bike")
    copied = bd.broadcast(tree, client)
    boxes = _boxes(rng, 60, x_span=300)
    # Keys of the tree, and one it does not hold ("tandem"), which counts nothing.
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo", "tandem"], len(boxes))
    parts = dd.from_pandas(boxes.sort_index(), npartitions=3)
    boxes = parts.compute()
    # Reference: pandas groupby of the points by key, each box's boolean masks in its group.
    groups = {key: group for key, group in points.reset_index().groupby("bike", observed=True)}
    empty = points.reset_index().iloc[:0]
    for inclusive in ("both", "left"):
        kw = {"inclusive": inclusive, "by": "bike"}
        counts = copied.count_boxes(parts, *BOUNDS, **kw)
        assert counts.divisions == parts.divisions
        counts = counts.compute()
        sums = copied.sum_boxes(parts, *BOUNDS, **kw).compute()
        report = copied.report_boxes(parts, *BOUNDS, **kw).compute()
        pd.testing.assert_series_equal(counts, tree.count_boxes(boxes, *BOUNDS, **kw))
        pd.testing.assert_series_equal(sums, tree.sum_boxes(boxes, *BOUNDS, **kw))
        pd.testing.assert_frame_equal(  # each partition's report starts its index at 0
            report.reset_index(drop=True), tree.report_boxes(boxes, *BOUNDS, **kw)
        )
        want_counts, want_sums, want_rows = [], [], []
        for i in range(len(boxes)):
            box = boxes.iloc[i]
            group = groups.get(box["bike"], empty)
            mask = _between(group["start"], box["t0"], box["t1"], inclusive) & _between(
                group["minutes"], box["m0"], box["m1"], inclusive
            )
            want_counts.append(int(mask.sum()))
            want_sums.append(int(group["fare"][mask].sum()))
            want_rows.extend(sorted(group.index[mask].tolist()))  # positions in points
        assert counts.tolist() == want_counts
        assert sums.tolist() == want_sums
        assert report["row"].tolist() == want_rows
        tandem = boxes["bike"] == "tandem"
        assert tandem.any() and counts[tandem].eq(0).all()
    assert sum(want_counts) > 0  # the boxes do hold points
    with pytest.raises(ValueError, match="every box needs its key"):
        copied.count_boxes(boxes, *BOUNDS)


# ------------------------------------------------------------------------- shard folders


def _folder_files(folder: Path) -> list[str]:
    return sorted(os.listdir(folder))


def test_save_and_load_a_shard_folder(client, tmp_path, capsys):
    rng = np.random.default_rng(23)
    points = _points(rng, n=1200)
    frame = dd.from_pandas(points, npartitions=3, sort=False)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", "fare", shards=3, layout="compact", client=client
    )
    folder = tmp_path / "larkhaven-shards"
    sharded.save(folder)
    files = _folder_files(folder)
    assert files == ["manifest.json"] + [f"shard-{i:05d}-of-00003.boxwood" for i in range(3)]
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["rows"] == 1200 and manifest["layout"] == "compact"
    assert [s["rows"] for s in manifest["shards"]] == sharded.shard_rows
    assert [s["bytes"] for s in manifest["shards"]] == [
        (folder / s["file"]).stat().st_size for s in manifest["shards"]
    ]
    again = bd.ShardedTree.load(folder, client=client, progress=True)
    assert "100% Completed" in capsys.readouterr().out  # Dask's own progress bar
    assert again.shard_rows == sharded.shard_rows
    np.testing.assert_array_equal(again.boundaries, sharded.boundaries)
    boxes = _boxes(rng, 50, x_span=300, edges=sharded.boundaries)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    pd.testing.assert_series_equal(again.sum_boxes(boxes, *BOUNDS), local.sum_boxes(boxes, *BOUNDS))
    pd.testing.assert_frame_equal(
        again.report_boxes(boxes, *BOUNDS), local.report_boxes(boxes, *BOUNDS)
    )
    with pytest.raises(FileExistsError, match="not empty"):
        sharded.save(folder)


def test_damaged_or_unfinished_folders_are_refused(client, tmp_path):
    points = pd.DataFrame({"start": np.arange(40.0), "minutes": np.arange(40) % 7})
    sharded = bd.ShardedTree.from_frame(
        dd.from_pandas(points, npartitions=2, sort=False),
        "start",
        "minutes",
        shards=2,
        client=client,
    )
    folder = tmp_path / "shards"
    sharded.save(folder)
    manifest = (folder / "manifest.json").read_text()
    shard = folder / "shard-00001-of-00002.boxwood"
    data = shard.read_bytes()

    unfinished = tmp_path / "unfinished"
    unfinished.mkdir()
    (unfinished / "shard-00000-of-00002.boxwood").write_bytes(data)
    with pytest.raises(FileNotFoundError, match="not a finished shard folder"):
        bd.ShardedTree.load(unfinished, client=client)
    (folder / "manifest.json").write_text(manifest[:-20])
    with pytest.raises(boxwood.CorruptIndexFileError, match="not valid JSON"):
        bd.ShardedTree.load(folder, client=client)
    written = f'"boxwood-shards": {bd.MANIFEST_VERSION}'
    assert written in manifest
    # A newer version, and version 1 (before the manifest recorded keys), are refused.
    for version in (9, 1):
        (folder / "manifest.json").write_text(
            manifest.replace(written, f'"boxwood-shards": {version}')
        )
        with pytest.raises(boxwood.UnsupportedIndexFileError, match=f"version {version};"):
            bd.ShardedTree.load(folder, client=client)
    (folder / "manifest.json").write_text(manifest)
    shard.write_bytes(data[:-64])
    with pytest.raises(boxwood.TruncatedIndexFileError, match="cut short"):
        bd.ShardedTree.load(folder, client=client)
    other = bd.ShardedTree.from_frame(
        dd.from_pandas(points.iloc[::-1], npartitions=2, sort=False),
        "start",
        "minutes",
        shards=2,
        client=client,
    )
    other.save(tmp_path / "other")
    shard.write_bytes((tmp_path / "other" / shard.name).read_bytes())  # same size, other rows
    with pytest.raises(boxwood.ChecksumMismatchError, match="not the one the manifest names"):
        bd.ShardedTree.load(folder, client=client)


def test_the_manifest_is_written_last_and_clears_partial_files(tmp_path):
    # What a worker killed inside tree.save leaves: a hidden partial file (see tree.save).
    tree = boxwood.RangeTree(np.arange(5.0), np.arange(5))
    saved = bd._files.save_shard(tree, str(tmp_path / "shard-00000-of-00001.boxwood"))
    (tmp_path / ".shard-00000-of-00001.boxwood.4242-17.partial").write_bytes(b"half")
    (tmp_path / "notes.txt").write_text("not ours")
    with pytest.raises(FileNotFoundError, match="not a finished shard folder"):
        bd.ShardedTree.load(tmp_path, client=object())
    bd._files.write_manifest(str(tmp_path), {"boxwood-shards": 1}, saved)
    assert _folder_files(tmp_path) == ["manifest.json", "notes.txt", "shard-00000-of-00001.boxwood"]
    assert json.loads((tmp_path / "manifest.json").read_text())["shards"] == [saved]


# ------------------------------------------------------------------------- without dask


def test_boxwood_imports_without_dask_and_boxwood_dask_names_the_extra():
    code = (
        "import sys\n"
        "sys.modules['dask'] = None  # as if Dask were not installed\n"
        "sys.modules['distributed'] = None\n"
        "import boxwood\n"
        "print(boxwood.RangeTree([1.0, 2.0], [1, 2]).count(0, 3, 0, 3))\n"
        "try:\n"
        "    import boxwood.dask\n"
        "except ImportError as exc:\n"
        "    print(exc)\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=TIMEOUT
    )
    assert result.returncode == 0, result.stderr
    count, message = result.stdout.strip().splitlines()
    assert count == "2" and "boxwood[dask]" in message


def test_unaligned_columns_from_a_message_buffer_are_accepted():
    # Arrays unpickled from a Dask message can start at an odd address: numpy marks them
    # unaligned, and the tree must copy rather than refuse them.
    buffer = np.zeros(8 * 4 + 1, dtype=np.uint8)
    unaligned = np.frombuffer(buffer.data, dtype=np.float64, count=4, offset=1)
    assert not unaligned.flags.aligned
    unaligned_copy = unaligned.copy()
    tree = boxwood.RangeTree(unaligned, unaligned)
    assert tree.count(unaligned, unaligned, -1, 1).tolist() == [4, 4, 4, 4]
    assert np.array_equal(unaligned, unaligned_copy)


# ------------------------------------------------------------------------- documentation


def _readme_dask_code() -> str:
    import re

    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    # The keyed example at the section's end runs in tests/test_docs.py.
    section = text[text.index("## Many machines: Dask") : text.index("### Keys on a sharded tree")]
    return "\n".join(re.findall(r"```python\n(.*?)```", section, flags=re.S))


def test_readme_dask_example_runs_as_written_twice(client, tmp_path, monkeypatch, capsys):
    # The example saves into a fresh temporary folder, so running it again must work too;
    # temporary folders go under tmp_path so the test leaves nothing in /tmp.
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    folders = []
    for _ in range(2):
        namespace = {"__name__": "readme"}
        exec(compile(_readme_dask_code(), "README.md", "exec"), namespace)
        trips, questions = namespace["trips"], namespace["questions"]
        counts = namespace["counts"]
        x, y = trips["returned"], trips["battery"]
        # Reference: pandas boolean masks over the whole frame.
        expected = [
            int(((x >= q.x_lo) & (x <= q.x_hi) & (y >= q.y_lo) & (y <= q.y_hi)).sum())
            for q in questions.itertuples()
        ]
        assert counts.tolist() == expected
        spread = namespace["spread"]
        for q, (_, row) in zip(questions.itertuples(), spread.iterrows()):
            inside = y[(x >= q.x_lo) & (x <= q.x_hi) & (y >= q.y_lo) & (y <= q.y_hi)]
            # Reference: numpy.quantile of the masked battery levels.
            want = [inside.min(), inside.max(), *np.quantile(inside, [0.5, 0.9])]
            assert row[["min", "max", "q0.5", "q0.9"]].tolist() == want
        folder = Path(namespace["folder"])
        assert folder.parent == tmp_path and (folder / "manifest.json").exists()
        assert capsys.readouterr().out.strip().splitlines()[-1] == "True"
        folders.append(folder)
    assert folders[0] != folders[1]


def test_module_docstring_example(client):
    import doctest

    result = doctest.testmod(
        bd, extraglobs={"client": client}, optionflags=doctest.NORMALIZE_WHITESPACE
    )
    assert result.attempted > 0 and result.failed == 0


# ------------------------------------------------------------------------- killed workers
# Last in the file: each kills a worker (the nanny starts a new one).


def _slowly(part):
    time.sleep(0.4)  # keeps the job running while a worker is killed
    return part


def _kill_worker_holding(client, future):
    (address,) = client.who_has(future)[future.key][:1]
    # The worker process dies at once, as on a crash (its nanny then starts a new one).
    client.run(os._exit, 1, workers=[address], on_error="ignore")
    return address


def _times_computed(client, key) -> int:
    """How often the scheduler saw `key` finish (its transition log)."""

    def count(dask_scheduler):
        return sum(1 for event in dask_scheduler.story(key) if event[2] == "memory")

    return client.run_on_scheduler(count)


def test_a_worker_killed_mid_query_changes_no_answer(client):
    rng = np.random.default_rng(31)
    points = _points(rng, n=2000)
    frame = dd.from_pandas(points, npartitions=4, sort=False)
    sharded = bd.ShardedTree.from_frame(frame, "start", "minutes", "fare", shards=4, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    boxes = _boxes(rng, 100, x_span=300, edges=sharded.boundaries)
    parts = dd.from_pandas(boxes, npartitions=4, sort=False).map_partitions(_slowly)
    first_shard = sharded.futures[0]
    before = _times_computed(client, first_shard.key)
    counts = sharded.count_boxes(parts, *BOUNDS)  # already running on the cluster
    report = sharded.report_boxes(parts, *BOUNDS)
    time.sleep(0.2)
    killed = _kill_worker_holding(client, first_shard)
    counts, report = counts.compute(), report.compute()
    pd.testing.assert_series_equal(counts, local.count_boxes(boxes, *BOUNDS))
    pd.testing.assert_frame_equal(report.reset_index(drop=True), local.report_boxes(boxes, *BOUNDS))
    # Dask rebuilt the lost shard from its inputs on another worker.
    assert killed not in client.who_has(first_shard)[first_shard.key]
    assert _times_computed(client, first_shard.key) > before
    client.wait_for_workers(2, timeout=TIMEOUT)


def test_a_worker_killed_mid_save_leaves_a_complete_folder(client, tmp_path):
    rng = np.random.default_rng(37)
    points = _points(rng, n=2000)
    frame = dd.from_pandas(points, npartitions=4, sort=False)
    sharded = bd.ShardedTree.from_frame(frame, "start", "minutes", "fare", shards=4, client=client)
    folder = tmp_path / "shards"
    done = sharded.save(folder, wait=False)
    killed = _kill_worker_holding(client, sharded.futures[-1])
    assert not (folder / "manifest.json").exists()  # the shards on the killed worker are lost
    done.result(timeout=TIMEOUT)
    assert _folder_files(folder) == ["manifest.json"] + [
        f"shard-{i:05d}-of-00004.boxwood" for i in range(4)
    ]
    assert killed not in client.who_has(sharded.futures[-1])[sharded.futures[-1].key]
    again = bd.ShardedTree.load(folder, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    boxes = _boxes(rng, 60, x_span=300, edges=sharded.boundaries)
    pd.testing.assert_series_equal(again.sum_boxes(boxes, *BOUNDS), local.sum_boxes(boxes, *BOUNDS))
    client.wait_for_workers(2, timeout=TIMEOUT)


# ------------------------------------------------------------------------- conventions


def test_dask_reports_default_to_ordered_rows_as_the_single_tree_does(client):
    for call in (bd.ShardedTree.report_boxes, bd.BroadcastTree.report_boxes):
        assert inspect.signature(call).parameters["ordered"].default is True, call
    rng = np.random.default_rng(23)
    points = _points(rng, n=2000)
    frame = dd.from_pandas(points, npartitions=3)
    points = frame.compute()
    sharded = bd.ShardedTree.from_frame(frame, "start", "minutes", shards=3, client=client)
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes")
    copied = bd.broadcast(tree, client)
    boxes = _boxes(rng, 50, x_span=300, edges=sharded.boundaries)
    masks = list(_masks(points, boxes, "both"))
    # Reference: pandas masks, each box's rows ascending.
    expected = pd.DataFrame(
        {
            "box": boxes.index.repeat([int(m.sum()) for m in masks]),
            "row": np.concatenate([np.flatnonzero(m) for m in masks]).astype(np.int64),
        }
    )
    for answerer in (sharded, copied):
        pd.testing.assert_frame_equal(answerer.report_boxes(boxes, *BOUNDS), expected)
        loose = answerer.report_boxes(boxes, *BOUNDS, ordered=False)
        assert loose["box"].tolist() == expected["box"].tolist()  # still in box order
        regrouped = loose.sort_values(["box", "row"], kind="stable").reset_index(drop=True)
        ordered = expected.sort_values(["box", "row"], kind="stable").reset_index(drop=True)
        pd.testing.assert_frame_equal(regrouped, ordered)


def test_shard_rows_merge_by_box_then_row_whatever_their_size():
    from boxwood.dask._tasks import _merged_runs

    rng = np.random.default_rng(31)
    for top in (1_000, 2**61):  # a combined int64 key fits, then it does not (two-key sort)
        for runs in (1, 4):  # shuffled pairs, and runs each sorted as ordered reports are
            box = rng.integers(0, 7, 500)
            row = rng.integers(0, top, 500)
            if runs > 1:
                pieces = np.array_split(np.arange(500), runs)
                order = np.concatenate([p[np.lexsort((row[p], box[p]))] for p in pieces])
                box, row = box[order], row[order]
            got_box, got_row = _merged_runs(box, row)
            # Reference: Python's own sort of the (box, row) tuples.
            want = sorted(zip(box.tolist(), row.tolist()))
            assert list(zip(got_box.tolist(), got_row.tolist())) == want


def test_partitions_take_their_rows_and_join_frame_orders_them_by_box_then_row():
    """take_points and join_frame as the workers run them, on ordered shard reports of
    unrelated row sets, against Python's sort of the (box, row) tuples."""
    from boxwood.dask._tasks import join_frame, take_points

    rng = np.random.default_rng(32)
    n, boxes_n = 400, 30
    points = pd.DataFrame({"pos": np.arange(n), "v": rng.integers(0, 9, n)})
    answers, pairs = [], []
    for _ in range(3):  # shards, each its boxes (ids ascending) with each box's rows sorted
        ids = np.sort(rng.choice(boxes_n, 20, replace=False))
        local = np.sort(rng.integers(0, ids.size, 150))
        rows = np.concatenate(
            [np.sort(rng.choice(n, (local == b).sum(), replace=False)) for b in range(ids.size)]
        )
        answers.append((ids, (local, rows)))
        pairs += list(zip(ids[local].tolist(), rows.tolist()))
    answers.append((np.zeros(0, np.int64), None))  # a shard asked nothing
    firsts = [0, 90, 250]
    ends = [*firsts[1:], n]
    taken = [take_points(points.iloc[a:b], a, *answers) for a, b in zip(firsts, ends)]
    for (part, box, row), a, b in zip(taken, firsts, ends):
        assert list(zip(box.tolist(), row.tolist())) == sorted(p for p in pairs if a <= p[1] < b)
        assert part["pos"].tolist() == row.tolist()
    boxes = pd.DataFrame({"label": [f"b{i}" for i in range(boxes_n)], "v": 0})
    joined = join_frame(boxes, ("_point", "_box"), False, [], *taken)
    want = sorted(pairs)
    assert joined["pos"].tolist() == [r for _, r in want]
    assert joined["label"].tolist() == [f"b{b}" for b, _ in want]
    assert list(joined.columns) == ["pos", "v_point", "label", "v_box"]


def test_shards_are_compact_by_default_and_check_memory_reaches_the_workers_build(
    client, monkeypatch
):
    from boxwood import _memory
    from boxwood.dask._tasks import build_shard

    assert inspect.signature(bd.ShardedTree.from_frame).parameters["layout"].default == "compact"
    rng = np.random.default_rng(37)
    points = _points(rng, n=600)
    frame = dd.from_pandas(points, npartitions=2)
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", shards=2, check_memory=False, client=client
    )
    assert sharded.layout == "compact"
    # The shard task as a worker runs it, here, on a machine with 10 kB free.
    monkeypatch.setattr(_memory, "available_bytes", lambda: 10_000)
    piece = (points.reset_index(drop=True), np.arange(len(points), dtype=np.int64))
    columns = {"x": "start", "y": "minutes"}
    with pytest.raises(boxwood.InsufficientMemoryError, match="check_memory=False"):
        build_shard(columns, "compact", True, None, piece)
    tree = build_shard(columns, "compact", False, None, piece)
    # Reference: a pandas mask.
    inside = points["start"].between(10, 90) & points["minutes"].between(5, 30)
    assert tree.count(10, 90, 5, 30) == int(inside.sum())


def test_broadcast_growing_snapshot_answers_with_the_growing_trees_ids(client):
    rng = np.random.default_rng(29)
    points = _points(rng, n=900).reset_index(drop=True)
    names = ("start", "minutes", "fare")
    grower = boxwood.GrowingTree("float64", "int64", weights="int64", names=names)
    for part in np.array_split(np.arange(len(points)), 4):
        grower.append(points.iloc[part])
    gone = rng.choice(len(points), size=120, replace=False)
    grower.delete(gone)
    with pytest.raises(TypeError, match=r"snapshot\(\)"):
        bd.broadcast(grower, client)
    copied = bd.broadcast(grower.snapshot(), client)
    grower.append(points.iloc[:50])  # after the snapshot: the workers never see these
    live = points.drop(index=gone)  # labels are the growing tree's ids
    parts = dd.from_pandas(_boxes(rng, 60, x_span=300), npartitions=3)
    boxes = parts.compute()
    counts = copied.count_boxes(parts, *BOUNDS).compute()
    sums = copied.sum_boxes(parts, *BOUNDS).compute()
    report = copied.report_boxes(parts, *BOUNDS).compute()
    # Reference: pandas boolean masks over the rows live when the snapshot was taken.
    masks = list(_masks(live, boxes, "both"))
    assert counts.tolist() == [int(m.sum()) for m in masks]
    assert sums.tolist() == [int(live["fare"][m].sum()) for m in masks]
    want = [(b, int(r)) for b, m in zip(boxes.index, masks) for r in live.index[m]]
    assert list(zip(report["box"].tolist(), report["row"].tolist())) == want


# ------------------------------------------------------------------------- statistics across shards

QUANTILES = (0.0, 0.3, 0.5, 0.95, 0.99, 1.0)


def _numpy_stats(values, masks, method):
    """Reference: numpy.quantile (and numpy's min and max) of each box's masked values; None
    for an empty box."""
    return [
        (values[m].min(), values[m].max(), np.quantile(values[m], QUANTILES, method=method))
        if m.any()
        else None
        for m in masks
    ]


def _check_stats_against_numpy(stats, values, masks, method):
    # Outside reference: numpy.quantile of the masked values, for every method.
    for (label, row), want in zip(stats.iterrows(), _numpy_stats(values, masks, method)):
        got = row[[f"q{q:g}" for q in QUANTILES]].to_numpy()
        if want is None:
            assert row["count"] == 0 and row[["min", "max"]].isna().all() and pd.isna(got).all()
            continue
        assert (row["min"], row["max"]) == (want[0], want[1]), label
        assert got.tolist() == want[2].tolist(), (label, method)


@pytest.mark.parametrize("shards", [1, 4])
def test_sharded_stats_are_one_trees_and_numpy_quantiles_for_every_method(client, shards):
    from boxwood._stats import METHODS

    rng = np.random.default_rng(70 + shards)
    points = _points(rng)  # x and y full of ties: 200 x values, 60 y values
    frame = dd.from_pandas(points, npartitions=4)
    points = frame.compute()
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", "fare", shards=shards, client=client
    )
    local = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare")
    boxes = _boxes(rng, 80, x_span=400, edges=sharded.boundaries)
    boxes.loc[boxes.index[-3:], "m1"] = -10  # empty boxes
    for of, column in (("x", "start"), ("y", "minutes")):
        values = points[column].to_numpy()
        for inclusive in INCLUSIVE:
            masks = list(_masks(points, boxes, inclusive))
            for method in METHODS if inclusive == "both" else ("linear", "nearest"):
                kw = {"inclusive": inclusive, "of": of, "method": method, "quantiles": QUANTILES}
                stats = sharded.stats_boxes(boxes, *BOUNDS, **kw)
                pd.testing.assert_frame_equal(stats, local.stats_boxes(boxes, *BOUNDS, **kw))
                _check_stats_against_numpy(stats, values, masks, method)
    # A Dask DataFrame of boxes is computed first and answered the same.
    parts = dd.from_pandas(boxes, npartitions=3, sort=False)
    pd.testing.assert_frame_equal(
        sharded.stats_boxes(parts, *BOUNDS), local.stats_boxes(parts.compute(), *BOUNDS)
    )


def test_sharded_y_stats_search_many_points_a_shard(client):
    """Boxes of thousands of points in each shard: the y search takes several steps (each
    shard's range shrinks about seven times a step), and float values in few ties."""
    from boxwood.dask import _spread

    rng = np.random.default_rng(77)
    n = 40_000
    points = pd.DataFrame({"start": rng.uniform(0, 100, n), "minutes": rng.normal(30, 9, n)})
    frame = dd.from_pandas(points, npartitions=4)
    points = frame.compute()
    sharded = bd.ShardedTree.from_frame(frame, "start", "minutes", shards=3, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes")
    lo = rng.uniform(-5, 60, 40)
    boxes = pd.DataFrame(
        {"t0": lo, "t1": lo + rng.uniform(0, 80, 40), "m0": -np.inf, "m1": rng.uniform(20, 90, 40)}
    )
    boxes.loc[0, ["t0", "t1"]] = -np.inf, np.inf  # every shard asked
    before = sharded.nbytes
    steps = []
    narrow = _spread.ShardedBoxes._narrow

    def counted(self, *args):
        steps.append(args[0].size)
        return narrow(self, *args)

    _spread.ShardedBoxes._narrow = counted
    try:
        stats = sharded.stats_boxes(boxes, *BOUNDS, quantiles=QUANTILES)
    finally:
        _spread.ShardedBoxes._narrow = narrow
    # Width of a shard's range after s steps is below n / 7**s (module docstring).
    assert 4 <= len(steps) <= math.ceil(math.log(n) / math.log(_spread.CANDIDATES - 1)) + 2
    # Each shard derived its transposed cascade, which the tree's nbytes now counts.
    derived = sum(boxwood.estimate_bytes(rows).y_statistics_bytes for rows in sharded.shard_rows)
    assert sharded.nbytes - before == derived > 0
    sharded.stats_boxes(boxes, *BOUNDS, of="x")
    assert sharded.nbytes - before == derived
    pd.testing.assert_frame_equal(stats, local.stats_boxes(boxes, *BOUNDS, quantiles=QUANTILES))
    masks = list(_masks(points, boxes, "both"))
    _check_stats_against_numpy(stats, points["minutes"].to_numpy(), masks, "linear")


def test_sharded_stats_of_datetimes_and_int64_ends(client):
    rng = np.random.default_rng(78)
    n = 1200
    when = pd.Timestamp("2025-03-01", tz="America/Chicago") + pd.to_timedelta(
        rng.integers(0, 50, n), unit="min"
    )
    big = np.iinfo(np.int64)
    extremes = rng.choice([big.min, big.min + 1, -1, 0, big.max - 1, big.max], n)
    points = pd.DataFrame(
        {"start": rng.integers(0, 100, n), "minutes": when, "level": extremes.astype(np.int64)}
    )
    frame = dd.from_pandas(points, npartitions=3)
    points = frame.compute()
    lo = rng.integers(-5, 100, 50)
    boxes = pd.DataFrame({"t0": lo, "t1": lo + rng.integers(0, 60, 50)})
    timed = bd.ShardedTree.from_frame(frame, "start", "minutes", shards=3, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "minutes")
    for method in ("linear", "lower", "midpoint", "closest_observation"):
        kw = {"of": "y", "method": method}
        stats = timed.stats_boxes(boxes, "t0", "t1", None, None, **kw)
        pd.testing.assert_frame_equal(stats, local.stats_boxes(boxes, "t0", "t1", None, None, **kw))
    instants = points["minutes"].dt.tz_convert("UTC").dt.tz_localize(None)
    ticks = instants.astype("datetime64[ns]").to_numpy().view(np.int64)  # as Timestamp.value
    stats = timed.stats_boxes(boxes, "t0", "t1", None, None, method="lower", quantiles=QUANTILES)
    for (_, row), (a, b) in zip(stats.iterrows(), boxes[["t0", "t1"]].to_numpy()):
        inside = ticks[(points["start"] >= a) & (points["start"] <= b)]
        # Reference: numpy.quantile of the ticks (a picking method keeps them int64).
        want = np.quantile(inside, QUANTILES, method="lower") if inside.size else None
        got = [row[f"q{q:g}"] for q in QUANTILES]
        if want is None:
            assert pd.isna(got).all()
        else:
            assert [g.value for g in got] == want.tolist()
            assert got[0].tz is not None and str(got[0].tz) == "America/Chicago"
    # int64 at both ends, with open upper edges past the largest int64 (the search's
    # edge moved above a value must not step past the end of int64).
    ends = bd.ShardedTree.from_frame(frame, "start", "level", shards=3, client=client)
    local = boxwood.RangeTree.from_frame(points, "start", "level")
    values = points["level"].to_numpy()
    for inclusive in INCLUSIVE:
        wide = boxes.assign(m0=-np.inf, m1=np.inf)
        masks = [
            _between(points["start"], a, b, inclusive) for a, b in wide[["t0", "t1"]].to_numpy()
        ]
        for method in ("lower", "higher", "nearest", "inverted_cdf"):
            kw = {"inclusive": inclusive, "method": method, "quantiles": QUANTILES}
            stats = ends.stats_boxes(wide, "t0", "t1", "m0", "m1", **kw)
            pd.testing.assert_frame_equal(
                stats, local.stats_boxes(wide, "t0", "t1", "m0", "m1", **kw)
            )
            _check_stats_against_numpy(stats, values, masks, method)


def test_keyed_sharded_stats_as_one_keyed_tree_and_numpy(client):
    rng = np.random.default_rng(79)
    points = _points(rng, n=2500)
    frame = dd.from_pandas(points, npartitions=4, sort=False)
    points = frame.compute()
    sharded = bd.ShardedTree.from_frame(
        frame, "start", "minutes", "fare", shards=5, by="bike", client=client
    )
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", by="bike")
    boxes = _boxes(rng, 70, x_span=300)
    boxes["bike"] = rng.choice(["dock", "ebike", "cargo", "tandem"], len(boxes))
    for of, column in (("x", "start"), ("y", "minutes")):
        kw = {"of": of, "by": "bike", "quantiles": QUANTILES, "inclusive": "right"}
        stats = sharded.stats_boxes(boxes, *BOUNDS, **kw)
        pd.testing.assert_frame_equal(stats, tree.stats_boxes(boxes, *BOUNDS, **kw))
        masks = [
            m & (points["bike"] == key).to_numpy()
            for m, key in zip(_masks(points, boxes, "right"), boxes["bike"])
        ]
        _check_stats_against_numpy(stats, points[column].to_numpy(), masks, "linear")
        assert stats["count"][boxes["bike"] == "tandem"].eq(0).all()
    with pytest.raises(ValueError, match="every box needs its key"):
        sharded.stats_boxes(boxes, *BOUNDS)


def test_sharded_stats_refuse_bad_arguments(client):
    points = pd.DataFrame({"start": [1.0, 2.0, 3.0], "minutes": [1, 2, 3]})
    sharded = bd.ShardedTree.from_frame(
        dd.from_pandas(points, npartitions=1), "start", "minutes", client=client
    )
    boxes = pd.DataFrame({"x_lo": [0], "x_hi": [5], "y_lo": [0], "y_hi": [5]})
    with pytest.raises(ValueError, match="of must be 'x' or 'y'"):
        sharded.stats_boxes(boxes, of="z")
    with pytest.raises(ValueError, match="method must be one of"):
        sharded.stats_boxes(boxes, method="median")
    with pytest.raises(ValueError, match=r"q must be in the range \[0, 1\]"):
        sharded.stats_boxes(boxes, quantiles=[1.5])
    with pytest.raises(ValueError, match="built without keys"):
        sharded.stats_boxes(boxes, by="bike")
    with pytest.raises(TypeError, match="boxes must be a pandas or a Dask DataFrame"):
        sharded.stats_boxes(boxes.to_numpy())
    stats = sharded.stats_boxes(boxes, quantiles=())
    assert stats.columns.tolist() == ["count", "min", "max"] and stats["max"].tolist() == [3]
