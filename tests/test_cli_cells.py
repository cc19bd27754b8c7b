"""CSV cells read exactly by the command line: every bound cell on its own, for its axis.

The outside references are the Python API's answers for the same bounds given as Python
scalars, and Python's own exact comparisons of integers and numpy datetime64 values.
"""

from __future__ import annotations

import numpy as np
import pytest

from _optional import require

pa = require("pyarrow")
pq = require("pyarrow.parquet")
pacsv = require("pyarrow.csv")

import boxwood  # noqa: E402
from boxwood import cli  # noqa: E402
from boxwood.cli import _exits  # noqa: E402

BIG = 1152921504606846977  # 2**60 + 1: float64 holds 2**60, not this
XY = ["--x", "x", "--y", "y"]


def _points(tmp_path, x, y=None, name="points.parquet"):
    y = np.zeros(len(x), dtype=np.int64) if y is None else y
    path = str(tmp_path / name)
    table = pa.table({"x": pa.array(x), "y": pa.array(y)})
    (pq.write_table if name.endswith(".parquet") else pacsv.write_csv)(table, path)
    return path


def _text(tmp_path, lines, name="boxes.csv"):
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return str(path)


def _count(argv, capsys):
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def _counts_from(path):
    return pacsv.read_csv(path).column("count").to_pylist()


def test_an_inf_cell_keeps_an_int64_bound_exact(tmp_path, capsys):
    x = np.array([BIG - 1, BIG, 5], dtype=np.int64)
    points = _points(tmp_path, x)
    boxes = _text(
        tmp_path,
        [
            "x_lo,x_hi,y_lo,y_hi",
            f"{BIG},inf,-inf,inf",
            f"-inf,{BIG - 1},0,0",
            f"{BIG},{BIG},-inf,0",
            "inf,inf,0,0",
        ],
    )
    out = str(tmp_path / "counts.csv")
    code, _, err = _count(["count", points, boxes, *XY, "-o", out], capsys)
    assert code == _exits.OK, err
    inf = float("inf")
    bounds = [(BIG, inf, -inf, inf), (-inf, BIG - 1, 0, 0), (BIG, BIG, -inf, 0), (inf, inf, 0, 0)]
    # Python's exact int comparisons, and the Python API given the same bounds as scalars.
    expected = [sum(lo <= v <= hi for v in x.tolist()) for lo, hi, _, _ in bounds]
    tree = boxwood.RangeTree(x, np.zeros(3, dtype=np.int64))
    assert expected == [tree.count(*b) for b in bounds] == [1, 2, 1, 0]
    assert _counts_from(out) == expected
    # The boxes' own columns are written back as they were read.
    text = pacsv.ConvertOptions(column_types={"x_lo": pa.string()})
    written = pacsv.read_csv(out, convert_options=text)
    assert written.column("x_lo").to_pylist() == [str(BIG), "-inf", str(BIG), "inf"]


def test_fractional_cells_beside_int64_bounds_beyond_2_53_stay_exact(tmp_path, capsys):
    """A bound column holding 2**60 + 1 in one row and 1.5 in another: no numeric dtype
    holds both exactly, and each box still admits what Python's exact comparisons admit."""
    x = np.array([BIG - 1, BIG, 1, 2], dtype=np.int64)
    points = _points(tmp_path, x)
    boxes = _text(
        tmp_path,
        ["x_lo,x_hi,y_lo,y_hi", f"{BIG},inf,-inf,inf", "1.5,2.5,-inf,inf", "0.5,1.5,-inf,inf"],
    )
    out = str(tmp_path / "counts.csv")
    for inclusive in ("both", "neither"):
        code, _, err = _count(
            ["count", points, boxes, *XY, "--inclusive", inclusive, "-o", out, "-q"], capsys
        )
        assert code == _exits.OK, err
        inside = (
            (lambda lo, v, hi: lo <= v <= hi)
            if inclusive == "both"
            else (lambda lo, v, hi: lo < v < hi)
        )
        bounds = [(BIG, float("inf")), (1.5, 2.5), (0.5, 1.5)]
        expected = [sum(inside(lo, v, hi) for v in x.tolist()) for lo, hi in bounds]
        assert _counts_from(out) == expected


def test_inf_cells_among_times_bound_a_time_axis(tmp_path, capsys):
    t0 = np.datetime64("2025-02-03T00:00:00", "ns")
    x = t0 + np.array([0, 1, 3600 * 10**9, 86_400 * 10**9], dtype="timedelta64[ns]")
    points = _points(tmp_path, x)
    boxes = _text(
        tmp_path,
        [
            "x_lo,x_hi,y_lo,y_hi,label",
            "-inf,2025-02-03T00:00:00,0,0,a",
            "2025-02-03T00:00:00.000000001,inf,0,0,b",
            "2025-02-03,2025-02-03 01:00:00,-inf,inf,c",
        ],
    )
    out = str(tmp_path / "counts.csv")
    code, _, err = _count(["count", points, boxes, *XY, "-o", out], capsys)
    assert code == _exits.OK, err
    box_bounds = [
        (None, np.datetime64("2025-02-03T00:00:00", "ns")),
        (np.datetime64("2025-02-03T00:00:00.000000001", "ns"), None),
        (np.datetime64("2025-02-03", "ns"), np.datetime64("2025-02-03T01:00:00", "ns")),
    ]

    def inside(lo, hi):  # numpy's exact datetime64[ns] comparisons (nanoseconds kept)
        mask = np.ones(x.size, dtype=bool)
        if lo is not None:
            mask &= x >= lo
        if hi is not None:
            mask &= x <= hi
        return int(mask.sum())

    expected = [inside(lo, hi) for lo, hi in box_bounds]
    assert expected == [1, 3, 3]
    assert _counts_from(out) == expected


@pytest.mark.parametrize(
    ("cells", "row", "bad"),
    [
        (["2025-02-03T00:00:00", "-inf", "tomorrow"], 2, "tomorrow"),
        (["inf", "2025-02-03", "17"], 2, "17"),
    ],
)
def test_a_wrongly_typed_cell_in_a_time_column_is_the_one_named(tmp_path, capsys, cells, row, bad):
    points = _points(tmp_path, np.array(["2025-02-03T00:00:00"], dtype="datetime64[s]"))
    lines = ["x_lo,x_hi,y_lo,y_hi"] + [f"{c},inf,0,0" for c in cells]
    boxes = _text(tmp_path, lines)
    code, _, err = _count(["count", points, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert f"column 'x_lo' row {row} (0-based) is {bad!r}" in err
    assert "2025-02-03" not in err.replace(boxes, "")


def test_a_time_in_a_number_column_is_the_one_named(tmp_path, capsys):
    points = _points(tmp_path, np.array([1, 2, 3], dtype=np.int64))
    boxes = _text(tmp_path, ["x_lo,x_hi,y_lo,y_hi", "0,inf,0,0", "2025-02-03,5,0,0"])
    code, _, err = _count(["count", points, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert "column 'x_lo' row 1 (0-based) is '2025-02-03', where a number" in err


def test_times_with_and_without_an_offset_in_a_boxes_file_are_refused(tmp_path, capsys):
    points = _points(tmp_path, np.array(["2025-02-03T00:00:00"], dtype="datetime64[s]"))
    boxes = _text(
        tmp_path,
        ["x_lo,x_hi,y_lo,y_hi", "2025-02-03T00:00:00Z,inf,0,0", "2025-02-03T00:00:00,inf,0,0"],
    )
    code, _, err = _count(["count", points, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert "row 1 (0-based)" in err and "no UTC offset" in err and "row 0 has one" in err


def test_a_points_time_without_an_offset_among_offset_ones_is_named(tmp_path, capsys):
    points = _text(
        tmp_path,
        ["x,y", "2025-02-03T00:00:00Z,1", "2025-02-03T01:00:00+01:00,2", "2025-02-03T02:00:00,3"],
        name="points.csv",
    )
    boxes = _text(tmp_path, ["x_lo,x_hi,y_lo,y_hi", "-inf,inf,0,9"])
    code, _, err = _count(["count", points, boxes, *XY], capsys)
    assert code == _exits.BAD_VALUES
    assert "with and without a UTC offset" in err
    assert "row 2 (0-based) is '2025-02-03T02:00:00'" in err and "holds text" not in err


def test_a_header_only_points_file_is_refused_unless_allowed(tmp_path, capsys):
    points = _text(tmp_path, ["x,y"], name="points.csv")
    index = str(tmp_path / "empty.boxwood")
    code, _, err = _count(["build", points, *XY, "-o", index], capsys)
    assert code == _exits.BAD_FILE
    assert "no rows" in err and "--allow-empty" in err
    code, _, err = _count(["build", points, *XY, "-o", index, "--allow-empty"], capsys)
    assert code == _exits.OK, err
    assert len(boxwood.load(index)) == 0


def test_notes_count_one_thing_in_the_singular(tmp_path, capsys):
    points = _points(tmp_path, np.array([3], dtype=np.int64))
    boxes = _text(tmp_path, ["x_lo,x_hi,y_lo,y_hi", "0,9,0,0"])
    code, _, err = _count(["count", points, boxes, *XY, "-o", str(tmp_path / "c.csv")], capsys)
    assert code == _exits.OK and "wrote 1 box with 'count'" in err, err
    code, _, err = _count(["join", points, boxes, *XY, "-o", str(tmp_path / "j.csv")], capsys)
    assert code == _exits.OK and "wrote 1 match of 1 box to" in err, err
    index = str(tmp_path / "one.boxwood")
    code, _, err = _count(["build", points, *XY, "-o", index], capsys)
    assert code == _exits.OK and ": 1 point, 1 level, " in err, err
    two = _text(tmp_path, ["x_lo,x_hi,y_lo,y_hi", "0,9,0,0", "0,1,0,0"], name="two.csv")
    code, _, err = _count(["count", points, two, *XY, "-o", str(tmp_path / "c2.csv")], capsys)
    assert code == _exits.OK and "wrote 2 boxes with 'count'" in err, err


def test_the_cells_module_examples_run():
    import doctest

    from boxwood.cli import _cells

    result = doctest.testmod(_cells)
    assert result.attempted > 0 and result.failed == 0
