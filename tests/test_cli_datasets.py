"""Points datasets on the command line: a folder of Parquet files, or a glob of them, with hive
partitions as columns.

Outside references: the same rows written to one Parquet file by pyarrow and answered from
there (the dataset must give the same answers), NumPy boolean masks over the rows as pyarrow
reads them back, and pyarrow's memory pool for how much a read allocates.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest

from _optional import require

pa = require("pyarrow")
pq = require("pyarrow.parquet")
pacsv = require("pyarrow.csv")

from boxwood import cli  # noqa: E402
from boxwood.cli import _exits  # noqa: E402

DAYS = (3, 4, 5)
STATIONS = ("harbour", "mill")


def run(argv: list, capsys) -> tuple[int, str, str]:
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def dataset(tmp_path):
    """Rows split over day=D/station=S/part-P.parquet files (several row groups each), and
    the same rows, partition columns included, in one file in the dataset's row order."""
    rng = np.random.default_rng(21)
    root = tmp_path / "readings"
    pieces = []
    for day in DAYS:
        for station in STATIONS:
            folder = root / f"day={day}" / f"station={station}"
            folder.mkdir(parents=True)
            for part in range(2):
                n = int(rng.integers(30, 80))
                table = pa.table(
                    {
                        "minute": rng.integers(0, 1440, n),
                        "level": rng.random(n) * 10,
                        "litres": rng.integers(0, 500, n),
                        "note": pa.array([f"r{i}" for i in range(n)]),
                    }
                )
                pq.write_table(table, folder / f"part-{part}.parquet", row_group_size=16)
                with_keys = table.append_column("day", pa.array([day] * n, pa.int32()))
                pieces.append(with_keys.append_column("station", pa.array([station] * n)))
    (root / "_SUCCESS").write_text("")  # a writer's marker: not a data file
    whole = tmp_path / "whole.parquet"
    pq.write_table(pa.concat_tables(pieces), whole)
    m = 30
    boxes = pa.table(
        {
            "x_lo": rng.integers(0, 700, m),
            "x_hi": rng.integers(600, 1440, m),
            "y_lo": rng.random(m) * 4,
            "y_hi": 4 + rng.random(m) * 6,
            "day": pa.array(rng.choice(DAYS + (9,), m), pa.int32()),
            "station": pa.array(rng.choice(STATIONS, m)),
        }
    )
    boxes_path = tmp_path / "boxes.parquet"
    pq.write_table(boxes, boxes_path)
    return root, whole, boxes_path


def _answers(capsys, source, boxes, *options) -> list:
    code, out, err = run(["count", source, boxes, "-q", *options], capsys)
    assert code == 0, err
    return out.splitlines()


@pytest.mark.parametrize("form", ["folder", "glob"])
def test_a_dataset_answers_as_the_same_rows_in_one_file(dataset, capsys, tmp_path, form):
    root, whole, boxes = dataset
    source = root if form == "folder" else f"{root}/day=*/station=*/*.parquet"
    for options in (
        ["--x", "minute", "--y", "level"],
        ["--x", "minute", "--y", "level", "--by", "station"],
        ["--x", "minute", "--y", "level", "--by", "day,station"],
        ["--x", "minute", "--y", "day"],  # a partition as a coordinate
    ):
        assert _answers(capsys, source, boxes, *options) == _answers(
            capsys, whole, boxes, *options
        ), options
    code, out, _ = run(
        ["sum", source, boxes, "--x", "minute", "--y", "level"] + ["--weights", "litres", "-q"],
        capsys,
    )
    assert (
        code == 0
        and out
        == run(
            ["sum", whole, boxes, "--x", "minute", "--y", "level", "--weights", "litres", "-q"],
            capsys,
        )[1]
    )
    # A join carries every column, partitions included, with rows numbered in file order.
    joined = {}
    for name, src in (("dataset", source), ("file", whole)):
        path = tmp_path / f"join-{name}.parquet"
        code, _, err = run(
            [
                "join",
                src,
                boxes,
                "--x",
                "minute",
                "--y",
                "level",
                "--by",
                "station",
                "-q",
                "-o",
                path,
            ],
            capsys,
        )
        assert code == 0, err
        joined[name] = pq.read_table(path)
    assert joined["dataset"].to_pylist() == joined["file"].to_pylist()
    assert {"note", "day_point", "station"} <= set(joined["dataset"].column_names)
    # NumPy reference for the counts of the first options.
    rows = pq.read_table(whole)
    x, y = rows["minute"].to_numpy(), rows["level"].to_numpy()
    counts = [
        int(line.rsplit(",", 1)[1])
        for line in _answers(capsys, source, boxes, "--x", "minute", "--y", "level")[1:]
    ]
    want = [
        int(((b["x_lo"] <= x) & (x <= b["x_hi"]) & (b["y_lo"] <= y) & (y <= b["y_hi"])).sum())
        for b in pq.read_table(boxes).to_pylist()
    ]
    assert counts == want


def test_build_from_a_dataset_writes_the_index_the_one_file_gives(dataset, capsys, tmp_path):
    root, whole, boxes = dataset
    for name, src in (("dataset", root), ("file", whole)):
        code, _, err = run(
            [
                "build",
                src,
                "--x",
                "minute",
                "--y",
                "level",
                "--by",
                "day",
                "-q",
                "-o",
                tmp_path / f"{name}.boxwood",
            ],
            capsys,
        )
        assert code == 0, err
    a = _answers(capsys, tmp_path / "dataset.boxwood", boxes, "--by", "day")
    assert a == _answers(capsys, tmp_path / "file.boxwood", boxes, "--by", "day")


def test_append_takes_a_dataset_as_it_takes_the_one_file(dataset, capsys, tmp_path):
    root, whole, boxes = dataset
    for name, src in (("dataset", root), ("file", whole)):
        code, _, err = run(
            [
                "append",
                tmp_path / name,
                src,
                "--x",
                "minute",
                "--y",
                "level",
                "--by",
                "station",
                "-q",
            ],
            capsys,
        )
        assert code == 0, err
    a = _answers(capsys, tmp_path / "dataset", boxes, "--by", "station")
    assert a == _answers(capsys, tmp_path / "file", boxes, "--by", "station")


def _fails(capsys, argv: list) -> tuple[int, str]:
    code, _, err = run(argv, capsys)
    assert "Traceback" not in err
    return code, err.strip()


def test_bad_datasets_are_refused_with_clear_errors(tmp_path, capsys):
    boxes = tmp_path / "boxes.csv"
    pacsv.write_csv(pa.table({"x_lo": [0], "x_hi": [9], "y_lo": [0], "y_hi": [9]}), boxes)
    cols = ["--x", "x", "--y", "y"]
    empty = tmp_path / "empty"
    empty.mkdir()
    code, err = _fails(capsys, ["count", empty, boxes, *cols])
    assert code == _exits.BAD_FILE and "a folder with no Parquet files" in err
    code, err = _fails(capsys, ["count", f"{tmp_path}/nowhere/*.parquet", boxes, *cols])
    assert code == _exits.BAD_FILE and "the pattern matches no file" in err
    code, err = _fails(capsys, ["count", f"{tmp_path}/*.csv", boxes, *cols])
    assert code == _exits.BAD_FILE and "matches no Parquet file" in err and "boxes.csv" in err
    # Files whose columns differ: by type, and by a column one of them lacks.
    for name, second in (
        ("types", pa.table({"x": ["a"], "y": [1]})),
        ("columns", pa.table({"x": [1.0], "y": [1], "extra": [0]})),
        ("fewer", pa.table({"x": [1.0]})),
    ):
        folder = tmp_path / name
        folder.mkdir()
        pq.write_table(pa.table({"x": [1.0, 2.0], "y": [1, 2]}), folder / "a.parquet")
        pq.write_table(second, folder / "b.parquet")
        code, err = _fails(capsys, ["count", folder, boxes, *cols])
        assert code == _exits.BAD_FILE and "the files differ in their columns" in err, err
        assert str(folder / "b.parquet") in err
    assert (
        "column 'x' is string (not double)"
        in _fails(capsys, ["count", tmp_path / "types", boxes, *cols])[1]
    )
    # A column named that neither the files nor the partitions have.
    good = tmp_path / "good" / "site=east"
    good.mkdir(parents=True)
    pq.write_table(pa.table({"x": [1.0, 2.0], "y": [1, 2]}), good / "a.parquet")
    code, err = _fails(capsys, ["count", tmp_path / "good", boxes, "--x", "x", "--y", "z"])
    assert code == _exits.MISSING_COLUMN and "no column 'z' (columns: x, y, site)" in err
    # A damaged file among good ones is named.
    (good / "b.parquet").write_bytes(b"PAR1 not really parquet")
    code, err = _fails(capsys, ["count", tmp_path / "good", boxes, *cols])
    assert code == _exits.BAD_FILE and "b.parquet" in err


def test_a_dataset_read_allocates_about_the_needed_columns_only(tmp_path):
    # pyarrow's memory pool counts what the read allocated, in a fresh process; the files'
    # unused text column is about 20 times the needed ones, so reading it would show.
    n = 100_000
    folder = tmp_path / "wide"
    folder.mkdir()
    rng = np.random.default_rng(5)
    for part in range(4):
        table = pa.table(
            {
                "x": rng.random(n),
                "y": rng.random(n),
                "text": pa.array(
                    [
                        f"a fairly long unused text value of seventy bytes, give or take {i}"
                        for i in range(n)
                    ]
                ),
            }
        )
        pq.write_table(table, folder / f"part-{part}.parquet", row_group_size=10_000)
    needed = 4 * n * 16  # bytes of the x and y columns

    def peak(columns: list | None) -> tuple[int, int]:
        code = (
            "import pyarrow as pa\n"
            "from boxwood.cli._datasets import read_dataset\n"
            f"t = read_dataset({str(folder)!r}, {columns!r})\n"
            "print(t.num_rows, pa.default_memory_pool().max_memory())\n"
        )
        done = subprocess.run(
            [sys.executable, "-c", code],
            capture_output=True,
            text=True,
            check=True,
            env={**os.environ},
        )
        rows, most = done.stdout.split()
        return int(rows), int(most)

    rows, some = peak(["x", "y"])
    _, every = peak(None)
    assert rows == 4 * n
    # Reading two of the three columns allocates at least those and far less than all.
    assert needed <= some < every / 2, (some, every)
