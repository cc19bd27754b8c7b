"""Answers checked against references from outside this project.

Each check names its source beside it. The data are chosen so the outside answer is exact
(integer or dyadic coordinates, edges that are exact floats), so no check can be flaky.
"""

from __future__ import annotations

import math
import sqlite3

import numpy as np
import pytest
from scipy.spatial import cKDTree

import boxwood
from _optional import missing

LAYOUTS = ("fast", "compact")
INCLUSIVE = ("both", "neither", "left", "right")


# --------------------------------------------------------------------------------------------
# scipy.spatial.cKDTree: Chebyshev balls are closed squares
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("scale", [1.0, 0.25, 2.0**-20])
def test_square_boxes_match_ckdtree_chebyshev_balls(layout: str, scale: float) -> None:
    # Points on a coarse grid (many ties, many points exactly on box edges); every coordinate,
    # centre and radius is a small integer times a power of two, so cx ± r is exact in float64.
    rng = np.random.default_rng(20310)
    n, q = 3000, 300
    pts = rng.integers(0, 60, size=(n, 2)) * scale
    centres = rng.integers(-5, 65, size=(q, 2)) * scale
    r = rng.integers(0, 12, size=q) * scale
    tree = boxwood.RangeTree(pts[:, 0], pts[:, 1], layout=layout)
    x_lo, x_hi = centres[:, 0] - r, centres[:, 0] + r
    y_lo, y_hi = centres[:, 1] - r, centres[:, 1] + r

    # SciPy docs, cKDTree.query_ball_point: p=inf is the max-norm (Chebyshev) distance and the
    # ball is closed (points at distance <= r), i.e. the square [cx-r, cx+r] x [cy-r, cy+r].
    kd = cKDTree(pts)
    expected_counts = kd.query_ball_point(centres, r, p=np.inf, return_length=True)
    expected_rows = kd.query_ball_point(centres, r, p=np.inf)

    counts = tree.count(x_lo, x_hi, y_lo, y_hi, inclusive="both")
    np.testing.assert_array_equal(counts, expected_counts)
    assert expected_counts.sum() > q  # the comparison is not vacuous
    offsets, rows = tree.report(x_lo, x_hi, y_lo, y_hi, inclusive="both", ordered=True)
    for i in range(q):
        assert rows[offsets[i] : offsets[i + 1]].tolist() == sorted(expected_rows[i])


# --------------------------------------------------------------------------------------------
# numpy.histogram2d: a grid of boxes, half-open except the last bin on each axis
# --------------------------------------------------------------------------------------------


def _histogram_data(kind: str, rng: np.random.Generator):
    if kind == "random":
        x = rng.normal(size=20_000)  # some fall outside the edges: histogram2d drops them
        y = rng.uniform(-1.5, 3.5, size=20_000)
        x_edges = np.linspace(-2.5, 2.5, 13)
        y_edges = np.array([-1.0, -0.3, 0.0, 0.5, 1.7, 2.0, 3.0])
    else:  # every point on an edge line, including the outer ones
        x = rng.integers(0, 11, size=5000).astype(np.float64)
        y = rng.integers(-2, 9, size=5000).astype(np.float64)
        x_edges = np.arange(0.0, 11.0)
        y_edges = np.array([-2.0, 0.0, 1.0, 4.0, 5.0, 8.0])
    return x, y, x_edges, y_edges


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("kind", ["random", "on_edges"])
def test_grid_counts_match_histogram2d_using_nextafter(layout: str, kind: str) -> None:
    x, y, xe, ye = _histogram_data(kind, np.random.default_rng(4))
    # NumPy docs, numpy.histogram (and histogram2d per axis): every bin is half-open [a, b)
    # except the last, which is closed [a, b].
    expected, _, _ = np.histogram2d(x, y, bins=[xe, ye])
    tree = boxwood.RangeTree(x, y, layout=layout)
    # v < nextafter(b, inf) is v <= b for float64 v: the closed last edge as a half-open one.
    x_hi = xe[1:].copy()
    x_hi[-1] = np.nextafter(x_hi[-1], np.inf)
    y_hi = ye[1:].copy()
    y_hi[-1] = np.nextafter(y_hi[-1], np.inf)
    got = tree.count(xe[:-1, None], x_hi[:, None], ye[None, :-1], y_hi[None, :], inclusive="left")
    assert got.shape == expected.shape
    np.testing.assert_array_equal(got, expected.astype(np.int64))
    assert expected.sum() > 0


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("kind", ["random", "on_edges"])
def test_grid_counts_match_histogram2d_using_closed_boxes(layout: str, kind: str) -> None:
    x, y, xe, ye = _histogram_data(kind, np.random.default_rng(5))
    # NumPy docs, numpy.histogram: bins are [a, b) except the last one, [a, b].
    expected, _, _ = np.histogram2d(x, y, bins=[xe, ye])
    tree = boxwood.RangeTree(x, y, layout=layout)

    def closed(x_lo, x_hi, y_lo, y_hi):
        return tree.count(x_lo, x_hi, y_lo, y_hi, inclusive="both")

    xl, xh = xe[:-1, None], xe[1:, None]
    yl, yh = ye[None, :-1], ye[None, 1:]
    open_x = (np.arange(len(xe) - 1) < len(xe) - 2)[:, None]  # all but the last x bin
    open_y = (np.arange(len(ye) - 1) < len(ye) - 2)[None, :]
    # [a, b) x [c, d) by inclusion-exclusion of closed boxes: drop the points on the upper
    # edges, except where the bin is the closed last one.
    cells = (
        closed(xl, xh, yl, yh)
        - closed(xh, xh, yl, yh) * open_x
        - closed(xl, xh, yh, yh) * open_y
        + closed(xh, xh, yh, yh) * open_x * open_y
    )
    np.testing.assert_array_equal(cells, expected.astype(np.int64))


# --------------------------------------------------------------------------------------------
# SQLite's R*Tree module (Python standard library sqlite3)
# --------------------------------------------------------------------------------------------

# SQLite docs, "The SQLite R*Tree Module": coordinates are stored as 32-bit floats (exact for
# integers below 2**24), points are boxes with min == max, and a box query is a conjunction
# of comparisons on the min/max columns.
_SQL_OPS = {"both": (">=", "<="), "neither": (">", "<"), "left": (">=", "<"), "right": (">", "<=")}


def _rtree(x: np.ndarray, y: np.ndarray, w: np.ndarray) -> sqlite3.Connection:
    con = sqlite3.connect(":memory:")
    try:
        con.execute("CREATE VIRTUAL TABLE stalls USING rtree(id, min_x, max_x, min_y, max_y)")
    except sqlite3.OperationalError as exc:
        con.close()
        missing(f"SQLite {sqlite3.sqlite_version} here is built without R*Tree: {exc}")
    con.execute("CREATE TABLE takings (id INTEGER PRIMARY KEY, cents INTEGER)")
    rows = [(i, int(a), int(a), int(b), int(b)) for i, (a, b) in enumerate(zip(x, y))]
    con.executemany("INSERT INTO stalls VALUES (?, ?, ?, ?, ?)", rows)
    con.executemany("INSERT INTO takings VALUES (?, ?)", list(enumerate(w.tolist())))
    return con


def _rtree_box(con: sqlite3.Connection, box: tuple, inclusive: str) -> tuple[list[int], int]:
    lo, hi = _SQL_OPS[inclusive]
    where = f"min_x {lo} ? AND max_x {hi} ? AND min_y {lo} ? AND max_y {hi} ?"
    ids = [r[0] for r in con.execute(f"SELECT id FROM stalls WHERE {where} ORDER BY id", box)]
    (total,) = con.execute(
        f"SELECT COALESCE(SUM(t.cents), 0) FROM stalls s JOIN takings t ON t.id = s.id "
        f"WHERE {where}",
        box,
    ).fetchone()
    return ids, total


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("spread", ["market_grid", "wide"])
def test_boxes_match_sqlite_rtree(layout: str, spread: str) -> None:
    # Invented scenario: stalls of the Larkspur night market at integer positions (metres),
    # each with its evening's takings in cents.
    rng = np.random.default_rng(17)
    n, q = 2500, 120
    if spread == "market_grid":
        x = rng.integers(0, 40, n)
        y = rng.integers(-10, 30, n)
        pick = lambda size: rng.integers(-3, 43, size)  # noqa: E731
    else:  # integers up to the edge of float32 exactness
        x = rng.integers(-(2**23), 2**23, n)
        y = rng.integers(-(2**23), 2**23, n)
        x[:50] = 2**24 - 1
        y[:50] = -(2**24) + 1
        pick = lambda size: np.concatenate(  # noqa: E731
            [rng.integers(-(2**24) + 1, 2**24, size - 4), [2**24 - 1, -(2**24) + 1] * 2]
        )
    w = rng.integers(-5000, 100_000, n)
    con = _rtree(x, y, w)
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    a, b, c, d = pick(q), pick(q), pick(q), pick(q)
    x_lo, x_hi = np.minimum(a, b), np.maximum(a, b)
    y_lo, y_hi = np.minimum(c, d), np.maximum(c, d)
    for inclusive in INCLUSIVE:
        counts = tree.count(x_lo, x_hi, y_lo, y_hi, inclusive=inclusive)
        sums = tree.sum(x_lo, x_hi, y_lo, y_hi, inclusive=inclusive)
        offsets, rows = tree.report(x_lo, x_hi, y_lo, y_hi, inclusive=inclusive, ordered=True)
        seen = 0
        for i in range(q):
            box = (int(x_lo[i]), int(x_hi[i]), int(y_lo[i]), int(y_hi[i]))
            ids, total = _rtree_box(con, box, inclusive)
            assert counts[i] == len(ids), (inclusive, box)
            assert rows[offsets[i] : offsets[i + 1]].tolist() == ids, (inclusive, box)
            assert sums[i] == total, (inclusive, box)
            seen += len(ids)
        assert seen > 0
    con.close()


# --------------------------------------------------------------------------------------------
# Operation counts: textbook bounds, checked against what a query actually reads
# --------------------------------------------------------------------------------------------
#
# RangeTree._probe runs one count or report through the engine's own query code with a probe
# that records every read (part, address, length) and every node visited; no counter of the
# build or the walk is involved. The bounds are those of the trade, from memory:
#
# - de Berg, Cheong, van Kreveld, Overmars, Computational Geometry, ch. 5: a 2-D range tree
#   with fractional cascading answers a count in O(log n) and a report in O(log n + k); the
#   x-range splits into at most two canonical nodes per level, found along two root-to-leaf
#   paths, and a balanced tree over n keys (n + 1 gaps) has ceil(log2(n + 1)) levels.
# - A static B-tree of fanout B (Bayer and McCreight) finds a key in ceil(log_B(N)) node reads;
#   here a node is one 64-byte line of eight keys.

SIZES = [1, 2, 3, 7, 8, 9, 100, 1023, 1024, 1025, 5000, 70_000]
LINE_KEYS = 8  # 64-byte lines of u64 keys


def _random_boxes(rng: np.random.Generator, n: int, count: int):
    for k in range(count):
        a, b = rng.integers(-2, max(3, n // 2) + 2, 2)
        c, d = rng.uniform(-0.1, 1.1, 2)
        if k % 3:  # mostly well-ordered boxes, some inverted
            a, b, c, d = min(a, b), max(a, b), min(c, d), max(c, d)
        yield float(a), float(b), float(c), float(d), INCLUSIVE[k % 4]


def _mask(x, y, box) -> np.ndarray:
    a, b, c, d, inclusive = box
    # Same-dtype float64 comparisons: numpy's elementwise filter is exact here.
    lo_op = np.greater_equal if inclusive in ("both", "left") else np.greater
    hi_op = np.less_equal if inclusive in ("both", "right") else np.less
    return lo_op(x, a) & hi_op(x, b) & lo_op(y, c) & hi_op(y, d)


def _reads(probe: dict, *parts: str) -> list[tuple[str, int, int, int]]:
    return [r for r in probe["reads"] if r[0] in parts]


def _lines(reads) -> set[int]:
    return {line for _, first, last, _ in reads for line in range(first, last + 1)}


def _search_levels(n: int) -> int:
    """Node reads of one search of a static B-tree of fanout LINE_KEYS over n keys: the
    keys take at most ceil(n / 8) + 1 lines at any alignment (ceil(log_8) of that index
    levels), and the search ends in one line of the keys."""
    lines = math.ceil(n / LINE_KEYS) + 1
    return max(1, math.ceil(math.log(lines, LINE_KEYS))) + 1


def _points(n: int, layout: str):
    rng = np.random.default_rng(1000 + n)
    x = rng.integers(0, max(2, n // 2), n).astype(np.float64)  # duplicates on purpose
    y = rng.uniform(0, 1, n)
    return rng, x, y, boxwood.RangeTree(x, y, layout=layout)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("n", SIZES)
def test_a_count_reads_logarithmically_many_lines(layout: str, n: int) -> None:
    rng, x, y, tree = _points(n, layout)
    log_n = math.ceil(math.log2(n + 1))
    for box in _random_boxes(rng, n, 150):
        probe = tree._probe(*box[:4], inclusive=box[4])
        count = tree.count(*box[:4], inclusive=box[4])
        assert probe["count"] == int(_mask(x, y, box).sum()) == count
        # de Berg et al. ch. 5: two root-to-leaf paths, so at most two nodes a level.
        assert all(k <= 2 for k in probe["nodes"]), probe["nodes"]
        assert len(probe["nodes"]) <= log_n
        # Four root searches (x_lo, x_hi, y_lo, y_hi), each at most ceil(log_8) line reads
        # of the B-tree and one line of the keys.
        searches = _reads(probe, "search index", "keys")
        assert len(searches) <= 4 * _search_levels(n), len(searches)
        for _, first, last, _ in _reads(probe, "keys"):
            assert first == last, "a search ends in one line of memory of the keys"
        # The whole count: O(log n) distinct lines of memory.
        assert len(_lines(probe["reads"])) <= 4 * _search_levels(n) + 4 * log_n


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("n", SIZES)
def test_a_report_reads_log_n_plus_k_lines(layout: str, n: int) -> None:
    rng, x, y, tree = _points(n, layout)
    log_n = math.ceil(math.log2(n + 1))
    for box in _random_boxes(rng, n, 150):
        probe = tree._probe(*box[:4], inclusive=box[4], report=True)
        expected = np.flatnonzero(_mask(x, y, box))
        assert sorted(probe["rows"]) == expected.tolist()
        k = expected.size
        # de Berg et al. ch. 5: at most two nodes a level on the paths; at most two canonical
        # nodes a level, below which the matches lie, plus the two leaves where the paths end.
        assert all(v <= 2 for v in probe["nodes"]), probe["nodes"]
        canonical = probe["canonical"] + [0] * (log_n + 1 - len(probe["canonical"]))
        assert len(canonical) == log_n + 1
        assert all(v <= 2 for v in canonical[:log_n]) and canonical[log_n] <= 4, canonical
        walk_lines = len(_lines(probe["reads"]))
        assert walk_lines <= 4 * _search_levels(n) + 4 * log_n
        collect = probe["collect"]
        rows = _reads(collect, "level rows", "leaf rows")
        # Every matching row id is read exactly once (4 bytes each).
        assert sum(r[3] for r in rows) == 4 * k
        if layout == "fast":
            # Each canonical node's rows are one contiguous copy: O(log n + k) lines.
            assert len(rows) == sum(probe["canonical"])
            assert len(_lines(rows)) <= k / 16 + 2 * len(rows)
            assert collect["nodes"] == []
        else:
            # The compact layout walks each canonical run down to the leaves: every node it
            # visits holds at least one match below it, so at most k nodes a level.
            assert all(v <= k for v in collect["nodes"]), (collect["nodes"], k)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("n", SIZES)
def test_a_one_point_box_walks_the_textbook_height(layout: str, n: int) -> None:
    # de Berg et al. ch. 5: a balanced tree over n keys (n + 1 gaps) has ceil(log2(n + 1))
    # levels. A box around one point with a unique x is one leaf: its walk visits a node on
    # every level above it, and finds the point at the bottom.
    x = np.random.default_rng(n).permutation(n).astype(np.float64)
    y = np.zeros(n)
    tree = boxwood.RangeTree(x, y, layout=layout)
    height = math.ceil(math.log2(n + 1))
    for value in {0, n // 2, n - 1}:
        probe = tree._probe(value, value, 0, 0, report=True)
        assert probe["rows"] == [int(np.flatnonzero(x == value)[0])]
        assert len(probe["nodes"]) == height and all(v >= 1 for v in probe["nodes"])
        assert probe["canonical"] == [0] * height + [1]
    assert tree.height == height
