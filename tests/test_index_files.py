"""Index files and pickles: round trips, damage, interrupted saves, sharing, threads.

The answers of a loaded tree are checked against the tree that was saved and, for one data
set, against numpy boolean masks (the outside reference). Damage tests run their loads in a
child process, so that a crash (rather than an exception) fails the test.
"""

from __future__ import annotations

import math
import os
import pickle
import signal
import struct
import subprocess
import sys
import textwrap
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import boxwood

LAYOUTS = ("fast", "compact")


def _column(kind: str, rng: np.random.Generator, n: int):
    """A column of one supported dtype, with ties (few distinct values)."""
    base = rng.integers(0, 40, n)
    if kind == "float64":
        return base * 0.25 - 3.0
    if kind == "float32":
        return (base * 0.5).astype(np.float32)
    if kind == "int64":
        return base.astype(np.int64) - 20
    if kind == "uint8":
        return base.astype(np.uint8)
    if kind == "datetime64[s]":
        return np.datetime64("2026-03-01T06:00:00") + base.astype("timedelta64[m]")
    if kind == "timedelta64[ms]":
        return (base * 1500).astype("timedelta64[ms]")
    if kind == "tz-aware":
        return pd.Series(
            pd.Timestamp("2026-03-01 06:00", tz="Europe/Paris") + pd.to_timedelta(base, "min")
        )
    raise AssertionError(kind)


KINDS = ("float64", "float32", "int64", "uint8", "datetime64[s]", "timedelta64[ms]", "tz-aware")


def _bounds_for(col, rng: np.random.Generator, m: int):
    """`m` random lower and upper bounds drawn from the column's own values."""
    ends = np.sort(rng.integers(0, len(col), (m, 2)), axis=1)
    if isinstance(col, pd.Series):  # tz-aware: bounds stay tz-aware Series
        ordered = col.sort_values(ignore_index=True)
        return ordered.iloc[ends[:, 0]].reset_index(drop=True), ordered.iloc[
            ends[:, 1]
        ].reset_index(drop=True)
    ordered = np.sort(col)
    return ordered[ends[:, 0]], ordered[ends[:, 1]]


def _answers(tree: boxwood.RangeTree, boxes) -> tuple:
    x_lo, x_hi, y_lo, y_hi = boxes
    counts = tree.count(x_lo, x_hi, y_lo, y_hi)
    offsets, rows = tree.report(x_lo, x_hi, y_lo, y_hi, ordered=True)
    sums = tree.sum(x_lo, x_hi, y_lo, y_hi) if tree.weights_dtype is not None else None
    return counts, offsets, rows, sums


def _assert_same(a: tuple, b: tuple) -> None:
    for u, v in zip(a, b):
        if u is None or v is None:
            assert u is None and v is None
        else:
            np.testing.assert_array_equal(u, v)


def _reopened(tree: boxwood.RangeTree, how: str, tmp_path: Path) -> boxwood.RangeTree:
    if how == "pickle":
        return pickle.loads(pickle.dumps(tree))
    path = tmp_path / f"t-{how}.boxwood"
    tree.save(path)
    return boxwood.load(path, mmap=(how == "mmap"))


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("x_kind", KINDS)
@pytest.mark.parametrize("y_kind", KINDS)
def test_every_dtype_pair_round_trips(tmp_path, x_kind, y_kind, layout):
    rng = np.random.default_rng(abs(hash((x_kind, y_kind, layout))) % 2**32)
    n = 300
    x, y = _column(x_kind, rng, n), _column(y_kind, rng, n)
    weights = rng.integers(-5, 50, n) if x_kind != y_kind else rng.random(n)
    tree = boxwood.RangeTree(x, y, weights=weights, layout=layout)
    boxes = (*_bounds_for(x, rng, 50), *_bounds_for(y, rng, 50))
    expected = _answers(tree, boxes)
    # Reference: numpy's / pandas' own min and max of the columns.
    assert tree.x_range == (x.min(), x.max()) and tree.y_range == (y.min(), y.max())
    for how in ("mmap", "read", "pickle"):
        again = _reopened(tree, how, tmp_path)
        assert repr(again) == repr(tree)
        assert (again.x_range, again.y_range) == (tree.x_range, tree.y_range)
        assert (again.x_dtype, again.y_dtype) == (tree.x_dtype, tree.y_dtype)
        assert again.source == {"mmap": "memory-mapped file", "read": "read from file"}.get(
            how, "bytes"
        )
        _assert_same(_answers(again, boxes), expected)


@pytest.mark.parametrize("layout", LAYOUTS)
def test_a_loaded_tree_answers_as_numpy_masks_do(tmp_path, layout):
    """Reference: numpy boolean masks over the raw columns."""
    rng = np.random.default_rng(5)
    x, y, w = rng.normal(size=2000), rng.integers(0, 100, 2000), rng.integers(1, 9, 2000)
    boxwood.RangeTree(x, y, weights=w, layout=layout).save(tmp_path / "docks.boxwood")
    tree = boxwood.load(tmp_path / "docks.boxwood")
    for _ in range(30):
        a, b = np.sort(rng.normal(size=2))
        c, d = np.sort(rng.integers(0, 100, 2))
        mask = (x >= a) & (x <= b) & (y >= c) & (y <= d)
        assert tree.count(a, b, c, d) == mask.sum()
        assert tree.sum(a, b, c, d) == w[mask].sum()
        np.testing.assert_array_equal(
            tree.report(a, b, c, d, ordered=True)[1], np.flatnonzero(mask)
        )


def test_rows_dropped_by_from_frame_survive_a_save(tmp_path):
    frame = pd.DataFrame({"t": [0.0, np.nan, 2.0, 3.0, np.nan, 5.0], "v": [1, 2, 3, 4, 5, 6]})
    with pytest.warns(boxwood.MissingValuesDropped):
        tree = boxwood.RangeTree.from_frame(frame, x="t", y="v", on_missing="drop")
    for how in ("mmap", "pickle"):
        again = _reopened(tree, how, tmp_path)
        assert again.rows_dropped == 2
        assert (again.x_name, again.y_name) == ("t", "v")
        # Positions in the original frame, not in the tree (reference: the frame itself).
        np.testing.assert_array_equal(again.report(0, 10, 0, 10, ordered=True)[1], [0, 2, 3, 5])


def test_an_empty_tree_round_trips(tmp_path):
    tree = boxwood.RangeTree(np.array([]), np.array([], dtype=np.int64))
    for how in ("mmap", "read", "pickle"):
        again = _reopened(tree, how, tmp_path)
        assert len(again) == 0 and again.count(-1, 1, -1, 1) == 0
        assert again.x_range is None and again.y_range is None


# ---------------------------------------------------------------- damage

_DAMAGE_CHILD = textwrap.dedent(
    """
    import sys
    import numpy as np
    import boxwood

    src, cases, seed = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    good = open(src, "rb").read()
    tree = boxwood.load(src)
    rng = np.random.default_rng(seed)
    lo = rng.uniform(-3, 3, 64); hi = lo + rng.uniform(0, 3, 64)
    c = rng.integers(0, 60, 64); d = c + rng.integers(0, 40, 64)
    def answers(t):
        o, r = t.report(lo, hi, c, d, ordered=True)
        return t.count(lo, hi, c, d), o, r, t.sum(lo, hi, c, d)
    expected = answers(tree)
    scratch = src + ".damaged"
    outcomes = {"refused": 0, "same": 0}
    for case in range(cases):
        b = bytearray(good)
        how = case % 4
        if how == 0:
            for _ in range(rng.integers(1, 9)):
                b[rng.integers(len(b))] ^= int(rng.integers(1, 256))
        elif how == 1:
            del b[rng.integers(len(b)):]
        elif how == 2:
            b += bytes(rng.integers(0, 256, rng.integers(1, 300)).astype(np.uint8))
        else:
            at = rng.integers(len(b))
            b[at:at + 64] = bytes(rng.integers(0, 256, 64).astype(np.uint8))[: len(b) - at]
        print(case, how, flush=True)
        try:
            if case % 3 == 0:
                t = boxwood._tree.from_bytes(bytes(b))  # the unpickling path
            else:
                with open(scratch, "wb") as f:
                    f.write(b)
                t = boxwood.load(scratch, mmap=(case % 3 == 1))
            # Parts other than the count path are checked at their first use: a count, a
            # report or a sum may refuse the file too.
            got = answers(t)
        except boxwood.IndexFileError:
            outcomes["refused"] += 1
            continue
        for u, v in zip(got, expected):
            assert np.array_equal(u, v), ("case", case, "loaded but answered differently")
        outcomes["same"] += 1
    print("outcomes", outcomes["refused"], outcomes["same"], flush=True)
    """
)


@pytest.mark.parametrize("layout", LAYOUTS)
def test_damaged_files_are_refused_or_harmless(tmp_path, layout):
    """Thousands of flipped, cut, extended and overwritten files from a fixed seed, loaded in
    a child process: each either raises IndexFileError or (damage only in padding) answers
    exactly as the undamaged file did. A crash of the child fails the test."""
    rng = np.random.default_rng(11)
    n = 700
    tree = boxwood.RangeTree(
        rng.uniform(-3, 3, n), rng.integers(0, 80, n), weights=rng.integers(0, 9, n), layout=layout
    )
    src = tmp_path / "good.boxwood"
    tree.save(src)
    cases = 2500
    child = subprocess.run(
        [sys.executable, "-c", _DAMAGE_CHILD, str(src), str(cases), "3"],
        capture_output=True,
        text=True,
        timeout=600,
    )
    tail = child.stdout.strip().splitlines()[-3:]
    assert child.returncode == 0, (child.returncode, tail, child.stderr[-2000:])
    refused, same = map(int, tail[-1].split()[1:])
    assert refused + same == cases
    assert refused > cases * 0.9  # almost every byte of a small file is checksummed


# ---------------------------------------------------------------- interrupted saves

_SAVER_CHILD = textwrap.dedent(
    """
    import sys
    import numpy as np
    import boxwood

    path, n = sys.argv[1], int(sys.argv[2])
    rng = np.random.default_rng(int(sys.argv[3]))
    tree = boxwood.RangeTree(rng.random(n), rng.random(n))
    print("built", flush=True)
    while True:
        tree.save(path)
        print("saved", flush=True)
    """
)


def test_a_killed_save_leaves_the_previous_file_loadable(tmp_path):
    path = tmp_path / "trips.boxwood"
    rng = np.random.default_rng(1)
    first = boxwood.RangeTree(rng.random(5000), rng.random(5000))
    first.save(path)
    expected = first.count([0.1, 0.4], [0.6, 0.9], 0.2, 0.7)
    kill_rng = np.random.default_rng(2)
    for attempt in range(3):
        saver = subprocess.Popen(
            [sys.executable, "-c", _SAVER_CHILD, str(path), "3000000", str(attempt)],
            stdout=subprocess.PIPE,
            text=True,
        )
        assert saver.stdout is not None
        assert saver.stdout.readline().strip() == "built"
        time.sleep(float(kill_rng.uniform(0.0, 0.8)))  # lands mid-write most of the time
        saver.send_signal(signal.SIGKILL)
        saver.wait(timeout=60)
        again = boxwood.load(path)  # the old tree, or a complete new one: never half of one
        if len(again) == 5000:
            np.testing.assert_array_equal(again.count([0.1, 0.4], [0.6, 0.9], 0.2, 0.7), expected)
        else:
            assert len(again) == 3_000_000
    leftovers = {p.name for p in tmp_path.iterdir()} - {"trips.boxwood"}
    assert all(
        name.startswith(".trips.boxwood.") and name.endswith(".partial") for name in leftovers
    )


def test_a_failed_save_keeps_the_old_file(tmp_path):
    path = tmp_path / "trips.boxwood"
    boxwood.RangeTree([1.0, 2.0], [3.0, 4.0]).save(path)
    before = path.read_bytes()
    with pytest.raises(FileNotFoundError):
        boxwood.RangeTree([1.0], [1.0]).save(tmp_path / "missing" / "trips.boxwood")
    with pytest.raises(IsADirectoryError):
        boxwood.RangeTree([1.0], [1.0]).save(tmp_path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["trips.boxwood"]


# ---------------------------------------------------------------- sharing and threads

_READER_CHILD = textwrap.dedent(
    """
    import sys, time
    import numpy as np
    import boxwood
    t0 = time.perf_counter()
    tree = boxwood.load(sys.argv[1], mmap=True)
    print(tree.source, len(tree), time.perf_counter() - t0)
    lo = np.linspace(0, 0.9, 100)
    print(" ".join(map(str, tree.count(lo, lo + 0.1, 0.25, 0.75))))
    """
)


def test_a_file_saved_by_one_process_loads_mapped_in_another(tmp_path):
    rng = np.random.default_rng(3)
    x, y = rng.random(200_000), rng.random(200_000)
    tree = boxwood.RangeTree(x, y)
    tree.save(tmp_path / "shared.boxwood")
    out = subprocess.run(
        [sys.executable, "-c", _READER_CHILD, str(tmp_path / "shared.boxwood")],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    ).stdout.splitlines()
    assert out[0].startswith("memory-mapped file 200000 ")
    lo = np.linspace(0, 0.9, 100)
    counts = np.array(out[1].split(), dtype=np.int64)
    # Reference: numpy boolean masks.
    expected = [((x >= a) & (x <= a + 0.1) & (y >= 0.25) & (y <= 0.75)).sum() for a in lo]
    np.testing.assert_array_equal(counts, expected)


@pytest.mark.parametrize("how", ["built", "mmap"])
def test_many_threads_get_the_answers_one_thread_gets(tmp_path, how):
    rng = np.random.default_rng(4)
    n = 100_000
    tree = boxwood.RangeTree(rng.random(n), rng.random(n), weights=rng.integers(0, 5, n))
    if how == "mmap":
        tree = _reopened(tree, "mmap", tmp_path)
    batches = []
    for _ in range(16):
        lo = rng.random((4, 500)) * 0.8
        batches.append((lo[0], lo[0] + lo[1] / 20, lo[2], lo[2] + lo[3] / 20))
    alone = [_answers(tree, b) for b in batches]
    scalar_alone = [tree.count(b[0][0], b[1][0], b[2][0], b[3][0]) for b in batches]
    start = threading.Barrier(8)

    def work(i: int):
        start.wait()
        b = batches[i % len(batches)]
        return i, _answers(tree, b), tree.count(b[0][0], b[1][0], b[2][0], b[3][0])

    with ThreadPoolExecutor(8) as pool:
        results = list(pool.map(work, range(64)))
    for i, got, scalar in results:
        _assert_same(got, alone[i % len(batches)])
        assert scalar == scalar_alone[i % len(batches)]


# ---------------------------------------------------------------- the bad-file table


def _damaged(tmp_path: Path, name: str, change) -> Path:
    good = tmp_path / "good.boxwood"
    if not good.exists():
        boxwood.RangeTree(np.arange(1000.0), np.arange(1000) % 7).save(good)
    data = bytearray(good.read_bytes())
    change(data)
    path = tmp_path / name
    path.write_bytes(bytes(data))
    return path


# Section kinds of format version 2 (docs/index-format.md).
_X_KEYS, _COUNT_LINES, _LEAF_ROWS, _WEIGHTS = 1, 5, 9, 10


def _section(b: bytes | bytearray, kind: int, index: int = 0) -> int:
    """The byte offset of a section, from the file's section table (docs/index-format.md:
    32-byte entries from byte 80, kind and index as u32, offset as u64)."""
    count = int.from_bytes(b[32:36], "little")
    for i in range(count):
        e = 80 + 32 * i
        if (int.from_bytes(b[e : e + 4], "little"), int.from_bytes(b[e + 4 : e + 8], "little")) == (
            kind,
            index,
        ):
            return int.from_bytes(b[e + 8 : e + 16], "little")
    raise LookupError((kind, index))


def _set(at: int, value: bytes):
    def change(b: bytearray) -> None:
        b[at : at + len(value)] = value

    return change


BAD_FILES = [
    # (what, change to a good file, exception, words in the message)
    ("empty file", lambda b: b.clear(), boxwood.TruncatedIndexFileError, r"empty \(0 bytes\)"),
    (
        "a Parquet file",
        lambda b: b.__setitem__(slice(None), b"PAR1" + bytes(100)),
        boxwood.NotAnIndexFileError,
        "wrong magic",
    ),
    (
        "newer format version",
        _set(8, (3).to_bytes(4, "little")),
        boxwood.UnsupportedIndexFileError,
        "version 3.*upgrade boxwood",
    ),
    (
        "format version 1",
        _set(8, (1).to_bytes(4, "little")),
        boxwood.UnsupportedIndexFileError,
        "version 1 .*rebuild the index",
    ),
    (
        "other byte order",
        _set(12, (0x01020304).to_bytes(4, "big")),
        boxwood.UnsupportedIndexFileError,
        "byte order",
    ),
    (
        "cut short",
        lambda b: b.__delitem__(slice(len(b) // 2, None)),
        boxwood.TruncatedIndexFileError,
        "truncated",
    ),
    (
        "bytes appended",
        lambda b: b.extend(b"\0" * 10),
        boxwood.CorruptIndexFileError,
        "past its end",
    ),
    ("a flipped bit in the header", _set(17, b"\x01"), boxwood.ChecksumMismatchError, "header"),
    (
        "a flipped bit in the keys",
        lambda b: b.__setitem__(_section(b, 1) + 100, b[_section(b, 1) + 100] ^ 4),
        boxwood.ChecksumMismatchError,
        r"section 'x keys' is damaged \(checksum mismatch\)",
    ),
]


@pytest.mark.parametrize(
    ("what", "change", "exc", "words"), BAD_FILES, ids=[b[0] for b in BAD_FILES]
)
@pytest.mark.parametrize("mmap", [True, False])
def test_bad_files_raise_their_own_exception(tmp_path, what, change, exc, words, mmap):
    path = _damaged(tmp_path, what.replace(" ", "-"), change)
    with pytest.raises(exc, match=words) as info:
        boxwood.load(path, mmap=mmap)
    assert isinstance(info.value, boxwood.IndexFileError) and isinstance(info.value, ValueError)
    assert str(path) in str(info.value)
    with pytest.raises(exc):
        boxwood._tree.from_bytes(path.read_bytes())


def test_missing_paths_raise_the_usual_os_errors(tmp_path):
    with pytest.raises(FileNotFoundError) as info:
        boxwood.load(tmp_path / "nope.boxwood")
    assert info.value.filename == str(tmp_path / "nope.boxwood")
    with pytest.raises(IsADirectoryError):
        boxwood.load(tmp_path)


def test_a_pickle_of_something_else_is_refused():
    with pytest.raises(boxwood.NotAnIndexFileError):
        boxwood._tree.from_bytes(b"definitely not a tree")


def test_the_readme_example_runs_as_written(tmp_path, monkeypatch, capsys):
    import re

    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Saving, loading") : text.index("## pandas")]
    code = "\n".join(re.findall(r"```python\n(.*?)```", section, flags=re.S))
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "README.md", "exec"), {})
    printed = capsys.readouterr().out.splitlines()
    assert printed[0] == "True"
    assert printed[1].startswith("MemoryEstimate(index_bytes=")
    assert (tmp_path / "returns.boxwood").exists()


@pytest.mark.parametrize("protocol", [2, 4, 5])
def test_pickles_of_every_protocol_and_out_of_band_buffers(protocol):
    rng = np.random.default_rng(8)
    tree = boxwood.RangeTree(rng.random(5000), rng.integers(0, 50, 5000), layout="compact")
    boxes = (rng.random(40) * 0.5, rng.random(40) * 0.5 + 0.5, 10, 40)
    expected = _answers(tree, boxes)
    _assert_same(_answers(pickle.loads(pickle.dumps(tree, protocol=protocol)), boxes), expected)
    if protocol == 5:
        buffers: list = []
        stream = pickle.dumps(tree, protocol=5, buffer_callback=buffers.append)
        assert len(buffers) == 1 and len(stream) < 200  # the index travels out of band
        again = pickle.loads(stream, buffers=[bytearray(b.raw()) for b in buffers])
        _assert_same(_answers(again, boxes), expected)


def test_from_bytes_wants_a_buffer():
    with pytest.raises(TypeError, match="bytes or a buffer"):
        boxwood._tree.from_bytes(12345)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "error",
    [
        boxwood.IndexFileError,
        boxwood.NotAnIndexFileError,
        boxwood.UnsupportedIndexFileError,
        boxwood.TruncatedIndexFileError,
        boxwood.ChecksumMismatchError,
        boxwood.CorruptIndexFileError,
        boxwood.InternalError,
    ],
)
def test_errors_cross_process_boundaries_as_themselves(error):
    again = pickle.loads(pickle.dumps(error("trips.boxwood: damaged")))
    assert type(again) is error and str(again) == "trips.boxwood: damaged"


def test_paths_may_be_str_bytes_or_pathlike(tmp_path):
    tree = boxwood.RangeTree([1.0, 2.0], [3.0, 4.0])
    paths = (str(tmp_path / "a"), os.fsencode(tmp_path / "b"), tmp_path / "c")
    for path in paths:
        tree.save(path)
        assert boxwood.load(path).count(0, 5, 0, 5) == 2


def test_reserved_bytes_must_be_zero(tmp_path):
    path = _damaged(tmp_path, "reserved", _set(72, b"\x01"))
    with pytest.raises(boxwood.CorruptIndexFileError, match="reserved"):
        boxwood.load(path)


# ---------------------------------------------------------------- checks before first use


def _weighted_file(tmp_path: Path, layout: str = "compact") -> tuple[boxwood.RangeTree, Path]:
    rng = np.random.default_rng(5)
    n = 5000
    tree = boxwood.RangeTree(
        rng.random(n), rng.random(n), weights=rng.integers(0, 100, n), layout=layout
    )
    path = tmp_path / "weighted.boxwood"
    tree.save(path)
    return tree, path


@pytest.mark.parametrize("layout", LAYOUTS)
def test_damaged_weights_fail_the_first_sum_not_a_count(tmp_path, layout):
    """A load checks the count path; the weights are checked before the first sum, so a
    damaged weights section leaves counts (and reports) working and makes the sum raise
    the file's own error. A full verification refuses the file at load."""
    tree, path = _weighted_file(tmp_path, layout)
    data = bytearray(path.read_bytes())
    height = tree.height
    at = _section(data, _WEIGHTS, height) + 8 * 1234
    data[at] ^= 0x20
    path.write_bytes(bytes(data))
    loaded = boxwood.load(path)
    assert loaded.verified == ("count path",)
    lo = np.linspace(0, 0.8, 50)
    assert np.array_equal(loaded.count(lo, lo + 0.2, 0.1, 0.9), tree.count(lo, lo + 0.2, 0.1, 0.9))
    assert loaded.count(0.1, 0.6, 0.2, 0.7) == tree.count(0.1, 0.6, 0.2, 0.7)
    assert loaded.verified == ("count path",), "a count checks nothing more"
    with pytest.raises(boxwood.ChecksumMismatchError, match=f"weights of level {height}"):
        loaded.sum(0.1, 0.6, 0.2, 0.7)
    with pytest.raises(boxwood.ChecksumMismatchError):  # the batch path, and again
        loaded.sum(lo, lo + 0.2, 0.1, 0.9)
    _, rows = loaded.report(0.1, 0.6, 0.2, 0.7, ordered=True)
    assert np.array_equal(rows, tree.report(0.1, 0.6, 0.2, 0.7, ordered=True)[1])
    assert loaded.verified == ("count path", "cascade bits", "row ids")
    with pytest.raises(boxwood.ChecksumMismatchError):
        boxwood.load(path, verify="full")
    with pytest.raises(boxwood.ChecksumMismatchError):  # not written again under new sums
        loaded.save(tmp_path / "again.boxwood")


@pytest.mark.parametrize("mmap", [True, False])
def test_a_failed_check_before_first_use_names_the_file(tmp_path, capsys, mmap):
    """The cascade bits, row ids and weights are checked at their first query, maybe long
    after the load: the error that query raises is the file's own and names the file's path.
    The same bytes unpickled have no path, and their error names none."""
    tree, path = _weighted_file(tmp_path)
    data = bytearray(path.read_bytes())
    data[_section(data, _WEIGHTS, tree.height) + 8 * 99] ^= 0x01
    damaged = tmp_path / "damaged-weights.boxwood"
    damaged.write_bytes(bytes(data))
    loaded = boxwood.load(damaged, mmap=mmap)
    assert loaded.count(0.1, 0.6, 0.2, 0.7) == tree.count(0.1, 0.6, 0.2, 0.7)
    for call in (
        lambda: loaded.sum(0.1, 0.6, 0.2, 0.7),
        lambda: loaded.sum(np.array([0.1, 0.3]), 0.9, 0.0, 1.0),
    ):
        with pytest.raises(boxwood.ChecksumMismatchError) as raised:
            call()
        message = str(raised.value)
        assert message.startswith(f"{damaged}: index file section 'weights of level")
    # `boxwood sum` reports it as a bad index file, not as bad values of the boxes file.
    from boxwood import cli
    from boxwood.cli import _exits

    boxes = tmp_path / "boxes.csv"
    boxes.write_text("x_lo,x_hi,y_lo,y_hi\n0.1,0.6,0.2,0.7\n")
    assert cli.main(["sum", str(damaged), str(boxes), "-q"]) == _exits.BAD_FILE
    err = capsys.readouterr().err
    assert f"{damaged}: index file section 'weights of level" in err and str(boxes) not in err
    unpickled = boxwood._tree.from_bytes(bytes(data))
    with pytest.raises(boxwood.ChecksumMismatchError) as raised:
        unpickled.sum(0.1, 0.6, 0.2, 0.7)
    assert str(raised.value).startswith("index file section 'weights of level")
    assert str(damaged) not in str(raised.value)


def test_every_command_reports_a_part_failing_its_first_use_as_a_bad_index_file(tmp_path, capsys):
    """Whichever command first reads a damaged part (the row ids for a join, the weights for
    a grid of sums), it exits as for a bad index file and names that file, not the boxes."""
    from boxwood import cli
    from boxwood.cli import _exits

    tree, path = _weighted_file(tmp_path)
    data = bytearray(path.read_bytes())
    data[_section(data, _LEAF_ROWS) + 4 * 321] ^= 0x01
    data[_section(data, _WEIGHTS, tree.height) + 8 * 99] ^= 0x01
    damaged = tmp_path / "damaged.boxwood"
    damaged.write_bytes(bytes(data))
    boxes = tmp_path / "boxes.csv"
    boxes.write_text("x_lo,x_hi,y_lo,y_hi\n0.0,1.0,0.0,1.0\n")
    out = tmp_path / "out.csv"
    commands = {
        "leaf rows": ["join", str(damaged), str(boxes), "-o", str(out), "-q"],
        "weights": ["grid", str(damaged), "--x-bins", "4", "--y-bins", "4", "--sum", "-q"],
    }
    for part, argv in commands.items():
        code = cli.main(argv)
        err = capsys.readouterr().err
        assert code == _exits.BAD_FILE, err
        assert f"{damaged}: index file section '{part}" in err, err
        assert "Traceback" not in err and str(boxes) not in err


def test_a_loaded_tree_lists_what_it_has_checked(tmp_path):
    tree, path = _weighted_file(tmp_path)
    everything = ("count path", "cascade bits", "row ids", "weights")
    assert tree.verified == everything
    assert boxwood.load(path, verify="full").verified == everything
    loaded = boxwood.load(path, mmap=False)
    assert loaded.verified == ("count path",)
    loaded.sum(0, 1, 0, 1)
    assert loaded.verified == ("count path", "cascade bits", "weights")
    unweighted = boxwood.RangeTree(np.arange(10.0), np.arange(10.0))
    assert unweighted.verified == ("count path", "cascade bits", "row ids")
    with pytest.raises(ValueError, match="verify must be 'checksums' or 'full'"):
        boxwood.load(path, verify="some")


def _swap_two_digits(data: bytearray) -> None:
    """Swap two elements' digits in the first line of the count cascade's first step: every
    count of the line and every block's balance still hold (the root step is one block), but
    the digits are no longer those the cascade bits give. A line is 16 u16 counts, then four
    u64 bit planes (docs/index-format.md)."""
    line = _section(data, _COUNT_LINES, 0)
    planes = [
        int.from_bytes(data[line + 32 + 8 * j : line + 40 + 8 * j], "little") for j in range(4)
    ]

    def digit(k: int) -> int:
        return sum(((p >> k) & 1) << j for j, p in enumerate(planes))

    other = next(k for k in range(1, 64) if digit(k) != digit(0))
    for j, p in enumerate(planes):
        a, b = p & 1, (p >> other) & 1
        p = (p & ~(1 | 1 << other)) | b | a << other
        data[line + 32 + 8 * j : line + 40 + 8 * j] = p.to_bytes(8, "little")


def test_full_verification_refuses_a_derivable_section_that_is_wrong(tmp_path):
    """A count cascade with good checksums and counts, but not the one the cascade bits
    give: a default load takes it (its reads stay in bounds, some counts go wrong), a full
    verification and `boxwood verify` refuse it, naming the count cascade."""
    tree, path = _weighted_file(tmp_path)
    data = bytearray(path.read_bytes())
    _swap_two_digits(data)
    path.write_bytes(boxwood._boxwood._rehash_for_tests(bytes(data)))
    loaded = boxwood.load(path)
    lo = np.linspace(0, 0.9, 200)
    counts = loaded.count(lo, lo + 0.1, 0.0, 1.0)
    assert counts.min() >= 0 and counts.max() <= len(tree)
    with pytest.raises(boxwood.CorruptIndexFileError, match="count cascade is not the one"):
        boxwood.load(path, verify="full")


def test_full_verification_derives_float_prefix_sums_again(tmp_path, capsys):
    """Float prefix sums are rounded, so the checks before first use cannot tell a wrong
    one; a full verification derives every level's sums again from the leaf weights with
    the build's own summation and compares them bit for bit. One sum of level 3 one unit in
    the last place off, checksums to match: a default load takes it and its sums stay within
    rounding of ``math.fsum`` (Python's correctly rounded sum, the outside reference), while
    ``load(verify="full")`` and ``boxwood verify`` refuse the file, naming the level."""
    from boxwood import cli
    from boxwood.cli import _exits

    rng = np.random.default_rng(11)
    n = 5000
    x, y, w = rng.random(n), rng.random(n), rng.normal(0.0, 1e6, n)
    tree = boxwood.RangeTree(x, y, weights=w, layout="compact")
    path = tmp_path / "float-weights.boxwood"
    tree.save(path)
    everything = ("count path", "cascade bits", "row ids", "weights")
    assert boxwood.load(path, verify="full").verified == everything
    assert cli.main(["verify", str(path)]) == _exits.OK
    assert "the prefix sums (integer and float;" in capsys.readouterr().out

    data = bytearray(path.read_bytes())
    at = _section(data, _WEIGHTS, 3) + 8 * 777
    (stored,) = struct.unpack("<d", data[at : at + 8])
    data[at : at + 8] = struct.pack("<q", struct.unpack("<q", struct.pack("<d", stored))[0] + 1)
    crafted = tmp_path / "crafted.boxwood"
    crafted.write_bytes(boxwood._boxwood._rehash_for_tests(bytes(data)))

    loaded = boxwood.load(crafted)
    inside = (x >= 0.2) & (x <= 0.7) & (y >= 0.1) & (y <= 0.8)
    assert loaded.sum(0.2, 0.7, 0.1, 0.8) == pytest.approx(math.fsum(w[inside]), rel=1e-9)
    assert loaded.verified == ("count path", "cascade bits", "weights")
    with pytest.raises(boxwood.CorruptIndexFileError, match="float prefix sums of level 3"):
        boxwood.load(crafted, verify="full")
    assert cli.main(["verify", str(crafted)]) == _exits.BAD_FILE
    err = capsys.readouterr().err
    assert str(crafted) in err and "float prefix sums of level 3" in err


_CRAFTED_CHILD = textwrap.dedent(
    """
    import sys
    import numpy as np
    import boxwood
    from boxwood._boxwood import _rehash_for_tests

    good, cases = open(sys.argv[1], "rb").read(), int(sys.argv[2])
    rng = np.random.default_rng(int(sys.argv[3]))
    lo = rng.uniform(-3, 3, 32); hi = lo + rng.uniform(0, 3, 32)
    c = rng.integers(-5, 60, 32); d = c + rng.integers(0, 40, 32)
    outcomes = {"refused": 0, "answered": 0}
    for case in range(cases):
        b = bytearray(good)
        for _ in range(rng.integers(1, 5)):
            at = int(rng.integers(96, len(b)))   # past the header: the sections and table
            b[at] ^= int(rng.integers(1, 256))
        b = _rehash_for_tests(bytes(b))
        print(case, flush=True)
        for verify in ("checksums", "full"):
            try:
                t = boxwood._tree.from_bytes(b) if verify == "checksums" else None
                if t is None:
                    open(sys.argv[1] + ".crafted", "wb").write(b)
                    t = boxwood.load(sys.argv[1] + ".crafted", verify="full")
                n = len(t)
                counts = t.count(lo, hi, c, d)
                assert counts.min() >= 0 and counts.max() <= n, counts
                assert 0 <= t.count(-np.inf, np.inf, -np.inf, np.inf) <= n
                offsets, rows = t.report(lo, hi, c, d)
                assert rows.size == 0 or (rows.min() >= 0 and rows.max() < n)
                t.sum(lo, hi, c, d)
                t.grid(np.linspace(-3, 3, 5), np.linspace(0, 80, 5))
                outcomes["answered"] += 1
            except boxwood.IndexFileError:
                outcomes["refused"] += 1
            except OverflowError:
                outcomes["answered"] += 1    # an int sum the crafted weights make too large
    print("outcomes", outcomes["refused"], outcomes["answered"], flush=True)
    """
)


@pytest.mark.parametrize("layout", LAYOUTS)
def test_crafted_files_whose_checksums_hold_never_crash(tmp_path, layout):
    """Hundreds of files changed past the header with every checksum recomputed, loaded in a
    child process by default and with a full verification: each is refused with an
    IndexFileError or answers within the tree's bounds (no InternalError, no crash, no
    hang). The Rust fuzz targets (rust_core/fuzz) do the same far longer."""
    rng = np.random.default_rng(3)
    n = 600
    tree = boxwood.RangeTree(
        rng.uniform(-3, 3, n), rng.integers(0, 80, n), weights=rng.integers(0, 9, n), layout=layout
    )
    src = tmp_path / "good.boxwood"
    tree.save(src)
    cases = 300
    child = subprocess.run(
        [sys.executable, "-c", _CRAFTED_CHILD, str(src), str(cases), "5"],
        capture_output=True,
        text=True,
        timeout=600,
    )
    tail = child.stdout.strip().splitlines()[-3:]
    assert child.returncode == 0, (child.returncode, tail, child.stderr[-2000:])
    refused, answered = map(int, tail[-1].split()[1:])
    assert refused + answered == 2 * cases
    assert refused > 0 and answered > 0
