"""The command line on growing trees' folders: ``append`` and ``expire``, every answering
command with a folder as its SOURCE, ``describe`` and ``verify`` of a folder, and the errors.

Invented data: Brackenford tram boardings (the minute's timestamp, the kilometres ridden,
the fare in pence, the line). Answers are checked against the pure-Python reference
(tests/reference.py: every live point against every box) over the rows a plain mask says
are live, and counts also against SQLite (a table with the same inserts, deletes and
expiries, counted with ``WHERE t BETWEEN ... AND km BETWEEN ...``); grids against
``numpy.histogram2d`` and statistics against ``numpy.quantile``.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3

import numpy as np
import pytest

import boxwood
import reference as ref
from _optional import require

pa = require("pyarrow")
pq = require("pyarrow.parquet")
pacsv = require("pyarrow.csv")

from boxwood import cli  # noqa: E402
from boxwood.cli import _exits  # noqa: E402

OPENING = np.datetime64("2026-03-02T05:00:00", "s")
COLUMNS = ["--x", "boarded", "--y", "km", "--weights", "pence"]


def _batch(rng, first_minute: int, n: int) -> dict[str, np.ndarray]:
    minute = first_minute + np.sort(rng.integers(0, 240, n))
    return {
        "boarded": OPENING + (minute * 60).astype("timedelta64[s]"),
        "km": rng.integers(1, 40, n) / 4.0,  # quarter kilometres: many ties on box edges
        "pence": rng.integers(120, 480, n),
        "line": rng.choice(["Red", "Green", "Blue"], n),
    }


def _write(path, columns: dict[str, np.ndarray]) -> str:
    table = pa.table(columns)
    if str(path).endswith(".parquet"):
        pq.write_table(table, path)
    else:
        pacsv.write_csv(table, path)
    return str(path)


def _boxes(rng, n: int = 40) -> dict[str, np.ndarray]:
    start = rng.integers(0, 900, n)
    return {
        "name": np.array([f"window-{i}" for i in range(n)]),
        "x_lo": OPENING + (start * 60).astype("timedelta64[s]"),
        "x_hi": OPENING + ((start + rng.integers(0, 300, n)) * 60).astype("timedelta64[s]"),
        "y_lo": rng.integers(0, 30, n) / 4.0,
        "y_hi": rng.integers(20, 45, n) / 4.0,
        "line": rng.choice(["Red", "Green", "Blue", "Grey"], n),
    }


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


class Rows:
    """Every row appended so far, in id order, and which are live: the plain reference."""

    def __init__(self) -> None:
        self.columns: dict[str, list] = {"boarded": [], "km": [], "pence": [], "line": []}
        self.live: list[bool] = []

    def add(self, batch: dict[str, np.ndarray]) -> None:
        for name, values in batch.items():
            self.columns[name].extend(values.tolist())
        self.live.extend([True] * len(batch["km"]))

    def array(self, name: str) -> np.ndarray:
        dtype = "datetime64[s]" if name == "boarded" else None
        return np.array(self.columns[name], dtype=dtype)

    def ids(self) -> np.ndarray:
        return np.flatnonzero(self.live)


@pytest.fixture
def grown(tmp_path, capsys):
    """A folder of three appends (Parquet, CSV, Parquet), some rows deleted through the
    Python API, and the rows as the reference keeps them."""
    rng = np.random.default_rng(2026)
    folder = tmp_path / "boardings"
    rows = Rows()
    for i, suffix in enumerate([".parquet", ".csv", ".parquet"]):
        batch = _batch(rng, 300 * i, 200 + 50 * i)
        path = _write(tmp_path / f"batch{i}{suffix}", batch)
        code, out, err = run(["append", folder, path, *COLUMNS], capsys)
        first = len(rows.live)
        rows.add(batch)
        assert code == 0, err
        # The new rows' ids, as the reference numbers them: one after another.
        assert out == f"ids {first} to {len(rows.live) - 1} ({len(batch['km'])} rows)\n"
    with boxwood.GrowingTree.open(folder) as tree:
        gone = rng.choice(len(rows.live), 90, replace=False)
        tree.delete(gone)
        for i in gone:
            rows.live[i] = False
    boxes = _write(tmp_path / "boxes.csv", _boxes(rng))
    return folder, rows, boxes, tmp_path


def _sqlite_counts(rows: Rows, boxes: dict[str, np.ndarray]) -> list[int]:
    """Outside reference: SQLite over the live rows (deleted ones removed by DELETE)."""
    db = sqlite3.connect(":memory:")
    db.execute("CREATE TABLE t (id INTEGER, boarded INTEGER, km REAL)")
    seconds = rows.array("boarded").astype(np.int64).tolist()
    db.executemany(
        "INSERT INTO t VALUES (?, ?, ?)", zip(range(len(seconds)), seconds, rows.columns["km"])
    )
    db.executemany(
        "DELETE FROM t WHERE id = ?", [(int(i),) for i in np.flatnonzero(~np.array(rows.live))]
    )
    sql = "SELECT COUNT(*) FROM t WHERE boarded BETWEEN ? AND ? AND km BETWEEN ? AND ?"
    box = zip(
        boxes["x_lo"].astype(np.int64).tolist(),
        boxes["x_hi"].astype(np.int64).tolist(),
        boxes["y_lo"].tolist(),
        boxes["y_hi"].tolist(),
    )
    return [db.execute(sql, b).fetchone()[0] for b in box]


def _read_boxes(path: str) -> dict[str, np.ndarray]:
    table = pacsv.read_csv(path)
    out = {name: table.column(name).to_numpy() for name in table.column_names}
    out["x_lo"] = out["x_lo"].astype("datetime64[s]")
    out["x_hi"] = out["x_hi"].astype("datetime64[s]")
    return out


def test_count_sum_and_join_of_a_folder_answer_for_its_live_rows(grown, capsys):
    folder, rows, boxes_path, tmp_path = grown
    boxes = _read_boxes(boxes_path)
    ids = rows.ids()
    t, km, pence = rows.array("boarded")[ids], rows.array("km")[ids], rows.array("pence")[ids]
    bounds = (boxes["x_lo"], boxes["x_hi"], boxes["y_lo"], boxes["y_hi"])
    out = tmp_path / "counts.parquet"
    assert run(["count", folder, boxes_path, "-o", out], capsys)[0] == 0
    counts = pq.read_table(out).column("count").to_pylist()
    # Reference: every live point against every box; and SQLite's count.
    assert counts == ref.ref_count(t, km, *bounds).tolist()
    assert counts == _sqlite_counts(rows, boxes)
    assert run(["sum", folder, boxes_path, "-o", out], capsys)[0] == 0
    assert pq.read_table(out).column("sum").to_pylist() == list(ref.ref_sum(t, km, pence, *bounds))
    assert run(["join", folder, boxes_path, "-o", out], capsys)[0] == 0
    joined = pq.read_table(out)
    want = [(b, int(ids[r])) for b, found in enumerate(ref.ref_rows(t, km, *bounds)) for r in found]
    got = list(zip(joined.column("box_row").to_pylist(), joined.column("point_row").to_pylist()))
    assert got == want  # point_row: the folder's stable ids
    assert joined.column("name").to_pylist() == [boxes["name"][b] for b, _ in want]


def test_stats_and_grid_of_a_folder(grown, capsys):
    folder, rows, boxes_path, tmp_path = grown
    boxes = _read_boxes(boxes_path)
    ids = rows.ids()
    t, km = rows.array("boarded")[ids], rows.array("km")[ids]
    out = tmp_path / "stats.parquet"
    code, _, err = run(["stats", folder, boxes_path, "--quantiles", "0.5,0.9", "-o", out], capsys)
    assert code == 0 and "live rows" in err
    stats = pq.read_table(out)
    for i in range(len(boxes["name"])):
        inside = (t >= boxes["x_lo"][i]) & (t <= boxes["x_hi"][i])
        inside &= (km >= boxes["y_lo"][i]) & (km <= boxes["y_hi"][i])
        got = stats.column("q0.9")[i].as_py()
        # Reference: numpy.quantile over the live rows in the box (None for an empty box).
        assert got == (np.quantile(km[inside], 0.9) if inside.any() else None)
        assert stats.column("count")[i].as_py() == int(inside.sum())
    edges = "0,2.5,5,10"
    out = tmp_path / "grid.csv"
    assert run(["grid", folder, "--x-bins", 6, "--y-edges", edges, "-o", out], capsys)[0] == 0
    grid = pacsv.read_csv(out).column("count").to_numpy().reshape(6, 3)
    # Reference: numpy.histogram2d over the live rows, on the live rows' own time range.
    seconds = t.astype(np.int64)
    x_edges = np.linspace(seconds.min(), seconds.max(), 7)
    want, _, _ = np.histogram2d(seconds, km, bins=[x_edges, [0, 2.5, 5, 10]])
    assert grid.tolist() == want.astype(np.int64).tolist()


def test_a_keyed_folder_answers_each_box_for_its_own_line(tmp_path, capsys):
    rng = np.random.default_rng(7)
    folder = tmp_path / "keyed"
    rows = Rows()
    for i in range(3):
        batch = _batch(rng, 200 * i, 120)
        rows.add(batch)
        path = _write(tmp_path / f"b{i}.csv", batch)
        assert run(["append", folder, path, *COLUMNS, "--by", "line", "-q"], capsys)[0] == 0
    # Expiry on a keyed folder: by x over every line, whatever the lines' own orders.
    assert run(["expire", folder, "--before", "2026-03-02T08:00:00", "-q"], capsys)[0] == 0
    rows.live = list(
        np.array(rows.live) & (rows.array("boarded") >= np.datetime64("2026-03-02T08:00:00"))
    )
    boxes_path = _write(tmp_path / "boxes.csv", _boxes(rng))
    boxes = _read_boxes(boxes_path)
    out = tmp_path / "counts.csv"
    assert run(["count", folder, boxes_path, "--by", "line", "-o", out], capsys)[0] == 0
    got = pacsv.read_csv(out).column("count").to_pylist()
    ids = rows.ids()
    t, km, line = rows.array("boarded")[ids], rows.array("km")[ids], rows.array("line")[ids]
    # Reference: every live point of the box's own line against the box.
    want = [
        ref.ref_count(t[line == k], km[line == k], a, b, c, d)
        for a, b, c, d, k in zip(
            boxes["x_lo"], boxes["x_hi"], boxes["y_lo"], boxes["y_hi"], boxes["line"]
        )
    ]
    assert got == want and 0 in want  # the Grey line has no rows
    code, out_text, _ = run(["grid", folder, "--key", "Red", "--x-bins", 2, "--y-bins", 2], capsys)
    totals = [int(row.split()[-1]) for row in out_text.splitlines()[1:3]]
    assert code == 0 and sum(totals) == int((line == "Red").sum())  # every Red row, no other


def test_expire_drops_rows_before_a_time_and_prints_how_many(grown, capsys):
    folder, rows, boxes_path, tmp_path = grown
    cut = np.datetime64("2026-03-02T09:30:00")
    times = rows.array("boarded")
    going = int((np.array(rows.live) & (times < cut)).sum())
    code, out, _ = run(["expire", folder, "--before", "2026-03-02 09:30"], capsys)
    rows.live = list(np.array(rows.live) & (times >= cut))
    assert code == 0
    assert out == f"expired {going:,} rows; {sum(rows.live):,} live rows remain\n"
    boxes = _read_boxes(boxes_path)
    code, out, _ = run(["count", folder, boxes_path, "-q"], capsys)
    counts = [int(line.rsplit(",", 1)[1]) for line in out.splitlines()[1:]]
    assert counts == _sqlite_counts(rows, boxes)  # Outside reference: SQLite
    assert run(["expire", folder, "--before", "2026-03-02 09:30", "-q"], capsys)[1] == (
        f"expired 0 rows; {sum(rows.live):,} live rows remain\n"
    )


def test_expire_on_a_numeric_axis_takes_a_number(tmp_path, capsys):
    points = _write(tmp_path / "p.csv", {"x": np.arange(10), "y": np.arange(10) % 3})
    folder = tmp_path / "g"
    assert run(["append", folder, points, "--x", "x", "--y", "y", "-q"], capsys)[0] == 0
    code, out, _ = run(["expire", folder, "--before", "3.5"], capsys)
    assert code == 0 and out.startswith("expired 4 rows; 6 live rows")
    code, _, err = run(["expire", folder, "--before", "2026-03-02"], capsys)
    assert code == _exits.BAD_VALUES and "a time or duration" in err


def _state(folder) -> dict[str, str]:
    return {
        name: hashlib.sha256((folder / name).read_bytes()).hexdigest()
        for name in sorted(os.listdir(folder))
    }


def test_bad_appends_change_nothing(grown, capsys):
    folder, rows, boxes_path, tmp_path = grown
    before = _state(folder)
    good = _batch(np.random.default_rng(1), 0, 10)
    cases = [
        (
            ["--x", "when", "--y", "km", "--weights", "pence"],
            good,
            _exits.MISSING_COLUMN,
            "no column 'when'",
        ),
        (COLUMNS, {**good, "km": np.arange(10)}, 0, None),  # integers on a float axis: exact
        (COLUMNS, {**good, "boarded": np.arange(10)}, _exits.BAD_VALUES, "dtype int64"),
        (COLUMNS, {**good, "pence": good["pence"] + 0.5}, _exits.BAD_VALUES, "weights"),
        (
            ["--x", "boarded", "--y", "km"],
            good,
            _exits.USAGE,
            "name the points file's weight column",
        ),
        ([*COLUMNS, "--by", "line"], good, _exits.USAGE, "made without keys"),
        ([*COLUMNS, "--layout", "fast"], good, _exits.USAGE, "compact layout"),
    ]
    for i, (options, batch, code_wanted, says) in enumerate(cases):
        path = _write(tmp_path / f"bad{i}.parquet", batch)
        code, out, err = run(["append", folder, path, *options], capsys)
        assert code == code_wanted, err
        if code_wanted:
            assert says in err and err.count("\n") == 1 and out == ""
            assert _state(folder) == before
        else:  # the one good append changes the folder: compare with it from here on
            before = _state(folder)
    # A folder another writer holds: its own exit code, and nothing read or written.
    with boxwood.GrowingTree.open(folder):
        code, _, err = run(["append", folder, tmp_path / "bad0.parquet", *COLUMNS], capsys)
        assert code == _exits.LOCKED == 9 and "another writer" in err
        code, _, err = run(["expire", folder, "--before", "2026-03-02"], capsys)
        assert code == _exits.LOCKED
        assert run(["count", folder, boxes_path, "-q"], capsys)[0] == 0  # readers take no lock
    assert _state(folder) == before


def test_folders_that_are_not_growing_trees_are_refused(tmp_path, capsys):
    points = _write(tmp_path / "p.csv", {"x": np.arange(5), "y": np.arange(5)})
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("not a growing tree")
    for argv in (
        ["append", other, points, "--x", "x", "--y", "y"],
        ["expire", other, "--before", "1"],
    ):
        code, _, err = run(argv, capsys)
        assert code == _exits.BAD_FILE and "holds no growing tree" in err
    boxes = _write(tmp_path / "b.csv", {"x_lo": [0], "x_hi": [9], "y_lo": [0], "y_hi": [9]})
    for argv in (["count", other, boxes], ["describe", other], ["verify", other]):
        code, _, err = run(argv, capsys)
        assert code == _exits.BAD_FILE and "no MANIFEST" in err
    assert os.listdir(other) == ["notes.txt"]
    code, _, err = run(["append", points, points, "--x", "x", "--y", "y"], capsys)
    assert code == _exits.USAGE and "a file, not a folder" in err
    # A new folder whose first append fails is not left behind.
    bad = _write(tmp_path / "bad.csv", {"x": ["a", "b"], "y": [1, 2]})
    code, _, err = run(["append", tmp_path / "new", bad, "--x", "x", "--y", "y"], capsys)
    assert code == _exits.BAD_VALUES and not (tmp_path / "new").exists()
    empty = tmp_path / "empty"
    empty.mkdir()
    code, _, _ = run(["append", empty, points, "--x", "x", "--y", "y", "--by", "y", "-q"], capsys)
    assert code == 0 and sorted(os.listdir(empty))[0] == "LOCK"


def test_a_damaged_folder_is_a_bad_file_and_verify_names_it(grown, capsys):
    folder, rows, boxes_path, _ = grown
    code, out, _ = run(["verify", folder], capsys)
    assert code == 0 and out.startswith(f"{folder}: ok\n")
    assert f"{sum(rows.live):,} live rows (90 deleted)" in out
    manifest = folder / "MANIFEST"
    good = manifest.read_bytes()
    manifest.write_bytes(good[:-3] + b"}}}")
    for argv in (["count", folder, boxes_path], ["verify", folder], ["describe", folder]):
        code, _, err = run(argv, capsys)
        assert code == _exits.BAD_FILE and "checksum" in err, argv
    manifest.write_bytes(good)
    segment = sorted(folder.glob("seg-*"))[0]
    data = bytearray(segment.read_bytes())
    data[len(data) // 2] ^= 0x40
    segment.write_bytes(bytes(data))
    code, _, err = run(["verify", folder], capsys)
    assert code == _exits.BAD_FILE and segment.name in err


def test_describe_a_folder(grown, capsys):
    folder, rows, _, _ = grown
    code, out, _ = run(["describe", folder, "--json"], capsys)
    facts = json.loads(out)
    with boxwood.GrowingTree.open(folder, readonly=True) as tree:
        segments = tree.segments
    assert code == 0 and facts["rows"] == sum(rows.live) == len(tree)
    assert facts["next_id"] == len(rows.live) and facts["segments"] == len(segments)
    assert facts["rows_deleted"] == sum(s.deleted for s in segments)
    # Parquet keeps seconds as milliseconds; the CSV batch's seconds went in exactly.
    assert facts["x_column"] == "boarded" and facts["x_dtype"] == "datetime64[ms]"
    assert facts["weights_dtype"] == "int64" and facts["key_columns"] == "none"
    code, text, _ = run(["describe", folder], capsys)
    assert code == 0 and f"rows           {sum(rows.live):,}" in text


def test_quiet_appends_print_only_the_ids(tmp_path, capsys):
    points = _write(tmp_path / "p.parquet", _batch(np.random.default_rng(3), 0, 5))
    code, out, err = run(["append", tmp_path / "g", points, *COLUMNS, "-q"], capsys)
    assert (code, out, err) == (0, "ids 0 to 4 (5 rows)\n", "")
    code, out, err = run(["append", tmp_path / "g", points, *COLUMNS], capsys)
    assert out == "ids 5 to 9 (5 rows)\n" and "10 live rows in" in err


def test_tz_aware_times_go_in_exactly_and_expire_as_instants(tmp_path, capsys):
    first = tmp_path / "a.csv"
    first.write_text(
        "t,v\n2026-03-02T06:00:00Z,1\n2026-03-02T07:00:00Z,2\n2026-03-02T08:00:00+01:00,3\n"
    )
    later = tmp_path / "b.csv"  # fractional notation, whole seconds: exact in seconds
    later.write_text("t,v\n2026-03-02T09:00:00.000Z,4\n,5\n2026-03-02T10:00:00.000Z,6\n")
    finer = tmp_path / "c.csv"
    finer.write_text("t,v\n2026-03-02T11:00:00.250Z,7\n")
    folder = tmp_path / "g"
    assert (
        run(["append", folder, first, "--x", "t", "--y", "v", "-q"], capsys)[1]
        == "ids 0 to 2 (3 rows)\n"
    )
    code, out, err = run(
        ["append", folder, later, "--x", "t", "--y", "v", "--on-missing", "drop"], capsys
    )
    assert (code, out) == (0, "ids 3 to 4 (2 rows)\n") and "dropped 1 of 3 rows" in err
    code, _, err = run(["append", folder, finer, "--x", "t", "--y", "v"], capsys)
    assert code == _exits.BAD_VALUES and "cannot hold exactly" in err
    # Instants: 08:00+01:00 is 07:00 UTC, so an expiry before 07:30 UTC takes three rows,
    # and a bound without an offset is read in the axis's own zone (UTC).
    assert run(["expire", folder, "--before", "2026-03-02T07:30Z"], capsys)[1].startswith(
        "expired 3 rows"
    )
    assert run(["expire", folder, "--before", "2026-03-02 09:00"], capsys)[1].startswith(
        "expired 0 rows"
    )
    with boxwood.GrowingTree.open(folder, readonly=True) as tree:
        # Reference: the ids of the rows at or after 07:30 UTC, by the files' own text.
        assert tree.report(-np.inf, np.inf, -np.inf, np.inf)[1].tolist() == [3, 4]


def test_a_folder_that_cannot_be_made_or_written_cannot_write(tmp_path, capsys, monkeypatch):
    points = _write(tmp_path / "p.csv", {"x": np.arange(5), "y": np.arange(5)})
    code, _, err = run(["append", f"{points}/g", points, "--x", "x", "--y", "y"], capsys)
    assert code == _exits.CANNOT_WRITE and err.count("\n") == 1
    folder = tmp_path / "g"
    assert run(["append", folder, points, "--x", "x", "--y", "y", "-q"], capsys)[0] == 0
    before = _state(folder)

    def full_disk(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(boxwood.RangeTree, "save", full_disk)  # every segment file's writer
    code, _, err = run(["append", folder, points, "--x", "x", "--y", "y"], capsys)
    assert code == _exits.CANNOT_WRITE and "No space left" in err
    code, _, err = run(["expire", folder, "--before", "2.5"], capsys)
    assert code == _exits.CANNOT_WRITE and "No space left" in err
    monkeypatch.undo()
    assert _state(folder) == before and boxwood.verify_folder(folder).live_rows == 5


def test_stats_of_a_keyed_folder_with_no_live_rows_are_empty(tmp_path, capsys):
    batch = _batch(np.random.default_rng(5), 0, 30)
    folder = tmp_path / "g"
    path = _write(tmp_path / "b.csv", batch)
    assert run(["append", folder, path, *COLUMNS, "--by", "line", "-q"], capsys)[0] == 0
    assert run(["expire", folder, "--before", "2026-03-03", "-q"], capsys)[0] == 0
    boxes = _write(tmp_path / "boxes.csv", _boxes(np.random.default_rng(6), 5))
    out = tmp_path / "stats.parquet"
    code, _, err = run(["stats", folder, boxes, "--by", "line", "-o", out, "-q"], capsys)
    stats = pq.read_table(out)
    # Reference: no live row, so every box counts 0 and its statistics are missing.
    assert code == 0 and stats.column("count").to_pylist() == [0] * 5
    for name in ("sum", "min", "max", "q0.5"):
        assert stats.column(name).to_pylist() == [None] * 5, name
