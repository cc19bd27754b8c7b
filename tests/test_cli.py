"""The ``boxwood`` command line end to end, on temporary Parquet and CSV files.

Most runs call ``boxwood.cli.main(argv)`` in this process (fast); one runs the installed
console script in a subprocess. Every answer is checked against numpy boolean masks over the
same data the files were written from (NumPy as the outside reference), and every documented
exit code has a test that provokes it.
"""

from __future__ import annotations

import io
import json
import math
import os
import shutil
import subprocess
import sys
import time

import numpy as np
import pytest

from _optional import require

pa = require("pyarrow")
pq = require("pyarrow.parquet")
pacsv = require("pyarrow.csv")

from boxwood import cli  # noqa: E402
from boxwood.cli import _exits  # noqa: E402
from boxwood.cli._progress import Progress, run_with_activity  # noqa: E402

MONDAY = np.datetime64("2025-06-09T00:00:00", "s")
HOUR = np.timedelta64(3600, "s")
N_POINTS = 3_000
N_BOXES = 60


# --------------------------------------------------------------------------------------------
# Invented data: a week of Larkhaven trips on a coarse lattice, so box edges meet points
# --------------------------------------------------------------------------------------------


def make_points(rng: np.random.Generator, n: int = N_POINTS) -> dict[str, np.ndarray]:
    # Start times on whole quarter hours and lengths on half minutes: many ties, and box
    # bounds drawn from the same lattice land exactly on points.
    start = MONDAY + (rng.integers(0, 7 * 96, n) * 900).astype("timedelta64[s]")
    minutes = rng.integers(2, 120, n) / 2.0
    fare = 150 + 18 * np.ceil(minutes).astype(np.int64)
    bike = rng.integers(0, 400, n)
    label = np.array([f"trip-{i}" for i in range(n)])
    return {"start": start, "minutes": minutes, "fare": fare, "bike": bike, "label": label}


def make_boxes(rng: np.random.Generator, n: int = N_BOXES) -> dict[str, np.ndarray]:
    x_lo = MONDAY + (rng.integers(0, 6 * 96, n) * 900).astype("timedelta64[s]")
    x_hi = x_lo + (rng.integers(1, 12, n) * 3600).astype("timedelta64[s]")
    y_lo = rng.integers(0, 60, n) / 2.0
    y_hi = y_lo + rng.integers(0, 60, n) / 2.0
    label = np.array([f"box-{i}" for i in range(n)])
    return {"label": label, "x_lo": x_lo, "x_hi": x_hi, "y_lo": y_lo, "y_hi": y_hi}


def inside(points: dict, boxes: dict, i: int, inclusive: str) -> np.ndarray:
    """The numpy boolean mask of box ``i`` (the reference for every answer here)."""
    lo_closed = inclusive in ("both", "left")
    hi_closed = inclusive in ("both", "right")

    def between(v: np.ndarray, lo, hi) -> np.ndarray:
        above = v >= lo if lo_closed else v > lo
        below = v <= hi if hi_closed else v < hi
        return above & below

    return between(points["start"], boxes["x_lo"][i], boxes["x_hi"][i]) & between(
        points["minutes"], boxes["y_lo"][i], boxes["y_hi"][i]
    )


def write(path: str, columns: dict[str, np.ndarray]) -> str:
    table = pa.table(columns)
    if path.endswith(".parquet"):
        pq.write_table(table, path)
    else:
        pacsv.write_csv(table, path)
    return path


def read(path: str):
    return pq.read_table(path) if path.endswith(".parquet") else pacsv.read_csv(path)


@pytest.fixture
def data(tmp_path):
    rng = np.random.default_rng(20250609)
    points, boxes = make_points(rng), make_boxes(rng)
    paths = {
        "points.parquet": write(str(tmp_path / "points.parquet"), points),
        "points.csv": write(str(tmp_path / "points.csv"), points),
        "boxes.parquet": write(str(tmp_path / "boxes.parquet"), boxes),
        "boxes.csv": write(str(tmp_path / "boxes.csv"), boxes),
    }
    return points, boxes, paths, tmp_path


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


XY = ["--x", "start", "--y", "minutes"]


# --------------------------------------------------------------------------------------------
# Answers
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("inclusive", ["both", "neither", "left", "right"])
@pytest.mark.parametrize(("points_file", "boxes_file"), [("parquet", "csv"), ("csv", "parquet")])
def test_count_matches_numpy_masks(data, capsys, inclusive, points_file, boxes_file):
    points, boxes, paths, tmp = data
    out = str(tmp / f"counts.{boxes_file}")
    argv = ["count", paths[f"points.{points_file}"], paths[f"boxes.{boxes_file}"], *XY]
    code, _, err = run([*argv, "--inclusive", inclusive, "-o", out], capsys)
    assert code == 0, err
    result = read(out)
    # The boxes' own columns come back unchanged, the answer beside them.
    assert result.column_names == ["label", "x_lo", "x_hi", "y_lo", "y_hi", "count"]
    assert result.column("label").to_pylist() == boxes["label"].tolist()
    expected = [int(inside(points, boxes, i, inclusive).sum()) for i in range(N_BOXES)]
    assert result.column("count").to_pylist() == expected
    assert sum(expected) > 0


def test_sum_csv_points_to_csv_on_stdout(data, capsys):
    points, boxes, paths, _ = data
    argv = ["sum", paths["points.csv"], paths["boxes.csv"], *XY, "--weights", "fare"]
    code, out, err = run([*argv, "--column", "fares"], capsys)
    assert code == 0, err
    result = pacsv.read_csv(io.BytesIO(out.encode()))
    # Reference: numpy masks; fares are int64 cents, so sums are exact.
    expected = [int(points["fare"][inside(points, boxes, i, "both")].sum()) for i in range(N_BOXES)]
    assert result.column("fares").to_pylist() == expected
    assert result.column("y_hi").to_pylist() == boxes["y_hi"].tolist()


def test_join_matches_numpy_masks_and_carries_columns(data, capsys):
    points, boxes, paths, tmp = data
    out = str(tmp / "matches.parquet")
    argv = ["join", paths["points.parquet"], paths["boxes.csv"], *XY, "--inclusive", "left"]
    code, _, err = run([*argv, "-o", out], capsys)
    assert code == 0, err
    result = read(out)
    # "label" is in both files: suffixes tell the two apart.
    # Points first, then boxes, as boxwood.box_join has them.
    assert result.column_names == [
        "point_row",
        "start",
        "minutes",
        "fare",
        "bike",
        "label_point",
        "box_row",
        "label_box",
        "x_lo",
        "x_hi",
        "y_lo",
        "y_hi",
    ]
    box_row = result.column("box_row").to_numpy()
    point_row = result.column("point_row").to_numpy()
    expected = [
        (i, int(j))
        for i in range(N_BOXES)
        for j in np.flatnonzero(inside(points, boxes, i, "left"))
    ]
    assert list(zip(box_row.tolist(), point_row.tolist())) == expected
    assert result.column("label_point").to_pylist() == points["label"][point_row].tolist()
    assert result.column("label_box").to_pylist() == boxes["label"][box_row].tolist()
    assert result.column("fare").to_pylist() == points["fare"][point_row].tolist()


def test_join_has_box_joins_column_order_suffixes_and_rows(data, capsys):
    import pandas as pd

    import boxwood

    points, boxes, paths, tmp = data
    out = str(tmp / "matches.parquet")
    argv = ["join", paths["points.parquet"], paths["boxes.parquet"], *XY, "-o", out]
    code, _, err = run(argv, capsys)
    assert code == 0, err
    from_cli = read(out).to_pandas()
    library = boxwood.box_join(pd.DataFrame(points), pd.DataFrame(boxes), x="start", y="minutes")
    # The command line adds the matched rows' positions before each side's columns; all
    # else is box_join's frame: points' columns first, "_point" and "_box" on a clash,
    # rows in box order and by point row within a box.
    assert from_cli.columns[0] == "point_row"
    assert from_cli.columns[len(points) + 1] == "box_row"
    pd.testing.assert_frame_equal(
        from_cli.drop(columns=["point_row", "box_row"]), library, check_dtype=False
    )
    # Reference: numpy masks, box by box.
    expected = [
        (i, int(j))
        for i in range(N_BOXES)
        for j in np.flatnonzero(inside(points, boxes, i, "both"))
    ]
    assert list(zip(from_cli["box_row"], from_cli["point_row"])) == expected


def test_join_in_small_pieces_equals_join_in_one(data, capsys, monkeypatch):
    _, _, paths, tmp = data
    argv = ["join", paths["points.csv"], paths["boxes.parquet"], *XY, "--point-columns", "fare"]
    whole, pieces = str(tmp / "whole.csv"), str(tmp / "pieces.csv")
    assert run([*argv, "-o", whole], capsys)[0] == 0
    monkeypatch.setattr(cli._join, "JOIN_ROWS_PER_PIECE", 7)
    monkeypatch.setattr(cli._sources, "BOXES_PER_CALL", 5)
    assert run([*argv, "-o", pieces], capsys)[0] == 0
    assert read(whole).column_names[:2] == ["point_row", "fare"]
    assert read(whole).equals(read(pieces))
    assert read(whole).num_rows > 100


def test_join_pieces_cover_every_box_once():
    counts = np.array([0, 5, 3, 0, 9, 1, 1, 0])
    pieces = list(cli._join.join_pieces(counts, limit=6))
    assert [b for start, stop in pieces for b in range(start, stop)] == list(range(counts.size))
    for start, stop in pieces:
        # A piece exceeds the limit only when it is one box holding more than the limit.
        assert counts[start:stop].sum() <= 6 or stop - start == 1


def histogram_reference(points, x_edges, y_edges, weights=None):
    """numpy.histogram2d on the same data (times as int64 seconds)."""
    xs = points["start"].astype("datetime64[s]").view(np.int64)
    xe = np.asarray(x_edges).astype("datetime64[s]").view(np.int64)
    counts, _, _ = np.histogram2d(xs, points["minutes"], bins=[xe, y_edges], weights=weights)
    return counts


@pytest.mark.parametrize("source", ["points.parquet", "points.csv"])
def test_grid_of_equal_bins_matches_histogram2d(data, capsys, source):
    points, _, paths, tmp = data
    out = str(tmp / "grid.parquet")
    argv = ["grid", paths[source], *XY, "--x-bins", "7", "--y-bins", "9", "-o", out]
    code, _, err = run(argv, capsys)
    assert code == 0, err
    result = read(out)
    assert result.num_rows == 7 * 9
    x_edges = np.unique(np.concatenate([result["x_lo"].to_numpy(), result["x_hi"].to_numpy()]))
    y_edges = np.unique(np.concatenate([result["y_lo"].to_numpy(), result["y_hi"].to_numpy()]))
    # The data range is divided: the first and last edges are the data's extremes.
    assert x_edges[0] == points["start"].min() and x_edges[-1] == points["start"].max()
    assert y_edges[0] == points["minutes"].min() and y_edges[-1] == points["minutes"].max()
    counts = result["count"].to_numpy().reshape(7, 9)
    np.testing.assert_array_equal(counts, histogram_reference(points, x_edges, y_edges))
    assert counts.sum() == N_POINTS  # the last bins are closed: every point is counted


def test_grid_on_edge_aligned_edges_matches_histogram2d(data, capsys):
    points, _, paths, tmp = data
    # Edges on the points' own lattice: many points sit exactly on an edge.
    days = "2025-06-09,2025-06-10,2025-06-11T12:00,2025-06-13,2025-06-15T23:45"
    argv = ["grid", paths["points.parquet"], *XY, "--x-edges", days, "--y-edges", "1,10,10.5,30"]
    out = str(tmp / "grid.csv")
    code, _, err = run([*argv, "--sum", "--weights", "fare", "-o", out], capsys)
    assert code == 0, err
    x_edges = np.array(days.split(","), dtype="datetime64[s]")
    y_edges = np.array([1, 10, 10.5, 30])
    expected = histogram_reference(points, x_edges, y_edges, weights=points["fare"])
    result = read(out)
    np.testing.assert_array_equal(result["sum"].to_numpy().reshape(4, 3), expected)


def test_grid_prints_a_matrix_with_totals(data, capsys):
    points, _, paths, _ = data
    argv = ["grid", paths["points.csv"], *XY, "--x-bins", "3", "--y-edges", "0,20,61"]
    code, out, err = run(argv, capsys)
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0].split()[-1] == "total"
    totals = [int(line.split()[-1].replace(",", "")) for line in lines[1:4]]
    xs = points["start"].view(np.int64)
    reference, _ = np.histogram(xs, bins=3)  # NumPy: equal bins over the data range
    assert totals == reference.tolist()


@pytest.mark.parametrize(
    ("edges", "says"),
    [
        (["--x-edges", "1,2,3", "--y-bins", "2"], "--x-edges: '1' is a number"),
        (["--x-range", "1,2", "--x-bins", "2", "--y-bins", "2"], "--x-range: '1' is a number"),
        (["--x-edges", "2025,2026", "--y-bins", "2"], "'2025' is a number"),
        (["--x-bins", "2", "--y-edges", "2025-06-09,2025-06-10"], "'2025-06-09' is a time"),
        (["--x-bins", "2", "--y-edges", "0,15min"], "'15min' is a time"),
    ],
)
def test_grid_edges_of_the_wrong_kind_are_refused(data, capsys, edges, says):
    # numpy would read "1" as the year 1: a number is never taken for a time, nor the reverse.
    _, _, paths, tmp = data
    index = str(tmp / "trips.boxwood")
    assert run(["build", paths["points.parquet"], *XY, "-q", "-o", index], capsys)[0] == 0
    for source in ([index], [paths["points.csv"], *XY]):
        out = str(tmp / "grid.csv")
        code, stdout, err = run(["grid", *source, *edges, "-o", out], capsys)
        assert code == _exits.BAD_VALUES == 5
        line = one_line_error(err)
        assert says in line and "does not match axis" in line
        assert ("datetime64[" if "number" in says else "dtype float64") in line
        assert stdout == "" and not os.path.exists(out)


def test_grid_heatmap_png(data, capsys):
    require("matplotlib")
    _, _, paths, tmp = data
    png = str(tmp / "heat.png")
    argv = ["grid", paths["points.parquet"], *XY, "--x-bins", "14", "--y-bins", "10"]
    code, _, err = run([*argv, "--png", png, "-o", str(tmp / "g.csv")], capsys)
    assert code == 0, err
    with open(png, "rb") as f:
        assert f.read(8) == b"\x89PNG\r\n\x1a\n"
    assert os.path.getsize(png) > 5_000
    assert png in err


def test_heatmap_axes_are_labelled_by_column_even_from_an_index(data, capsys, monkeypatch):
    require("matplotlib")
    from matplotlib.figure import Figure

    _, _, paths, tmp = data
    drawn = []
    save = Figure.savefig

    def recording_savefig(figure, *args, **kwargs):
        axes = figure.axes[0]  # the heatmap; the colour bar comes second
        drawn.append((axes.get_xlabel(), axes.get_ylabel()))
        return save(figure, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", recording_savefig)
    index = str(tmp / "trips.boxwood")
    columns = ["--x", "minutes", "--y", "fare"]  # not the default names x and y
    assert run(["build", paths["points.parquet"], *columns, "-q", "-o", index], capsys)[0] == 0
    code, out, _ = run(["describe", index, "--json"], capsys)
    facts = json.loads(out)
    assert code == 0 and [facts["x_column"], facts["y_column"]] == ["minutes", "fare"]
    bins = ["--x-bins", "4", "--y-bins", "3", "-q"]
    for source in ([index], [paths["points.csv"], *columns]):
        png = str(tmp / "heat.png")
        assert run(["grid", *source, *bins, "--png", png], capsys)[0] == 0
    assert drawn == [("minutes", "fare"), ("minutes", "fare")]


def test_missing_values_dropped_or_refused(tmp_path, capsys):
    rng = np.random.default_rng(7)
    points = make_points(rng, 500)
    boxes = make_boxes(rng, 20)
    empty = rng.random(500) < 0.1  # empty CSV cells
    minutes_np = points["minutes"].copy()
    minutes_np[np.flatnonzero(~empty)[3]] = np.nan  # and one NaN
    table = pa.table({"start": points["start"], "minutes": pa.array(minutes_np, mask=empty)})
    minutes_np[empty] = np.nan
    path = str(tmp_path / "gaps.csv")
    pacsv.write_csv(table, path)
    boxes_path = write(str(tmp_path / "boxes.parquet"), boxes)
    out = str(tmp_path / "out.parquet")

    code, _, err = run(["count", path, boxes_path, *XY, "-o", out], capsys)
    assert code == _exits.BAD_VALUES
    first = int(np.flatnonzero(np.isnan(minutes_np))[0])
    assert err.strip() == (
        f"boxwood count: error: {path}: column 'minutes' has a missing value (empty, null, "
        f"NaN or NaT) at row {first} (0-based); pass --on-missing drop to skip such rows"
    )
    assert not os.path.exists(out)

    code, _, err = run(["count", path, boxes_path, *XY, "--on-missing", "drop", "-o", out], capsys)
    assert code == 0, err
    keep = ~np.isnan(minutes_np)
    assert f"dropped {int((~keep).sum()):,} of 500 rows" in err
    kept = {k: v[keep] for k, v in points.items()}
    kept["minutes"] = minutes_np[keep]
    expected = [int(inside(kept, boxes, i, "both").sum()) for i in range(20)]
    assert read(out).column("count").to_pylist() == expected

    # A join after dropping rows still names rows of the file itself, and so does an index
    # built with --on-missing drop.
    code, _, err = run(["join", path, boxes_path, *XY, "--on-missing", "drop", "-o", out], capsys)
    assert code == 0, err
    rows = read(out).column("point_row").to_numpy()
    assert keep[rows].all() and rows.size == sum(expected)
    in_file = {**points, "minutes": minutes_np}  # NaN compares false: dropped rows never match
    reference = [
        (i, int(j)) for i in range(20) for j in np.flatnonzero(inside(in_file, boxes, i, "both"))
    ]
    index = str(tmp_path / "gaps.boxwood")
    assert run(["build", path, *XY, "--on-missing", "drop", "-o", index], capsys)[0] == 0
    code, _, err = run(["join", index, boxes_path, "-o", out], capsys)
    assert code == 0, err
    result = read(out)
    pairs = list(zip(result["box_row"].to_pylist(), result["point_row"].to_pylist()))
    assert pairs == reference
    code, out_text, _ = run(["describe", index, "--json"], capsys)
    assert json.loads(out_text)["rows_dropped"] == int((~keep).sum())


def test_time_zones_compare_as_instants(tmp_path, capsys):
    # Points in UTC ("Z"), boxes in +02:00: the same instants either way.
    rng = np.random.default_rng(3)
    points, boxes = make_points(rng, 400), make_boxes(rng, 15)
    utc = pa.array(points["start"]).cast(pa.timestamp("s", tz="UTC"))
    pacsv.write_csv(pa.table({"start": utc, "minutes": points["minutes"]}), str(tmp_path / "p.csv"))
    with open(tmp_path / "p.csv") as f:
        assert "Z" in f.read(200)  # the file really holds zoned times
    zoned = {
        **boxes,
        "x_lo": pa.array(boxes["x_lo"])
        .cast(pa.timestamp("s", tz="UTC"))
        .cast(pa.timestamp("s", tz="+02:00")),
        "x_hi": pa.array(boxes["x_hi"])
        .cast(pa.timestamp("s", tz="UTC"))
        .cast(pa.timestamp("s", tz="+02:00")),
    }
    pq.write_table(pa.table(zoned), str(tmp_path / "b.parquet"))
    out = str(tmp_path / "c.csv")
    code, _, err = run(
        ["count", str(tmp_path / "p.csv"), str(tmp_path / "b.parquet"), *XY, "-o", out], capsys
    )
    assert code == 0, err
    expected = [int(inside(points, boxes, i, "both").sum()) for i in range(15)]
    assert read(out).column("count").to_pylist() == expected

    # A grid over the zoned axis: equal bins over the data range, as numpy.histogram2d
    # places them on the UTC ticks (NumPy reference).
    grid_out = str(tmp_path / "g.csv")
    argv = ["grid", str(tmp_path / "p.csv"), *XY, "--x-bins", "4", "--y-bins", "3"]
    assert run([*argv, "-o", grid_out], capsys)[0] == 0
    ticks = points["start"].astype("datetime64[s]").view(np.int64)
    expected_grid, _, _ = np.histogram2d(ticks, points["minutes"], bins=[4, 3])
    grid = read(grid_out)
    assert str(grid.schema.field("x_lo").type) == "timestamp[s, tz=UTC]"
    np.testing.assert_array_equal(grid["count"].to_numpy().reshape(4, 3), expected_grid)

    # Naive bounds against zoned points are refused, as pandas refuses the comparison.
    naive = write(str(tmp_path / "naive.parquet"), boxes)
    code, _, err = run(["count", str(tmp_path / "p.csv"), naive, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert "naive" in err and naive in err


def test_build_an_index_then_answer_from_it(data, capsys):
    points, boxes, paths, tmp = data
    index = str(tmp / "trips.boxwood")
    build = ["build", paths["points.csv"], *XY, "--weights", "fare", "--layout", "compact"]
    code, _, err = run([*build, "-o", index], capsys)
    assert code == 0, err
    assert f"wrote {index}: {N_POINTS:,} points" in err

    code, out, _ = run(["describe", index, "--json"], capsys)
    assert code == 0
    facts = json.loads(out)
    assert facts["rows"] == N_POINTS
    assert facts["levels"] == math.ceil(math.log2(N_POINTS + 1))  # height of a full binary tree
    assert facts["x_dtype"] == "datetime64[s]" and facts["y_dtype"] == "float64"
    assert [facts["x_column"], facts["y_column"]] == [XY[1], XY[3]]
    assert facts["weights_dtype"] == "int64" and facts["layout"] == "compact"
    assert facts["file_bytes"] == os.path.getsize(index)
    code, out, _ = run(["describe", index], capsys)
    assert code == 0 and f"rows           {N_POINTS:,}" in out

    # The index answers as the points file does.
    for command in (["count"], ["sum"], ["join"]):
        from_index, from_points = str(tmp / "i.parquet"), str(tmp / "p.parquet")
        assert run([*command, index, paths["boxes.csv"], "-o", from_index], capsys)[0] == 0
        weights = ["--weights", "fare"] if command == ["sum"] else []
        carry = ["--point-columns", "fare"] if command == ["join"] else []
        argv = [*command, paths["points.csv"], paths["boxes.csv"], *XY, *weights, *carry]
        assert run([*argv, "-o", from_points], capsys)[0] == 0
        expected = read(from_points)
        if command == ["join"]:
            expected = expected.drop_columns(["fare"])  # an index keeps no point columns
        assert read(from_index).equals(expected)
    counts = read(str(tmp / "i.parquet"))
    expected = [int(inside(points, boxes, i, "both").sum()) for i in range(N_BOXES)]
    assert np.bincount(counts["box_row"].to_numpy(), minlength=N_BOXES).tolist() == expected

    # Equal bins over an index: its data range is found from the tree alone.
    grids = []
    for source in ([index], [paths["points.csv"], *XY]):
        out = str(tmp / f"grid{len(grids)}.csv")
        assert run(["grid", *source, "--x-bins", "5", "--y-bins", "4", "-o", out], capsys)[0] == 0
        grids.append(read(out))
    assert grids[0].equals(grids[1])


def test_verify_checks_a_whole_index_file(data, capsys):
    """`boxwood verify` loads with a full verification: a good file is reported ok with what
    was checked; a file whose count cascade holds good checksums and counts but is not the
    one its bits give (which `describe` and counts take) is a bad file, exit code 3."""
    _, _, paths, tmp = data
    index = str(tmp / "to-verify.boxwood")
    argv = ["build", paths["points.parquet"], *XY, "--weights", "fare", "-q", "-o", index]
    assert run(argv, capsys)[0] == 0
    code, out, err = run(["verify", index], capsys)
    assert code == _exits.OK, err
    assert out.startswith(f"{index}: ok\n")
    assert "count path, cascade bits, row ids, weights" in out
    assert "format version 2" in out and f"{N_POINTS:,} rows" in out

    from boxwood import _boxwood
    from test_index_files import _swap_two_digits

    data_ = bytearray(open(index, "rb").read())
    _swap_two_digits(data_)
    crafted = str(tmp / "crafted.boxwood")
    with open(crafted, "wb") as f:
        f.write(_boxwood._rehash_for_tests(bytes(data_)))
    assert run(["describe", crafted], capsys)[0] == _exits.OK
    code, out, err = run(["verify", crafted], capsys)
    assert code == _exits.BAD_FILE and out == ""
    assert crafted in one_line_error(err) and "count cascade is not the one" in err


def test_index_errors(data, capsys):
    _, _, paths, tmp = data
    index = str(tmp / "plain.boxwood")
    assert run(["build", paths["points.parquet"], *XY, "-q", "-o", index], capsys)[0] == 0
    code, _, err = run(["sum", index, paths["boxes.csv"]], capsys)
    assert code == _exits.USAGE and "built without --weights" in err
    code, _, err = run(["count", index, paths["boxes.csv"], "--x", "start"], capsys)
    assert code == _exits.USAGE and "--x: options for a points file" in err
    code, _, err = run(["describe", paths["points.parquet"]], capsys)
    assert code == _exits.USAGE and "describe takes an index file" in err

    with open(index, "rb") as f:
        raw = f.read()
    damaged = {
        "truncated.boxwood": raw[: len(raw) // 2],
        "flipped.boxwood": raw[:4000] + bytes(b ^ 0xFF for b in raw[4000:4016]) + raw[4016:],
        "text.boxwood": b"start,minutes\n1,2\n",
    }
    for name, content in damaged.items():
        path = str(tmp / name)
        with open(path, "wb") as f:
            f.write(content)
        for argv in (["verify", path], ["count", path, paths["boxes.csv"]]):
            code, _, err = run(argv, capsys)
            assert code == _exits.BAD_FILE, (name, err)
            assert path in one_line_error(err)

    missing_dir = str(tmp / "nowhere" / "t.boxwood")
    code, _, err = run(["verify", paths["points.parquet"]], capsys)
    assert code == _exits.USAGE and "verify takes an index file" in err
    code, _, err = run(["build", paths["points.parquet"], *XY, "-o", missing_dir], capsys)
    assert code == _exits.CANNOT_WRITE and "does not exist" in one_line_error(err)


# --------------------------------------------------------------------------------------------
# Error exits: one line on stderr naming the file (and column), no traceback
# --------------------------------------------------------------------------------------------


def one_line_error(err: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def test_missing_column(data, capsys):
    _, _, paths, _ = data
    code, _, err = run(
        ["count", paths["points.parquet"], paths["boxes.csv"], "--x", "begin", "--y", "minutes"],
        capsys,
    )
    assert code == _exits.MISSING_COLUMN == 4
    line = one_line_error(err)
    assert paths["points.parquet"] in line and "'begin'" in line and "start" in line

    code, _, err = run(
        ["count", paths["points.parquet"], paths["boxes.csv"], *XY, "--y-hi", "top"], capsys
    )
    assert code == _exits.MISSING_COLUMN
    assert paths["boxes.csv"] in one_line_error(err) and "'top'" in err


@pytest.mark.parametrize(
    ("name", "content", "says"),
    [
        ("absent.csv", None, "no such file"),
        ("empty.csv", b"", "the file is empty"),
        ("empty.parquet", b"", "the file is empty"),
        ("blank.csv", b"\n\n", "Empty CSV file"),
        ("damaged.parquet", b"PAR1 this is not really parquet", "Parquet"),
        ("text.parquet", b"start,minutes\n1,2\n", "Parquet"),
    ],
)
def test_bad_file(data, capsys, name, content, says):
    _, _, paths, tmp = data
    bad = str(tmp / name)
    if content is not None:
        with open(bad, "wb") as f:
            f.write(content)
    code, _, err = run(["count", bad, paths["boxes.csv"], *XY], capsys)
    assert code == _exits.BAD_FILE == 3
    line = one_line_error(err)
    assert bad in line and says in line


def test_a_binary_file_named_csv_is_named_for_what_it_is(data, capsys):
    import gzip

    _, _, paths, tmp = data
    with open(paths["points.parquet"], "rb") as f:
        parquet = f.read()
    noise = np.random.default_rng(7).integers(0, 256, 3000, dtype=np.uint8).tobytes()
    cases = {
        "renamed.csv": (parquet, "looks like a Parquet file, not CSV; name it .parquet"),
        "renamed.csv.gz": (gzip.compress(parquet), "looks like a Parquet file, not CSV"),
        "packed.csv": (gzip.compress(b"start,minutes\n"), "looks gzip-compressed"),
        "noise.csv": (noise[:100] + b"\0" + noise, "not readable CSV: it holds binary data"),
    }
    for name, (content, says) in cases.items():
        bad = str(tmp / name)
        with open(bad, "wb") as f:
            f.write(content)
        for points, boxes in ((bad, paths["boxes.csv"]), (paths["points.csv"], bad)):
            code, _, err = run(["count", points, boxes, *XY], capsys)
            assert code == _exits.BAD_FILE == 3, err
            line = one_line_error(err)
            assert f"{bad}: {says}" in line and line.isprintable()


def test_a_ragged_csv_names_the_row_and_shows_no_raw_bytes(tmp_path, capsys):
    boxes = write(str(tmp_path / "boxes.csv"), make_boxes(np.random.default_rng(1), 3))
    path = str(tmp_path / "points.csv")
    bad_row = 150_000  # past pyarrow's first block, where it parses in threads
    with open(path, "wb") as f:
        f.write(b"start,minutes,fare\n")
        f.write(b"".join(b"2025-06-09 08:00:00,%d,3\n" % i for i in range(bad_row)))
        f.write(b"2025-06-09 08:00:00,\x01\x1b[31m\xff\n")  # two fields, one of them bytes
        f.write(b"2025-06-09 08:00:00,1,3\n" * 10)
    code, _, err = run(["count", path, boxes, *XY], capsys)
    assert code == _exits.BAD_FILE
    line = one_line_error(err)
    assert f"at row {bad_row} (0-based): Expected 3 columns, got 2" in line
    assert line.isprintable() and "\\x01\\x1b[31m" in line


def test_damaged_parquet_in_the_middle(data, capsys):
    _, _, paths, tmp = data
    with open(paths["points.parquet"], "rb") as f:
        raw = bytearray(f.read())
    raw[len(raw) // 3 : len(raw) // 3 + 64] = b"\xff" * 64  # break column data, keep footer
    damaged = str(tmp / "damaged.parquet")
    with open(damaged, "wb") as f:
        f.write(raw)
    code, _, err = run(["count", damaged, paths["boxes.csv"], *XY], capsys)
    # Either pyarrow notices (bad file) or the bytes still decode to numbers: never a crash.
    assert code in (0, _exits.BAD_FILE), err
    if code:
        assert damaged in one_line_error(err)


@pytest.mark.parametrize(
    ("column", "values", "says"),
    [
        ("minutes", ["short", "long"], "holds text (first value 'short')"),
        ("minutes", [True, False], "type bool"),
        ("minutes", np.array([1, 2], dtype=np.uint64), "cast it to int64"),
    ],
)
def test_wrong_dtype(tmp_path, capsys, column, values, says):
    start = np.array(["2025-06-09T08:00", "2025-06-09T09:00"], dtype="datetime64[s]")
    path = str(tmp_path / "points.parquet")
    pq.write_table(pa.table({"start": start, column: values}), path)
    boxes = write(str(tmp_path / "boxes.csv"), make_boxes(np.random.default_rng(1), 3))
    code, _, err = run(["count", path, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES == 5
    line = one_line_error(err)
    assert path in line and "'minutes'" in line and says in line


def test_text_among_numbers_names_the_row(tmp_path, capsys):
    path = str(tmp_path / "points.csv")
    with open(path, "w") as f:
        f.write("start,minutes\n")
        f.writelines(f"2025-06-09 08:{i % 60:02d}:00,{i}.5\n" for i in range(50))
        f.write("2025-06-09 09:00:00,n/a?\n")
    boxes = write(str(tmp_path / "boxes.csv"), make_boxes(np.random.default_rng(1), 3))
    code, _, err = run(["build", path, *XY, "-o", str(tmp_path / "t.boxwood")], capsys)
    assert code == _exits.BAD_VALUES
    assert "row 50 (0-based) is 'n/a?'" in one_line_error(err)
    code, _, err = run(["count", path, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES


def test_bad_box_bounds(data, capsys, tmp_path):
    points, boxes, paths, _ = data
    with_nan = dict(boxes)
    with_nan["y_lo"] = boxes["y_lo"].copy()
    with_nan["y_lo"][4] = np.nan
    path = write(str(tmp_path / "nan_boxes.csv"), with_nan)
    code, _, err = run(["count", paths["points.parquet"], path, *XY], capsys)
    assert code == _exits.BAD_VALUES
    line = one_line_error(err)
    assert path in line and "'y_lo'" in line and "row 4" in line

    numeric = dict(boxes)
    numeric["x_lo"] = np.arange(N_BOXES, dtype=np.float64)
    path = write(str(tmp_path / "numeric_boxes.parquet"), numeric)
    code, _, err = run(["count", paths["points.parquet"], path, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert path in one_line_error(err) and "x_lo" in err


def test_missing_output_directory_fails_before_work(data, capsys):
    _, _, paths, tmp = data
    out = str(tmp / "no" / "such" / "dir" / "counts.parquet")
    code, _, err = run(
        ["count", paths["points.parquet"], paths["boxes.csv"], *XY, "-o", out], capsys
    )
    assert code == _exits.CANNOT_WRITE == 6
    line = one_line_error(err)
    assert out in line and "does not exist" in line


def test_failed_run_leaves_no_partial_output(data, capsys, tmp_path):
    points, boxes, paths, _ = data
    numeric = dict(boxes)
    numeric["x_hi"] = np.arange(N_BOXES)
    bad_boxes = write(str(tmp_path / "bad_boxes.parquet"), numeric)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    argv = ["join", paths["points.parquet"], bad_boxes, *XY, "-o", str(out_dir / "m.parquet")]
    assert run(argv, capsys)[0] == _exits.BAD_VALUES
    assert os.listdir(out_dir) == []


@pytest.mark.parametrize(
    ("argv", "says"),
    [
        (["count", "{points}", "{boxes}"], "needs --x and --y"),
        (["sum", "{points}", "{boxes}", *XY], "sums need --weights"),
        (["count", "{points}", "{boxes}", *XY, "-o", "{tmp}/out.txt"], "out.txt"),
        (["count", "{points}", "{boxes}", *XY, "--column", "label"], "--column"),
        (["count", "{tmp}/points.json", "{boxes}", *XY], "cannot tell the file type"),
        (["build", "{points}", *XY, "-o", "{tmp}/index.bin"], "ends in .boxwood"),
        (["grid", "{points}", *XY, "--x-bins", "2", "--y-edges", "3,1"], "edges must increase"),
        (["grid", "{points}", *XY, "--x-edges", "2025-06-09,soon", "--y-bins", "2"], "ISO 8601"),
        (["grid", "{points}", *XY, "--x-bins", "0", "--y-bins", "2"], "at least 1"),
        (["count", "{points}"], "required"),
        (["frobnicate"], "invalid choice"),
    ],
)
def test_usage_errors(data, capsys, argv, says):
    _, _, paths, tmp = data
    filled = [
        a.format(points=paths["points.parquet"], boxes=paths["boxes.csv"], tmp=tmp) for a in argv
    ]
    code, _, err = run(filled, capsys)
    assert code == _exits.USAGE == 2
    assert says in err and "Traceback" not in err


def test_missing_pyarrow_names_the_extra(data, capsys, monkeypatch):
    _, _, paths, _ = data
    monkeypatch.setitem(sys.modules, "pyarrow.csv", None)  # import now raises ImportError
    code, _, err = run(["count", paths["points.parquet"], paths["boxes.csv"], *XY], capsys)
    assert code == _exits.MISSING_EXTRA == 7
    assert "pip install 'boxwood[parquet]'" in one_line_error(err)


def test_missing_matplotlib_names_the_extra(data, capsys, monkeypatch):
    _, _, paths, tmp = data
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    argv = ["grid", paths["points.parquet"], *XY, "--x-bins", "2", "--y-bins", "2"]
    code, out, err = run([*argv, "--png", str(tmp / "h.png")], capsys)
    assert code == _exits.MISSING_EXTRA
    assert "pip install 'boxwood[plot]'" in one_line_error(err)
    assert out == ""  # refused before any work


def test_a_build_too_big_for_memory(data, capsys, monkeypatch):
    import boxwood._memory

    _, _, paths, tmp = data
    monkeypatch.setattr(boxwood._memory, "available_bytes", lambda: 1_000)
    fast = ["--layout", "fast"]  # the hint to use the compact layout
    code, _, err = run(
        ["build", paths["points.csv"], *XY, *fast, "-o", str(tmp / "t.boxwood")], capsys
    )
    assert code == _exits.OUT_OF_MEMORY == 8
    line = one_line_error(err)
    assert "not enough memory" in line and "--layout compact" in line
    assert not os.path.exists(tmp / "t.boxwood")


def test_no_memory_check_builds_past_the_estimate(data, capsys, monkeypatch):
    import boxwood._memory

    points, boxes, paths, tmp = data
    monkeypatch.setattr(boxwood._memory, "available_bytes", lambda: 1_000)
    index = str(tmp / "t.boxwood")
    code, _, err = run(["build", paths["points.csv"], *XY, "-o", index], capsys)
    assert code == _exits.OUT_OF_MEMORY
    assert "--no-memory-check" in one_line_error(err)  # the refusal says how to override
    code, _, err = run(
        ["build", paths["points.csv"], *XY, "-o", index, "--no-memory-check"], capsys
    )
    assert code == 0, err
    out = str(tmp / "counts.csv")
    argv = ["count", paths["points.parquet"], paths["boxes.csv"], *XY, "-o", out]
    assert run(argv, capsys)[0] == _exits.OUT_OF_MEMORY
    code, _, err = run([*argv, "--no-memory-check"], capsys)
    assert code == 0, err
    # Reference: numpy masks.
    expected = [int(inside(points, boxes, i, "both").sum()) for i in range(N_BOXES)]
    assert read(out).column("count").to_pylist() == expected
    # An index file is not built, so the option has nothing to do there: a usage error.
    code, _, err = run(["count", index, paths["boxes.csv"], "-o", out, "--no-memory-check"], capsys)
    assert code == _exits.USAGE and "--no-memory-check" in one_line_error(err)


def test_the_default_build_is_compact_but_a_join_builds_fast(data, capsys, monkeypatch):
    _, _, paths, tmp = data
    index = str(tmp / "t.boxwood")
    assert run(["build", paths["points.parquet"], *XY, "-o", index], capsys)[0] == 0
    code, out, _ = run(["describe", index, "--json"], capsys)
    assert code == 0 and json.loads(out)["layout"] == "compact"
    # A tree built for one join is built as box_join builds its own: fast (reports of many
    # rows), unless --layout says otherwise.
    layouts = []
    real = cli._sources.build_parts

    def recording(*args, **kwargs):
        layouts.append(kwargs["layout"])
        return real(*args, **kwargs)

    monkeypatch.setattr(cli._sources, "build_parts", recording)
    join = ["join", paths["points.parquet"], paths["boxes.csv"], *XY, "-o", str(tmp / "j.csv")]
    count = ["count", paths["points.parquet"], paths["boxes.csv"], *XY, "-o", str(tmp / "c.csv")]
    for argv in (join, [*join, "--layout", "compact"], count):
        assert run(argv, capsys)[0] == 0
    assert layouts == ["fast", "compact", "compact"]


class ClosedPipe(io.StringIO):
    """A stream whose reader has gone, as stdout or stderr in `boxwood ... | head`."""

    def write(self, text: str) -> int:
        raise BrokenPipeError(32, "Broken pipe")


def test_a_closed_stdout_or_stderr_is_exit_6_without_a_traceback(data, capsys, monkeypatch):
    _, _, paths, tmp = data
    index = str(tmp / "trips.boxwood")
    assert run(["build", paths["points.parquet"], *XY, "-q", "-o", index], capsys)[0] == 0
    with monkeypatch.context() as patch:
        patch.setattr(sys, "stdout", ClosedPipe())
        code, _, err = run(["describe", index], capsys)
    assert code == _exits.CANNOT_WRITE == 6
    assert one_line_error(err).endswith("stdout was closed before the whole result was written")
    # The error itself cannot be written either: still exit 6 (and a note is no failure).
    with monkeypatch.context() as patch:
        patch.setattr(sys, "stdout", ClosedPipe())
        patch.setattr(sys, "stderr", ClosedPipe())
        assert cli.main(["describe", index]) == _exits.CANNOT_WRITE
        out = str(tmp / "counts.csv")
        assert cli.main(["count", index, paths["boxes.csv"], "-o", out]) == _exits.OK
    assert read(out).num_rows == N_BOXES


def test_help_lists_every_exit_code(capsys):
    code, out, _ = run(["--help"], capsys)
    assert code == 0
    for exit_code, meaning in _exits.TABLE:
        assert f"{exit_code:>3}  {meaning}" in out


def test_each_command_offers_only_the_options_it_uses(capsys):
    code, out, _ = run(["demo", "--help"], capsys)
    assert code == 0 and out.startswith("usage: boxwood demo ")
    assert run(["demo", "--rows", "0"], capsys)[0] == _exits.USAGE
    for command in ("count", "join", "sum", "grid", "build"):
        code, out, _ = run([command, "--help"], capsys)
        assert code == 0 and out.startswith(f"usage: boxwood {command} ")
        assert ("--weights COL" in out) == (command in ("sum", "grid", "build")), command
        assert "(for sums)" not in out
    code, _, err = run(["count", "trips.boxwood", "boxes.csv", "--weights", "fare"], capsys)
    assert code == _exits.USAGE and "unrecognized arguments: --weights fare" in err


# --------------------------------------------------------------------------------------------
# Progress bars
# --------------------------------------------------------------------------------------------


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def last_line(text: str) -> str:
    """What a terminal shows last: tqdm redraws its line after each carriage return."""
    return text.rstrip("\n").split("\r")[-1]


def test_progress_draws_on_a_terminal_after_the_delay():
    stream = FakeTerminal()
    with Progress("count", total=200, unit="boxes", stream=stream, delay=0.0) as bar:
        for _ in range(4):
            time.sleep(0.11)  # past the redraw interval, so each step draws
            bar.advance(50)
    text = stream.getvalue()
    assert "\r" in text and text.endswith("\n")
    assert last_line(text).startswith("count: 100%") and " 200/200 [" in last_line(text)
    assert " boxes/s]" in last_line(text)
    assert "count:  50%" in text  # drawn along the way, not only at the end


def test_progress_says_stopped_when_its_work_fails():
    stream = FakeTerminal()
    with pytest.raises(RuntimeError), Progress("count", total=200, stream=stream, delay=0.0) as bar:
        bar.advance(50)
        raise RuntimeError("interrupted")
    assert last_line(stream.getvalue()).startswith("count:  25%")
    assert last_line(stream.getvalue()).endswith(", stopped]")
    assert bar.done == 50


def test_progress_is_silent_when_quick_or_not_a_terminal():
    quick, piped, quiet = FakeTerminal(), io.StringIO(), FakeTerminal()
    with Progress("count", total=10, stream=quick) as bar:  # default delay: about a second
        bar.advance(10)
    with Progress("count", total=10, stream=piped, delay=0.0) as bar:
        time.sleep(0.11)
        bar.advance(10)
    with Progress("count", total=10, stream=quiet, delay=0.0, enabled=False) as bar:  # -q
        time.sleep(0.11)
        bar.advance(10)
    assert quick.getvalue() == "" and piped.getvalue() == "" and quiet.getvalue() == ""
    assert bar.done == 10  # counting goes on without a bar


def test_activity_bar_runs_work_in_a_thread_and_reraises():
    stream = FakeTerminal()
    with Progress("build", stream=stream, delay=0.0) as bar:
        assert run_with_activity(bar, lambda: time.sleep(0.35) or 42) == 42
    text = stream.getvalue()
    assert text.count("\rbuild: 00:00") >= 3  # redrawn while the work ran
    assert last_line(text) == "build: 00:00, done"

    def fail():
        raise ValueError("bad points")

    with pytest.raises(ValueError, match="bad points"):
        run_with_activity(Progress("build", stream=io.StringIO()), fail)


def test_quiet_prints_nothing_on_stderr(data, capsys):
    _, _, paths, tmp = data
    out = str(tmp / "q.parquet")
    code, stdout, err = run(
        ["count", paths["points.csv"], paths["boxes.csv"], *XY, "-q", "-o", out], capsys
    )
    assert code == 0 and stdout == "" and err == ""
    assert read(out).num_rows == N_BOXES


def test_demo_through_the_command_line_writes_a_heatmap(tmp_path, capsys):
    require("matplotlib")
    png = tmp_path / "week.png"
    code, out, _ = run(["demo", "--rows", "20000", "--boxes", "2000", "--out", str(png)], capsys)
    assert code == 0, out
    # The demo checks its grid against numpy.histogram2d itself and prints the verdict.
    assert "agrees with numpy.histogram2d: yes" in out
    assert f"heatmap: wrote {png}" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000


def test_docstring_examples_of_the_command_line_modules():
    import doctest

    from boxwood.cli import _bins, _plot, _progress, _tables

    for module in (cli, _bins, _exits, _plot, _progress, _tables):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0, module.__name__
        if module is not cli:  # cli's docstring shows shell commands, not Python
            assert result.attempted > 0, module.__name__


# --------------------------------------------------------------------------------------------
# The installed console script, in a real subprocess
# --------------------------------------------------------------------------------------------


def test_console_script_end_to_end(data):
    points, boxes, paths, tmp = data
    script = shutil.which("boxwood", path=os.path.dirname(sys.executable))
    assert script is not None, "the boxwood console script is not installed: run make build-dev"
    out = str(tmp / "script.csv")
    argv = [script, "count", paths["points.parquet"], paths["boxes.parquet"], *XY, "-o", out]
    done = subprocess.run(argv, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    # stderr is a pipe here: the note, and no progress bar (no carriage returns).
    assert done.stderr.strip() == f"boxwood count: wrote {N_BOXES} boxes with 'count' to {out}"
    expected = [int(inside(points, boxes, i, "both").sum()) for i in range(N_BOXES)]
    assert read(out).column("count").to_pylist() == expected

    # A reader that stops early (`| head -1`): a one-line note and exit 6, no traceback.
    reader = subprocess.Popen(["head", "-c", "10"], stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    big = str(tmp / "many_boxes.parquet")
    many = make_boxes(np.random.default_rng(5), 30_000)
    write(big, many)
    writer = subprocess.run(
        [script, "join", paths["points.parquet"], big, *XY, "-q"],
        stdout=reader.stdin,
        stderr=subprocess.PIPE,
        text=True,
        timeout=120,
    )
    reader.stdin.close()
    reader.wait(timeout=60)
    assert writer.returncode == _exits.CANNOT_WRITE
    assert one_line_error(writer.stderr).endswith(
        "stdout was closed before the whole result was written"
    )

    # Both streams into one pipe that closes early (`2>&1 | head`): the error line cannot be
    # written either, and the exit code is still 6, not an internal error.
    reader = subprocess.Popen(["head", "-c", "12"], stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    writer = subprocess.run(
        [script, "join", paths["points.parquet"], big, *XY],
        stdout=reader.stdin,
        stderr=reader.stdin,
        timeout=120,
    )
    reader.stdin.close()
    assert reader.stdout.read() == b'"point_row",'
    reader.wait(timeout=60)
    assert writer.returncode == _exits.CANNOT_WRITE

    missing = subprocess.run(
        [script, "count", str(tmp / "nope.csv"), out, *XY],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert missing.returncode == _exits.BAD_FILE
    assert "nope.csv: no such file" in missing.stderr and "Traceback" not in missing.stderr


def test_the_demo_module_stops_quietly_when_its_reader_has_seen_enough():
    demo = subprocess.Popen(
        [sys.executable, "-m", "boxwood.demo"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert demo.stdout is not None and demo.stderr is not None
    first = demo.stdout.readline()
    demo.stdout.close()  # as `| head -1` does
    err = demo.stderr.read()
    assert demo.wait(timeout=120) == 0
    assert first.startswith("Larkhaven") and "Traceback" not in err
