"""pandas in and out: RangeTree.from_frame, count/sum/report_boxes and DataFrame.boxwood.

The reference for every count, sum and row set here is pandas itself: boolean masks built
with pandas' own comparison operators on the same columns (tz-aware columns compare as
instants in pandas, as they should in boxwood).
"""

from __future__ import annotations

import doctest
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import boxwood
import boxwood._accessor
import boxwood._frames
from _optional import require

INCLUSIVE = ("both", "neither", "left", "right")


def _between(values: pd.Series, lo, hi, inclusive: str) -> np.ndarray:
    # Reference: pandas' own comparison operators (Series.between has the same convention).
    lo_ok = values >= lo if inclusive in ("both", "left") else values > lo
    hi_ok = values <= hi if inclusive in ("both", "right") else values < hi
    return np.asarray(lo_ok & hi_ok, dtype=bool)


def _masks(points, boxes, x, y, bounds, inclusive):
    """One boolean mask over the points per box, from pandas comparisons."""
    x_lo, x_hi, y_lo, y_hi = bounds
    for i in range(len(boxes)):
        box = boxes.iloc[i]
        yield (
            _between(points[x], box[x_lo], box[x_hi], inclusive)
            & _between(points[y], box[y_lo], box[y_hi], inclusive)
        )


def _random_frames(rng, n=300, m=40, index=None):
    points = pd.DataFrame(
        {
            "start": rng.integers(0, 60, n).astype(np.float64),
            "minutes": rng.integers(0, 40, n),
            "fare": rng.integers(100, 2000, n),
        }
    )
    lo_t = rng.integers(-5, 60, m)
    lo_m = rng.integers(-5, 40, m)
    boxes = pd.DataFrame(
        {
            "t0": lo_t,
            "t1": lo_t + rng.integers(0, 30, m),
            "m0": lo_m,
            "m1": lo_m + rng.integers(0, 20, m),
        },
        index=index,
    )
    return points, boxes


BOUNDS = ("t0", "t1", "m0", "m1")


# ------------------------------------------------------------------------- alignment


@pytest.mark.parametrize("inclusive", INCLUSIVE)
@pytest.mark.parametrize("layout", ["fast", "compact"])
def test_counts_sums_and_rows_match_pandas_masks(inclusive, layout):
    rng = np.random.default_rng(11)
    points, boxes = _random_frames(rng)
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes", "fare", layout=layout)
    counts = tree.count_boxes(boxes, *BOUNDS, inclusive=inclusive)
    sums = tree.sum_boxes(boxes, *BOUNDS, inclusive=inclusive)
    report = tree.report_boxes(boxes, *BOUNDS, inclusive=inclusive)
    masks = list(_masks(points, boxes, "start", "minutes", BOUNDS, inclusive))
    assert counts.index.equals(boxes.index) and sums.index.equals(boxes.index)
    assert counts.name == "count" and counts.dtype == np.int64
    assert counts.tolist() == [int(mk.sum()) for mk in masks]
    assert sums.tolist() == [int(points["fare"][mk].sum()) for mk in masks]
    expected = [(boxes.index[i], r) for i, mk in enumerate(masks) for r in np.flatnonzero(mk)]
    assert list(zip(report["box"], report["row"])) == expected


def test_non_default_and_duplicate_index_labels_keep_their_order():
    rng = np.random.default_rng(12)
    labels = ["b", "a", "b", "c", "a", "z", "b", "y"] * 5
    points, boxes = _random_frames(rng, m=len(labels), index=labels)
    points.index = pd.Index(rng.permutation(len(points)) * 10 + 7, name="trip")
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes")
    counts = tree.count_boxes(boxes, *BOUNDS)
    assert list(counts.index) == labels
    masks = list(_masks(points, boxes, "start", "minutes", BOUNDS, "both"))
    assert counts.to_numpy().tolist() == [int(mk.sum()) for mk in masks]
    # Reference: pandas aligns on labels, so an aligned result can sit beside its boxes.
    together = boxes.assign(n=counts.to_numpy())
    assert together["n"].tolist() == counts.tolist()
    report = tree.report_boxes(boxes, *BOUNDS)
    assert report["box"].tolist() == [
        labels[i] for i, mk in enumerate(masks) for _ in range(int(mk.sum()))
    ]


def test_constant_and_open_bounds():
    rng = np.random.default_rng(13)
    points, boxes = _random_frames(rng)
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes")
    counts = tree.count_boxes(boxes, "t0", "t1", None, 20)
    expected = [
        int((_between(points["start"], lo, hi, "both") & (points["minutes"] <= 20)).sum())
        for lo, hi in zip(boxes["t0"], boxes["t1"])
    ]
    assert counts.tolist() == expected
    every = tree.count_boxes(boxes, None, None, None, None)
    assert every.tolist() == [len(points)] * len(boxes)


def test_default_bound_column_names_and_float_sums():
    rng = np.random.default_rng(14)
    points = pd.DataFrame({"x": rng.normal(size=200), "y": rng.normal(size=200)})
    points["w"] = rng.random(200)
    boxes = pd.DataFrame(
        {"x_lo": [-1.0, 0.0], "x_hi": [1.0, 2.0], "y_lo": [-1.0, -2.0], "y_hi": [0.5, 0.0]}
    )
    tree = boxwood.RangeTree.from_frame(points, "x", "y", weights="w")
    masks = list(_masks(points, boxes, "x", "y", ("x_lo", "x_hi", "y_lo", "y_hi"), "both"))
    sums = tree.sum_boxes(boxes)
    for got, mk in zip(sums, masks):
        # Reference: pandas' Series.sum of the masked weights (summation orders differ).
        assert got == pytest.approx(points["w"][mk].sum(), rel=1e-12, abs=1e-12)
    assert tree.count_boxes(boxes).tolist() == [int(mk.sum()) for mk in masks]


# ------------------------------------------------------------------------- time columns


def test_tz_aware_columns_compare_as_instants():
    rng = np.random.default_rng(15)
    base = pd.Timestamp("2025-03-30 00:00", tz="Europe/Berlin")  # spans a DST change
    points = pd.DataFrame(
        {
            "picked_up": base + pd.to_timedelta(rng.integers(0, 86_400, 400), unit="s"),
            "ride": pd.to_timedelta(rng.integers(60, 3_600, 400), unit="s"),
        }
    )
    starts = pd.Timestamp("2025-03-29 18:00", tz="America/New_York") + pd.to_timedelta(
        rng.integers(0, 86_400, 30), unit="s"
    )
    boxes = pd.DataFrame(
        {
            "from": starts,
            "until": starts + pd.Timedelta(hours=3),
            "short": pd.to_timedelta(rng.integers(0, 1_800, 30), unit="s"),
            "long": pd.to_timedelta(rng.integers(1_800, 3_600, 30), unit="s"),
        }
    )
    tree = boxwood.RangeTree.from_frame(points, x="picked_up", y="ride")
    for inclusive in INCLUSIVE:
        got = tree.count_boxes(boxes, "from", "until", "short", "long", inclusive=inclusive)
        masks = _masks(
            points, boxes, "picked_up", "ride", ("from", "until", "short", "long"), inclusive
        )
        assert got.tolist() == [int(mk.sum()) for mk in masks]


def test_naive_bounds_on_a_tz_aware_column_name_the_column():
    points = pd.DataFrame(
        {"t": pd.date_range("2025-01-01", periods=5, freq="h", tz="UTC"), "v": range(5)}
    )
    boxes = pd.DataFrame(
        {"a": pd.date_range("2025-01-01", periods=2, freq="h"), "b": [0, 1], "c": [2, 3]}
    )
    tree = boxwood.RangeTree.from_frame(points, "t", "v")
    with pytest.raises(TypeError, match="x_lo column 'a'.*naive"):
        tree.count_boxes(boxes, "a", None, "b", "c")


# ------------------------------------------------------------------------- missing values


def test_missing_values_raise_naming_column_and_row_label():
    points = pd.DataFrame(
        {"x": [1.0, 2.0, np.nan, 4.0], "y": pd.array([1, None, 3, 4], dtype="Int64")},
        index=["r0", "r1", "r2", "r3"],
    )
    with pytest.raises(ValueError, match=r"x column 'x' .* row 'r2' \(position 2\)"):
        boxwood.RangeTree.from_frame(points, "x", "y")
    with pytest.raises(ValueError, match=r"y column 'y' .* row 'r1'"):
        boxwood.RangeTree.from_frame(points.fillna({"x": 0.0}), "x", "y")
    times = pd.DataFrame({"t": pd.to_datetime(["2025-01-01", None]), "v": [1, 2]})
    with pytest.raises(ValueError, match="x column 't' has a missing value"):
        boxwood.RangeTree.from_frame(times, "t", "v")


def test_on_missing_drop_reports_positions_in_the_original_frame():
    rng = np.random.default_rng(16)
    n = 200
    points = pd.DataFrame(
        {
            "x": pd.array(rng.integers(0, 50, n), dtype="Int64"),
            "y": rng.normal(size=n),
            "w": pd.array(rng.integers(0, 9, n), dtype="Int64"),
        },
        index=rng.permutation(n) + 1000,
    )
    points.loc[points.index[::7], "x"] = pd.NA
    points.loc[points.index[3::11], "y"] = np.nan
    points.loc[points.index[5::13], "w"] = pd.NA
    with pytest.warns(boxwood.MissingValuesDropped, match=r"dropped \d+ of 200 rows"):
        tree = boxwood.RangeTree.from_frame(points, "x", "y", "w", on_missing="drop")
    # Reference: pandas' dropna on the same columns.
    clean = points.dropna(subset=["x", "y", "w"])
    assert tree.rows_dropped == n - len(clean) > 0
    assert len(tree) == len(clean)
    source_rows = tree._parts.provenance.source_rows
    assert isinstance(source_rows, np.ndarray) and source_rows.dtype == np.int64
    boxes = pd.DataFrame({"x_lo": [0, 10, 20], "x_hi": [30, 40, 49], "y_lo": -1.0, "y_hi": 1.0})
    offsets, rows = tree.report(boxes["x_lo"], boxes["x_hi"], -1.0, 1.0, ordered=True)
    positions = {label: i for i, label in enumerate(points.index)}
    for i, (lo, hi) in enumerate(zip(boxes["x_lo"], boxes["x_hi"])):
        inside = clean[(clean["x"] >= lo) & (clean["x"] <= hi) & (clean["y"].abs() <= 1.0)]
        assert rows[offsets[i] : offsets[i + 1]].tolist() == sorted(
            positions[label] for label in inside.index
        )
        assert tree.sum_boxes(boxes).iloc[i] == int(inside["w"].sum())


def test_drop_warnings_point_at_the_callers_own_line():
    # A warning reported at sys:1 would be shown only once by Python's default filter.
    points = pd.DataFrame({"x": [1.0, np.nan, 3.0], "y": [1.0, 2.0, 3.0]})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        first_line = sys._getframe().f_lineno + 1
        boxwood.RangeTree.from_frame(points, "x", "y", on_missing="drop")
        points.boxwood.tree("x", "y", on_missing="drop")
    assert [w.category for w in caught] == [boxwood.MissingValuesDropped] * 2
    assert [w.filename for w in caught] == [__file__] * 2
    assert [w.lineno for w in caught] == [first_line, first_line + 1]


def test_nothing_dropped_keeps_no_position_map():
    points = pd.DataFrame({"x": [1.0, 2.0], "y": [3, 4]})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        tree = boxwood.RangeTree.from_frame(points, "x", "y", on_missing="drop")
    assert tree._parts.provenance.source_rows is None and tree.rows_dropped == 0
    assert boxwood.RangeTree([1.0], [2.0]).rows_dropped == 0


def test_missing_bound_names_the_column_and_the_box():
    tree = boxwood.RangeTree([1.0, 2.0], [1.0, 2.0])
    boxes = pd.DataFrame(
        {"a": [0.0, 1.0], "b": [5.0, np.nan], "c": [0.0, 0.0], "d": [9.0, 9.0]},
        index=["first", "second"],
    )
    with pytest.raises(ValueError, match=r"x_hi bound column 'b' .* row 'second'"):
        tree.count_boxes(boxes, "a", "b", "c", "d")
    with pytest.raises(ValueError, match="x_hi bound column 'b'"):
        tree.report_boxes(boxes, "a", "b", "c", "d")


def test_bad_arguments_raise_clear_errors():
    points = pd.DataFrame({"start": [1.0], "minutes": [2], "ok": [True]})
    with pytest.raises(boxwood.MissingColumnError, match="'strat'.*'start', 'minutes', 'ok'"):
        boxwood.RangeTree.from_frame(points, "strat", "minutes")
    with pytest.raises(KeyError):  # a MissingColumnError is a KeyError
        boxwood.RangeTree.from_frame(points, "start", "minutes", weights="fare")
    with pytest.raises(TypeError, match="x column 'ok' has unsupported dtype bool"):
        boxwood.RangeTree.from_frame(points, "ok", "minutes")
    with pytest.raises(ValueError, match="on_missing must be"):
        boxwood.RangeTree.from_frame(points, "start", "minutes", on_missing="skip")
    with pytest.raises(TypeError, match="must be a pandas DataFrame"):
        boxwood.RangeTree.from_frame({"start": [1.0]}, "start", "minutes")
    tree = boxwood.RangeTree.from_frame(points, "start", "minutes")
    with pytest.raises(boxwood.MissingColumnError, match="y_hi='m9'"):
        tree.count_boxes(pd.DataFrame({"x_lo": [0], "x_hi": [1], "y_lo": [0]}), y_hi="m9")
    with pytest.raises(ValueError, match="without weights"):
        tree.sum_boxes(pd.DataFrame({"x_lo": [0], "x_hi": [1], "y_lo": [0], "y_hi": [1]}))


# ------------------------------------------------------------------------- dtypes


def _arrow_and_nullable_frames():
    rng = np.random.default_rng(17)
    n = 120
    ints = rng.integers(-50, 50, n)
    floats = rng.normal(size=n)
    stamps = pd.Timestamp("2025-06-01") + pd.to_timedelta(rng.integers(0, 10**6, n), unit="s")
    plain = pd.DataFrame({"i": ints, "f": floats, "t": stamps})
    return plain, {
        "Int64/Float64": plain.astype({"i": "Int64", "f": "Float64"}),
        "arrow int/double/timestamp": plain.astype(
            {"i": "int64[pyarrow]", "f": "double[pyarrow]", "t": "timestamp[ns][pyarrow]"}
        ),
        "arrow int32/float/us": plain.astype(
            {"i": "int32[pyarrow]", "f": "float[pyarrow]", "t": "timestamp[us][pyarrow]"}
        ),
    }


@pytest.mark.parametrize(
    "name", ["Int64/Float64", "arrow int/double/timestamp", "arrow int32/float/us"]
)
def test_nullable_and_arrow_columns_count_like_numpy_ones(name):
    require("pyarrow")
    plain, frames = _arrow_and_nullable_frames()
    frame = frames[name]
    boxes = pd.DataFrame(
        {"a": [-20, 0, -60], "b": [20, 49, 60], "c": [-1.0, 0.0, -9.0], "d": [1.0, 0.5, 9.0]}
    )
    for x, y in (("i", "f"), ("t", "i"), ("f", "t")):
        tree = boxwood.RangeTree.from_frame(frame, x, y)
        reference = boxwood.RangeTree.from_frame(plain, x, y)
        assert tree.x_dtype.kind == reference.x_dtype.kind
        if x == "t" or y == "t":
            t0, t1 = pd.Timestamp("2025-06-03"), pd.Timestamp("2025-06-09")
            tb = boxes.assign(t0=t0, t1=t1)
            spec = ("t0", "t1", "a", "b") if x == "t" else ("c", "d", "t0", "t1")
        else:
            tb, spec = boxes, ("a", "b", "c", "d")
        got = tree.count_boxes(tb, *spec)
        masks = _masks(frame, tb, x, y, spec, "both")  # pandas compares the extension arrays
        assert got.tolist() == [int(mk.sum()) for mk in masks]


def test_arrow_and_nullable_missing_values_are_found():
    pa = require("pyarrow")
    doubles = pd.arrays.ArrowExtensionArray(pa.array([1.0, float("nan"), None, 4.0]))
    frame = pd.DataFrame({"x": doubles, "y": pd.array([1, 2, 3, 4], dtype="int64[pyarrow]")})
    with pytest.raises(ValueError, match=r"row 1 \(position 1\); 2 of 4"):
        boxwood.RangeTree.from_frame(frame, "x", "y")  # Arrow NaN is not null, but missing
    with pytest.warns(boxwood.MissingValuesDropped):
        tree = boxwood.RangeTree.from_frame(frame, "x", "y", on_missing="drop")
    assert tree.rows_dropped == 2
    assert tree.report(0, 9, 0, 9, ordered=True)[1].tolist() == [0, 3]


def test_arrow_tz_aware_timestamps_and_durations():
    require("pyarrow")
    rng = np.random.default_rng(18)
    stamps = pd.Timestamp("2025-10-26 00:30", tz="Europe/Berlin") + pd.to_timedelta(
        rng.integers(0, 7200, 80), unit="s"
    )
    rides = pd.to_timedelta(rng.integers(0, 900, 80), unit="s")
    frame = pd.DataFrame({"t": stamps, "d": rides}).astype(
        {"t": "timestamp[ns, tz=Europe/Berlin][pyarrow]", "d": "duration[ms][pyarrow]"}
    )
    tree = boxwood.RangeTree.from_frame(frame, "t", "d")
    assert str(tree._x.tz) == "Europe/Berlin"
    lo = pd.Timestamp("2025-10-26 00:00", tz="UTC")
    boxes = pd.DataFrame(
        {
            "a": [lo, lo + pd.Timedelta("30min")],
            "b": [lo + pd.Timedelta("1h")] * 2,
            "c": pd.to_timedelta([0, 100], unit="s"),
            "d": pd.to_timedelta([450, 900], unit="s"),
        }
    )
    got = tree.count_boxes(boxes, "a", "b", "c", "d")
    # Reference: pandas compares the original (numpy-backed) tz-aware columns as instants.
    plain = pd.DataFrame({"t": stamps, "d": rides})
    assert got.tolist() == [int(mk.sum()) for mk in _masks(plain, boxes, "t", "d", "abcd", "both")]


# ------------------------------------------------------------------------- sizes


def test_empty_and_one_row_frames():
    empty_points = pd.DataFrame(
        {"x": pd.Series([], dtype="float64"), "y": pd.Series([], dtype="int64")}
    )
    boxes = pd.DataFrame({"x_lo": [0.0], "x_hi": [1.0], "y_lo": [0], "y_hi": [1]}, index=["k"])
    tree = boxwood.RangeTree.from_frame(empty_points, "x", "y")
    assert tree.count_boxes(boxes).to_dict() == {"k": 0}
    assert tree.report_boxes(boxes).empty
    no_boxes = boxes.iloc[:0]
    one = boxwood.RangeTree.from_frame(pd.DataFrame({"x": [0.5], "y": [1]}), "x", "y")
    counts = one.count_boxes(no_boxes)
    assert counts.empty and counts.dtype == np.int64 and counts.index.equals(no_boxes.index)
    assert list(one.report_boxes(no_boxes).columns) == ["box", "row"]
    assert one.count_boxes(boxes).to_dict() == {"k": 1}
    assert one.count_boxes(boxes, inclusive="left").to_dict() == {"k": 0}  # y == y_hi


# ------------------------------------------------------------------------- the accessor


def test_accessor_matches_the_tree_methods():
    rng = np.random.default_rng(19)
    points, boxes = _random_frames(rng)
    tree = points.boxwood.tree(x="start", y="minutes", weights="fare")
    pd.testing.assert_series_equal(
        boxes.boxwood.count(tree, *BOUNDS), tree.count_boxes(boxes, *BOUNDS)
    )
    pd.testing.assert_series_equal(
        boxes.boxwood.sum(tree, *BOUNDS, inclusive="left"),
        tree.sum_boxes(boxes, *BOUNDS, inclusive="left"),
    )
    pd.testing.assert_frame_equal(
        boxes.boxwood.report(tree, *BOUNDS), tree.report_boxes(boxes, *BOUNDS)
    )
    joined = boxes.boxwood.join(
        points, x="start", y="minutes", x_lo="t0", x_hi="t1", y_lo="m0", y_hi="m1"
    )
    masks = _masks(points, boxes, "start", "minutes", BOUNDS, "both")
    assert len(joined) == sum(int(mk.sum()) for mk in masks)


def _run(code: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)


@pytest.mark.parametrize("first", ["boxwood", "pandas"])
def test_accessor_is_registered_whichever_is_imported_first(first):
    second = "pandas" if first == "boxwood" else "boxwood"
    result = _run(
        f"import {first}, {second}, sys\n"
        "frame = pandas.DataFrame({'x_lo': [0], 'x_hi': [1], 'y_lo': [0], 'y_hi': [1]})\n"
        "print(frame.boxwood.count(boxwood.RangeTree([0.5, 2.0], [0.5, 0.5])).tolist())\n"
    )
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "[1]"


def test_boxwood_imports_without_pandas_and_says_what_is_missing():
    result = _run(
        "import sys\n"
        "sys.modules['pandas'] = None  # as if pandas were not installed\n"
        "import boxwood\n"
        "print(boxwood.RangeTree([1.0, 2.0], [1, 2]).count(0, 3, 0, 3))\n"
        "try:\n"
        "    boxwood.RangeTree.from_frame(None, 'x', 'y')\n"
        "except ImportError as exc:\n"
        "    print(exc)\n"
    )
    assert result.returncode == 0, result.stderr
    count, message = result.stdout.strip().splitlines()
    assert count == "2" and "boxwood[pandas]" in message


def test_import_boxwood_does_not_import_pandas():
    result = _run("import sys, boxwood\nprint('pandas' in sys.modules)")
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "False"


# ------------------------------------------------------------------------- documentation


def _readme_pandas_code() -> str:
    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    start = text.index("## pandas")
    end = text.index("\n## ", text.index("## Grid counts"))  # the section after grid counts
    section = text[start:end]
    return "\n".join(re.findall(r"```python\n(.*?)```", section, flags=re.S))


def test_readme_pandas_and_grid_examples_run_as_written(capsys):
    namespace: dict = {}
    with pytest.warns(boxwood.MissingValuesDropped):
        exec(compile(_readme_pandas_code(), "README.md", "exec"), namespace)
    trips, windows, tree = namespace["trips"], namespace["windows"], namespace["tree"]
    bounds = ("from", "until", "shortest", "longest")
    masks = list(_masks(trips, windows, "picked_up", "minutes", bounds, "both"))  # pandas
    assert tree.count_boxes(windows, *bounds).tolist() == [int(mk.sum()) for mk in masks]
    assert len(namespace["matches"]) == sum(int(mk.sum()) for mk in masks)
    printed = capsys.readouterr().out.split()
    assert sum(map(int, printed)) == len(namespace["matches"])


def test_module_docstring_examples():
    for module in (boxwood._frames, boxwood._accessor):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.attempted > 0 and result.failed == 0, module.__name__
