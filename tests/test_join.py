"""box_join and box_join_chunks against DuckDB's SQL inequality join on the same frames.

DuckDB is used as a general-purpose reference: the same points and boxes are registered as
tables and joined with ``p.x >= b.x_lo AND p.x <= b.x_hi AND ...`` (strict comparisons where
``inclusive`` opens a side). Column contents are checked against pandas' own ``iloc``.
"""

from __future__ import annotations

import doctest
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

import boxwood
import boxwood._join
from _optional import require

duckdb = require("duckdb")

INCLUSIVE = ("both", "neither", "left", "right")
BOUNDS = {"x_lo": "x_lo", "x_hi": "x_hi", "y_lo": "y_lo", "y_hi": "y_hi"}


def duckdb_pairs(points, boxes, x, y, inclusive, bounds=BOUNDS) -> list[tuple[int, int]]:
    """(box id, trip id) of every match, from DuckDB's SQL join (the reference)."""
    lo = ">=" if inclusive in ("both", "left") else ">"
    hi = "<=" if inclusive in ("both", "right") else "<"
    con = duckdb.connect()
    con.register("p", points)
    con.register("b", boxes)
    rows = con.execute(
        f'SELECT b.box_id, p.trip_id FROM b JOIN p ON p."{x}" {lo} b."{bounds["x_lo"]}" '
        f'AND p."{x}" {hi} b."{bounds["x_hi"]}" AND p."{y}" {lo} b."{bounds["y_lo"]}" '
        f'AND p."{y}" {hi} b."{bounds["y_hi"]}" ORDER BY b.box_id, p.trip_id'
    ).fetchall()
    con.close()
    return [(int(b), int(t)) for b, t in rows]


def pairs_of(joined: pd.DataFrame) -> list[tuple[int, int]]:
    return sorted(zip(joined["box_id"].tolist(), joined["trip_id"].tolist()))


def larkhaven(rng, n=400, m=60, kind="float"):
    """Invented bike-share trips (points) and query boxes, with many ties on box edges."""
    if kind == "float":
        x = rng.integers(0, 40, n) * 0.5
        y = rng.normal(10, 4, n).round(1)
        x_lo = rng.integers(0, 40, m) * 0.5
        x_hi = x_lo + rng.integers(0, 20, m) * 0.5
        y_lo = rng.normal(8, 4, m).round(1)
        y_hi = y_lo + rng.integers(0, 60, m) / 10
    elif kind == "int":
        x = rng.integers(-20, 20, n)
        y = rng.integers(0, 15, n)
        x_lo = rng.integers(-25, 20, m)
        x_hi = x_lo + rng.integers(-2, 15, m)  # a few inverted (empty) boxes
        y_lo = rng.integers(0, 15, m)
        y_hi = y_lo + rng.integers(0, 6, m)
    else:  # tz-aware pick-up times against bounds in another zone, rides in seconds
        base = pd.Timestamp("2025-03-30 00:00", tz="Europe/Berlin")
        x = base + pd.to_timedelta(rng.integers(0, 48, n) * 1800, unit="s")
        y = rng.integers(60, 3600, n)
        x_lo = (base + pd.to_timedelta(rng.integers(0, 48, m) * 1800, unit="s")).tz_convert(
            "America/New_York"
        )
        x_hi = x_lo + pd.to_timedelta(rng.integers(0, 12, m) * 1800, unit="s")
        y_lo = rng.integers(0, 1800, m)
        y_hi = y_lo + rng.integers(0, 2400, m)
    points = pd.DataFrame(
        {
            "trip_id": np.arange(n) + 5000,
            "start": x,
            "minutes": y,
            "bike": pd.Categorical(rng.choice(["dock", "ebike", "cargo"], n)),
            "fare": rng.integers(100, 900, n),
        },
        index=pd.Index(rng.permutation(n) * 3, name="trip_key"),
    )
    boxes = pd.DataFrame(
        {
            "box_id": np.arange(m),
            "x_lo": x_lo,
            "x_hi": x_hi,
            "y_lo": y_lo,
            "y_hi": y_hi,
            "zone": pd.Categorical(rng.choice(["harbour", "old town", "uplands"], m)),
            "fare": rng.integers(0, 5, m),  # clashes with the points' fare
        },
        index=[f"q{i % 7}" for i in range(m)],  # duplicate labels
    )
    return points, boxes


def join_kwargs(**extra):
    return {"x": "start", "y": "minutes", **extra}


# ------------------------------------------------------------------------- against DuckDB


@pytest.mark.parametrize("kind", ["float", "int", "tz"])
@pytest.mark.parametrize("inclusive", INCLUSIVE)
def test_box_join_matches_duckdb(kind, inclusive):
    points, boxes = larkhaven(np.random.default_rng(21), kind=kind)
    joined = boxwood.box_join(points, boxes, **join_kwargs(inclusive=inclusive))
    reference = duckdb_pairs(points, boxes, "start", "minutes", inclusive)  # DuckDB
    assert len(reference) > 0
    assert pairs_of(joined) == reference
    # Box order, then points' order within a box.
    assert list(zip(joined["box_id"], joined["trip_id"])) == reference


@pytest.mark.parametrize("kind", ["float", "int", "tz"])
@pytest.mark.parametrize("max_rows", [1, 5, 97, 10**6])
def test_chunks_match_duckdb_and_the_whole_join(kind, max_rows):
    points, boxes = larkhaven(np.random.default_rng(22), kind=kind)
    whole = boxwood.box_join(points, boxes, **join_kwargs())
    chunks = list(boxwood.box_join_chunks(points, boxes, **join_kwargs(max_rows=max_rows)))
    assert all(0 < len(c) <= max_rows for c in chunks)
    together = pd.concat(chunks)
    assert together.index.equals(pd.RangeIndex(len(whole)))
    assert pairs_of(together) == duckdb_pairs(points, boxes, "start", "minutes", "both")
    key = ["box_id", "trip_id"]
    pd.testing.assert_frame_equal(
        together.sort_values(key).reset_index(drop=True),
        whole.sort_values(key).reset_index(drop=True),
    )


@pytest.mark.parametrize("inclusive", INCLUSIVE)
def test_boxes_larger_than_a_chunk_are_cut_exactly(inclusive):
    rng = np.random.default_rng(23)
    points, boxes = larkhaven(rng, n=600, m=8, kind="int")
    # Pile-ups: many points on one x value, and on one exact (x, y) position.
    points.iloc[:120, points.columns.get_loc("start")] = 3
    points.iloc[:50, points.columns.get_loc("minutes")] = 7
    boxes.iloc[0, 1:5] = [-100, 100, -100, 100]  # every point
    boxes.iloc[1, 1:5] = [3, 3, 7, 7]  # the exact pile-up
    boxes.iloc[2, 1:5] = [3, 10, 0, 15]
    reference = duckdb_pairs(points, boxes, "start", "minutes", inclusive)  # DuckDB
    for max_rows in (1, 10, 49, 51, 200):
        chunks = list(
            boxwood.box_join_chunks(
                points, boxes, **join_kwargs(inclusive=inclusive, max_rows=max_rows)
            )
        )
        assert all(len(c) <= max_rows for c in chunks)
        assert pairs_of(pd.concat(chunks)) == reference


# ------------------------------------------------------------------------- columns


def test_columns_are_carried_with_dtypes_and_suffixes():
    points, boxes = larkhaven(np.random.default_rng(24))
    joined = boxwood.box_join(points, boxes, **join_kwargs())
    assert list(joined.columns) == [
        "trip_id", "start", "minutes", "bike", "fare_point",
        "box_id", "x_lo", "x_hi", "y_lo", "y_hi", "zone", "fare_box",
    ]  # fmt: skip
    assert joined["bike"].dtype == points["bike"].dtype  # same categories, same order
    assert joined["zone"].dtype == boxes["zone"].dtype
    # Reference: pandas' own row selection of the matched rows.
    by_trip = points.set_index("trip_id")
    by_box = boxes.set_index("box_id")
    assert joined["fare_point"].tolist() == by_trip.loc[joined["trip_id"], "fare"].tolist()
    assert joined["fare_box"].tolist() == by_box.loc[joined["box_id"], "fare"].tolist()
    assert joined["bike"].tolist() == by_trip.loc[joined["trip_id"], "bike"].tolist()
    assert joined["zone"].tolist() == by_box.loc[joined["box_id"], "zone"].tolist()
    assert joined.index.equals(pd.RangeIndex(len(joined)))

    other = boxwood.box_join(points, boxes, **join_kwargs(suffixes=("", "_zone")))
    assert {"fare", "fare_zone"} <= set(other.columns)
    kept = boxwood.box_join(points, boxes, **join_kwargs(suffixes=(None, "_b")))
    assert "fare" in kept.columns and "fare_b" in kept.columns
    with pytest.raises(ValueError, match="repeated columns 'fare'"):
        boxwood.box_join(points, boxes, **join_kwargs(suffixes=(None, None)))
    with pytest.raises(ValueError, match="suffixes must be a pair"):
        boxwood.box_join(points, boxes, **join_kwargs(suffixes="_p"))


def test_keep_index_carries_both_indexes():
    points, boxes = larkhaven(np.random.default_rng(25))
    joined = boxwood.box_join(points, boxes, **join_kwargs(keep_index=True))
    assert list(joined.columns[:2]) == ["trip_key", "trip_id"]  # the named index first
    assert "index" in joined.columns  # the boxes' unnamed index, as reset_index names it
    # Reference: pandas' own lookups of the carried labels.
    assert joined["trip_key"].tolist() == points.index[joined["trip_id"] - 5000].tolist()
    assert joined["index"].tolist() == boxes.index[joined["box_id"]].tolist()
    boxes.index.name = "trip_key"  # a clash between the two indexes: suffixed like columns
    clash = boxwood.box_join(points, boxes, **join_kwargs(keep_index=True))
    assert {"trip_key_point", "trip_key_box"} <= set(clash.columns)
    points.index.name = "start"
    with pytest.raises(ValueError, match="points index cannot become a column"):
        boxwood.box_join(points, boxes, **join_kwargs(keep_index=True))


# ------------------------------------------------------------------------- sizes and trees


def test_empty_frames_one_row_frames_and_no_matches():
    points, boxes = larkhaven(np.random.default_rng(26))
    whole = boxwood.box_join(points, boxes, **join_kwargs())
    no_points, no_boxes = points.iloc[:0], boxes.iloc[:0]
    for p, b in ((no_points, boxes), (points, no_boxes), (no_points, no_boxes)):
        empty = boxwood.box_join(p, b, **join_kwargs())
        assert empty.empty and list(empty.columns) == list(whole.columns)
        assert (empty.dtypes == whole.dtypes).all()
        chunks = list(boxwood.box_join_chunks(p, b, **join_kwargs(max_rows=3)))
        assert len(chunks) == 1 and chunks[0].empty
        assert list(chunks[0].columns) == list(whole.columns)
    one_point, one_box = points.iloc[[5]], boxes.iloc[[0]].copy()
    one_box[["x_lo", "x_hi", "y_lo", "y_hi"]] = [
        [one_point["start"].iloc[0], one_point["start"].iloc[0], -np.inf, np.inf]
    ]
    joined = boxwood.box_join(one_point, one_box, **join_kwargs())
    assert pairs_of(joined) == duckdb_pairs(one_point, one_box, "start", "minutes", "both")
    assert len(joined) == 1
    assert len(boxwood.box_join(one_point, one_box, **join_kwargs(inclusive="left"))) == 0


def test_a_tree_is_reused_and_checked():
    points, boxes = larkhaven(np.random.default_rng(27))
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes")
    with_tree = boxwood.box_join(points, boxes, **join_kwargs(tree=tree))
    pd.testing.assert_frame_equal(with_tree, boxwood.box_join(points, boxes, **join_kwargs()))
    with pytest.raises(ValueError, match="tree was built from 400 rows but points has 399"):
        boxwood.box_join(points.iloc[1:], boxes, **join_kwargs(tree=tree))


def test_points_with_missing_coordinates_are_dropped_or_refused():
    points, boxes = larkhaven(np.random.default_rng(28))
    points["start"] = points["start"].astype("Float64")
    points.iloc[::9, points.columns.get_loc("start")] = pd.NA
    with pytest.raises(ValueError, match="x column 'start' has a missing value"):
        boxwood.box_join(points, boxes, **join_kwargs())
    with pytest.warns(boxwood.MissingValuesDropped, match="dropped 45 of 400"):
        joined = boxwood.box_join(points, boxes, **join_kwargs(on_missing="drop"))
    # DuckDB reads NA as NULL, and NULL never satisfies a comparison.
    assert pairs_of(joined) == duckdb_pairs(points, boxes, "start", "minutes", "both")
    with pytest.warns(boxwood.MissingValuesDropped):
        tree = boxwood.RangeTree.from_frame(points, "start", "minutes", on_missing="drop")
    chunks = boxwood.box_join_chunks(points, boxes, **join_kwargs(tree=tree, max_rows=7))
    assert pairs_of(pd.concat(list(chunks))) == pairs_of(joined)


def test_drop_warnings_point_at_the_callers_own_line():
    # A warning reported at sys:1 would be shown only once by Python's default filter.
    points, boxes = larkhaven(np.random.default_rng(30))
    points.iloc[::9, points.columns.get_loc("start")] = np.nan
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        first_line = sys._getframe().f_lineno + 1
        boxwood.box_join(points, boxes, **join_kwargs(on_missing="drop"))
        boxwood.box_join_chunks(points, boxes, **join_kwargs(on_missing="drop"))
        boxes.boxwood.join(points, **join_kwargs(on_missing="drop"))
    assert [w.category for w in caught] == [boxwood.MissingValuesDropped] * 3
    assert [w.filename for w in caught] == [__file__] * 3
    assert [w.lineno for w in caught] == [first_line, first_line + 1, first_line + 2]


def test_bad_join_arguments():
    points, boxes = larkhaven(np.random.default_rng(29))
    with pytest.raises(ValueError, match="max_rows must be a positive integer"):
        boxwood.box_join_chunks(points, boxes, **join_kwargs(max_rows=0))
    with pytest.raises(boxwood.MissingColumnError, match="y='mins'"):
        boxwood.box_join(points, boxes, x="start", y="mins")
    with pytest.raises(boxwood.MissingColumnError, match="x_lo='from'"):
        boxwood.box_join(points, boxes, **join_kwargs(x_lo="from"))
    boxes.iloc[3, boxes.columns.get_loc("y_hi")] = np.nan
    with pytest.raises(ValueError, match="y_hi bound column 'y_hi' .* row 'q3'"):
        boxwood.box_join_chunks(points, boxes, **join_kwargs())  # checked before any chunk
    with pytest.raises(TypeError, match="boxes must be a pandas DataFrame"):
        boxwood.box_join(points, boxes.to_dict(), **join_kwargs())


def test_join_docstring_examples():
    result = doctest.testmod(boxwood._join, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
