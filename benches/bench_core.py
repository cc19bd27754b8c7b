"""Box-count throughput of boxwood next to a numpy sort-and-scan and scipy's cKDTree.

Run from the repository root:

    .venv/bin/python benches/bench_core.py                 # n = 1e6 and 1e7, 100,000 boxes
    .venv/bin/python benches/bench_core.py --quick         # small n, a smoke run: writes nothing
    BENCH_CORE_SIZES=1e6 BENCH_CORE_BOXES=50000 .venv/bin/python benches/bench_core.py

It writes the section ``core`` of benches/RESULTS.md (what it printed, with the stamp) and the
README block ``core`` (the headline figures of the largest size).

Data: n float64 points, half uniform on the unit square, half in gaussian blobs. Boxes, all
closed ([lo, hi] on both axes), centred on randomly drawn data points:

* small squares  - side chosen so a box holds a few hundred points on average,
* large squares  - side chosen so a box holds a few tens of thousands,
* thin slabs     - a wide x window (half the square) times a narrow y band.

Methods, on the same data and the same boxes:

* boxwood ``RangeTree.count`` on the whole batch, for both layouts ("fast", "compact"),
* numpy sort-and-scan: points sorted by x once; per box ``np.searchsorted`` on x, then a mask
  on y within that slice. It runs box by box in Python, so only the first boxes are timed (until
  a time budget is spent) and the rate is extrapolated; the table says how many were timed,
* scipy ``cKDTree.query_ball_point(centres, r, p=inf, return_length=True, workers=-1)``: a
  closed square of half-side r around each centre. It answers squares only, so it has no row
  for the slabs. If a time budget runs out it too is timed on the first boxes only.
* shapely ``STRtree`` over the points, ``query(boxes, predicate="covers")`` (a box covers the
  points inside it and on its edges, the same closed boxes), counted with ``np.bincount``. It
  walks every match, so it too is timed on the first boxes until a time budget is spent.

Every count that a method returns is compared with boxwood's (assert): a wrong benchmark is
worse than none. Also printed: build seconds; memory as ``tree.nbytes / n / height`` (all of
it spread over the levels) and split by ``tree.nbytes_by_part`` into bytes per point per level
(the parts every level adds to) and bytes per point once (sorted axes, leaf rows); the numpy
scan's setup (``np.argsort`` of x, numpy's default kind and the stable one the scan uses);
boxwood ``report`` throughput (row ids per second) on the large squares; RSS growth after each
build and the peak RSS of the process.
"""

from __future__ import annotations

import argparse
import contextlib
import gc
import io
import os
import platform
import resource
import sys
import time
from importlib import metadata

import numpy as np
import scipy
import shapely
from results import env_size, fenced, write_readme_block, write_section
from scipy.spatial import cKDTree

import boxwood

SEED = 7
BLOBS = 24
SMALL_TARGET = 300  # mean points in a small square (for uniform density)
LARGE_TARGET = 20_000  # mean points in a large square
SLAB_TARGET = 2_000  # mean points in a thin slab
SLAB_WIDTH = 0.5  # x extent of a slab
GRID = 2.0**-24  # centres and half-sides on this grid, so centre +- r is exact in float64
SHAPES = ("small squares", "large squares", "thin slabs")
REPORT_ROWS = 30_000_000  # row ids produced by one report() timing (sets the box subset)


# --------------------------------------------------------------------------------------------
# Data and boxes
# --------------------------------------------------------------------------------------------


def make_points(n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Half uniform on [0, 1)^2, half in gaussian blobs (clipped to the unit square)."""
    n_uniform = n // 2
    n_blob = n - n_uniform
    centres = rng.uniform(0.1, 0.9, size=(BLOBS, 2))
    sigmas = rng.uniform(0.005, 0.05, size=BLOBS)
    which = rng.integers(0, BLOBS, size=n_blob)
    blob = centres[which] + rng.standard_normal((n_blob, 2)) * sigmas[which, None]
    blob = np.clip(blob, 0.0, 1.0)
    x = np.concatenate([rng.random(n_uniform), blob[:, 0]])
    y = np.concatenate([rng.random(n_uniform), blob[:, 1]])
    perm = rng.permutation(n)
    return np.ascontiguousarray(x[perm]), np.ascontiguousarray(y[perm])


def _on_grid(v: np.ndarray | float) -> np.ndarray:
    return np.round(np.asarray(v, dtype=np.float64) / GRID) * GRID


def make_boxes(x: np.ndarray, y: np.ndarray, q: int, rng: np.random.Generator) -> dict:
    """The three shapes: shape -> dict(x_lo, x_hi, y_lo, y_hi, centres, r or None)."""
    n = len(x)
    boxes = {}
    for shape, target in (("small squares", SMALL_TARGET), ("large squares", LARGE_TARGET)):
        pick = rng.integers(0, n, size=q)
        cx, cy = _on_grid(x[pick]), _on_grid(y[pick])
        r = float(_on_grid(0.5 * np.sqrt(target / n)))
        boxes[shape] = {
            "x_lo": cx - r,
            "x_hi": cx + r,
            "y_lo": cy - r,
            "y_hi": cy + r,
            "centres": np.column_stack([cx, cy]),
            "r": r,
        }
    pick = rng.integers(0, n, size=q)
    half_band = float(_on_grid(0.5 * SLAB_TARGET / (n * SLAB_WIDTH)))
    cy = _on_grid(y[pick])
    x_lo = _on_grid(rng.uniform(0.0, 1.0 - SLAB_WIDTH, size=q))
    boxes["thin slabs"] = {
        "x_lo": x_lo,
        "x_hi": x_lo + SLAB_WIDTH,
        "y_lo": cy - half_band,
        "y_hi": cy + half_band,
        "centres": None,
        "r": None,
    }
    return boxes


# --------------------------------------------------------------------------------------------
# Measuring
# --------------------------------------------------------------------------------------------


def rss_mib() -> float:
    """Current resident set size (Linux /proc), in MiB."""
    try:
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 2**20
    except OSError:
        return float("nan")


def peak_rss_mib() -> float:
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 2**20 if sys.platform == "darwin" else peak / 2**10


def timed(fn, repeats: int = 1):
    """(result of the last call, best wall seconds, cpu seconds / wall seconds of that call)."""
    best, ratio, result = float("inf"), float("nan"), None
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        result = fn()
        wall, cpu = time.perf_counter() - w0, time.process_time() - c0
        if wall < best:
            best, ratio = wall, cpu / wall if wall > 0 else float("nan")
    return result, best, ratio


def timed_in_chunks(q: int, chunk: int, budget: float, min_boxes: int, count_chunk):
    """Counts of the first k of q boxes, `count_chunk(start, stop)` a chunk at a time, until
    `budget` seconds are spent and at least `min_boxes` are done: (counts, k, seconds,
    cpu/wall)."""
    counts = np.empty(q, dtype=np.int64)
    k, spent, cpu = 0, 0.0, 0.0
    while k < q and (spent < budget or k < min_boxes):
        stop = min(q, k + chunk)
        w0, c0 = time.perf_counter(), time.process_time()
        counts[k:stop] = count_chunk(k, stop)
        spent += time.perf_counter() - w0
        cpu += time.process_time() - c0
        k = stop
    return counts[:k], k, spent, cpu / spent if spent > 0 else float("nan")


def numpy_scan(xs, ys, b: dict, budget: float, min_boxes: int):
    """Sort-and-scan counts, box by box: a slice of the x-sorted points, then a mask on y."""

    def count_chunk(start: int, stop: int) -> np.ndarray:
        first = np.searchsorted(xs, b["x_lo"][start:stop], side="left")
        last = np.searchsorted(xs, b["x_hi"][start:stop], side="right")
        out = np.empty(stop - start, dtype=np.int64)
        for i in range(stop - start):
            band = ys[first[i] : last[i]]
            lo, hi = b["y_lo"][start + i], b["y_hi"][start + i]
            out[i] = np.count_nonzero((band >= lo) & (band <= hi))
        return out

    return timed_in_chunks(len(b["x_lo"]), 64, budget, min_boxes, count_chunk)


def kdtree_counts(kd: cKDTree, b: dict, budget: float):
    """cKDTree closed-square counts, 10,000 squares a call."""

    def count_chunk(start: int, stop: int) -> np.ndarray:
        return kd.query_ball_point(
            b["centres"][start:stop], b["r"], p=np.inf, return_length=True, workers=-1
        )

    return timed_in_chunks(len(b["centres"]), 10_000, budget, 1, count_chunk)


def strtree_counts(tree: shapely.STRtree, b: dict, budget: float, min_boxes: int):
    """STRtree "covers" counts, 16 boxes a query."""

    def count_chunk(start: int, stop: int) -> np.ndarray:
        boxes = shapely.box(
            b["x_lo"][start:stop],
            b["y_lo"][start:stop],
            b["x_hi"][start:stop],
            b["y_hi"][start:stop],
        )
        matches = tree.query(boxes, predicate="covers")
        return np.bincount(matches[0], minlength=stop - start)

    return timed_in_chunks(len(b["x_lo"]), 16, budget, min_boxes, count_chunk)


# --------------------------------------------------------------------------------------------
# Output
# --------------------------------------------------------------------------------------------


def table(header: list[str], rows: list[list[str]], left: int = 2) -> str:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  ".join(
            c.ljust(w) if i < left else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths))
        ).rstrip()

    return "\n".join([line(header), "  ".join("-" * w for w in widths), *map(line, rows)])


def _load() -> str:
    try:
        return " ".join(f"{v:.2f}" for v in os.getloadavg())
    except OSError:
        return "n/a"


def _rate(v: float) -> str:
    return f"{v:,.0f}"


def _ratio(v: float) -> str:
    return f"{v:.2f}x" if v >= 0.1 else f"{v:.4f}x"


# --------------------------------------------------------------------------------------------
# One size
# --------------------------------------------------------------------------------------------


def run_size(n: int, q: int, args) -> dict:
    """Measure and print one size; return its figures for the README block."""
    print(f"\n=== n = {n:,} points, {q:,} boxes per shape ===")
    print(f"load average at start: {_load()}")
    rng = np.random.default_rng(SEED + n)
    x, y = make_points(n, rng)
    boxes = make_boxes(x, y, q, rng)
    base_rss = rss_mib()

    results = []  # (method, shape, boxes/s, cpu/wall, boxes timed)
    builds = []  # (structure, seconds, nbytes or None, bytes/point/level or None, RSS growth)
    boxwood_counts: dict[str, dict[str, np.ndarray]] = {}
    report_lines = []
    report_rates = {}
    report_sample = None

    # boxwood, one layout at a time (the previous tree is freed first) ----------------------
    for layout in ("fast", "compact"):
        gc.collect()
        before = rss_mib()
        tree, build_s, _ = timed(lambda layout=layout: boxwood.RangeTree(x, y, layout=layout))
        grown = rss_mib() - before
        assert len(tree) == n, (len(tree), n)
        parts = tree.nbytes_by_part
        once = parts["sorted axes"] + parts["leaf rows"]
        per_level = (
            tree.nbytes / n / tree.height,
            (tree.nbytes - once) / n / tree.height,
            once / n,
        )
        builds.append((f"boxwood {layout}", build_s, tree.nbytes, per_level, grown))
        tree.count(0.25, 0.75, 0.25, 0.75)  # warm up (thread pool, pages)
        boxwood_counts[layout] = {}
        for shape in SHAPES:
            b = boxes[shape]
            counts, wall, par = timed(
                lambda b=b, tree=tree: tree.count(b["x_lo"], b["x_hi"], b["y_lo"], b["y_hi"]),
                repeats=args.repeats,
            )
            assert counts.shape == (q,) and counts.dtype == np.int64, (counts.shape, counts.dtype)
            boxwood_counts[layout][shape] = counts
            results.append((f"boxwood {layout}", shape, q / wall, par, q))

        # report() on a subset of the large squares (the full batch would not fit in memory).
        b = boxes["large squares"]
        mean = max(1.0, float(boxwood_counts[layout]["large squares"].mean()))
        k = int(min(q, max(1, REPORT_ROWS // mean)))
        (offsets, rows), wall, par = timed(
            lambda b=b, tree=tree, k=k: tree.report(
                b["x_lo"][:k], b["x_hi"][:k], b["y_lo"][:k], b["y_hi"][:k]
            ),
            repeats=args.repeats,
        )
        assert np.array_equal(np.diff(offsets), boxwood_counts[layout]["large squares"][:k])
        report_lines.append(
            f"boxwood {layout} report, large squares: {k:,} boxes, {len(rows):,} row ids in "
            f"{wall:.3f} s = {len(rows) / wall:,.0f} row ids/s ({k / wall:,.0f} boxes/s, "
            f"cpu/wall {par:.2f})"
        )
        report_rates[layout] = len(rows) / wall
        if layout == "fast":
            report_sample = (offsets, rows, k)
        del tree, offsets, rows
    for shape in SHAPES:
        assert np.array_equal(boxwood_counts["fast"][shape], boxwood_counts["compact"][shape])
    reference = boxwood_counts["fast"]

    # numpy sort-and-scan -------------------------------------------------------------------
    _, default_sort_s, _ = timed(lambda: np.argsort(x))
    order, sort_s, _ = timed(lambda: np.argsort(x, kind="stable"))
    xs, ys = x[order], y[order]
    for shape in SHAPES:
        counts, k, spent, par = numpy_scan(
            xs, ys, boxes[shape], args.scan_seconds, args.scan_min_boxes
        )
        assert np.array_equal(counts, reference[shape][:k]), f"numpy scan disagrees ({shape})"
        results.append(("numpy sort+scan", shape, k / spent, par, k))

    # The rows that report() gave for a few boxes, against the scan.
    assert report_sample is not None
    offsets, rows, k = report_sample
    b = boxes["large squares"]
    for i in range(min(k, 20)):
        lo = np.searchsorted(xs, b["x_lo"][i], side="left")
        hi = np.searchsorted(xs, b["x_hi"][i], side="right")
        band = ys[lo:hi]
        want = np.sort(order[lo:hi][(band >= b["y_lo"][i]) & (band <= b["y_hi"][i])])
        got = np.sort(rows[offsets[i] : offsets[i + 1]])
        assert np.array_equal(got, want), f"report() rows differ from the scan in box {i}"
    del offsets, rows, report_sample, xs, ys, order

    # scipy cKDTree (squares only) ----------------------------------------------------------
    gc.collect()
    before = rss_mib()
    kd, kd_build_s, _ = timed(lambda: cKDTree(np.column_stack([x, y])))
    builds.append(("scipy cKDTree", kd_build_s, None, None, rss_mib() - before))
    for shape in SHAPES[:2]:
        counts, k, spent, par = kdtree_counts(kd, boxes[shape], args.kdtree_seconds)
        assert np.array_equal(counts, reference[shape][:k]), f"cKDTree disagrees ({shape})"
        results.append(("scipy cKDTree", shape, k / spent, par, k))
    del kd
    gc.collect()

    # shapely STRtree -----------------------------------------------------------------------
    before = rss_mib()
    st, st_build_s, _ = timed(lambda: shapely.STRtree(shapely.points(x, y)))
    builds.append(("shapely STRtree (points + tree)", st_build_s, None, None, rss_mib() - before))
    for shape in SHAPES:
        counts, k, spent, par = strtree_counts(
            st, boxes[shape], args.strtree_seconds, args.scan_min_boxes
        )
        assert np.array_equal(counts, reference[shape][:k]), f"STRtree disagrees ({shape})"
        results.append(("shapely STRtree", shape, k / spent, par, k))
    del st
    gc.collect()

    # Print ---------------------------------------------------------------------------------
    print(f"data: {n // 2:,} uniform + {n - n // 2:,} in {BLOBS} gaussian blobs, float64")
    for shape in SHAPES:
        b, c = boxes[shape], reference[shape]
        size = (
            f"{b['x_hi'][0] - b['x_lo'][0]:.3g} x {b['y_hi'][0] - b['y_lo'][0]:.3g}"
            if shape == "thin slabs"
            else f"side {2 * b['r']:.3g}"
        )
        print(
            f"  {shape:<14} {size:<18} points per box: mean {c.mean():,.0f}, "
            f"median {np.median(c):,.0f}, max {c.max():,}"
        )
    print("all counts checked equal: boxwood fast = compact on every box; numpy scan, cKDTree")
    print("and STRtree on every box they timed; report() rows = the scan's on 20 large squares")
    print()
    fast_rate = {shape: rate for m, shape, rate, _, _ in results if m == "boxwood fast"}
    rows = []
    for shape in SHAPES:
        for method, s, rate, par, k in results:
            if s != shape:
                continue
            timed_note = "all" if k == q else f"{k:,} (extrapolated)"
            rows.append(
                [
                    method,
                    shape,
                    _rate(rate),
                    _ratio(rate / fast_rate[shape]),
                    f"{par:.2f}",
                    timed_note,
                ]
            )
        if shape == "thin slabs":
            rows.append(["scipy cKDTree", shape, "n/a", "", "", "squares only"])
    header = ["method", "shape", "boxes/s", "vs boxwood fast", "cpu/wall", "boxes timed"]
    print(table(header, rows))
    print()
    build_rows = [
        [
            name,
            f"{seconds:.2f}",
            "" if nbytes is None else f"{nbytes / 2**20:,.0f}",
            *(["", "", ""] if per_level is None else [f"{v:.2f}" for v in per_level]),
            f"{grown:,.0f}",
        ]
        for name, seconds, nbytes, per_level, grown in builds
    ]
    build_rows.append(["numpy argsort of x, default kind", f"{default_sort_s:.2f}", *[""] * 5])
    build_rows.append(["numpy argsort of x, stable (scan setup)", f"{sort_s:.2f}", *[""] * 5])
    header = [
        "structure",
        "build s",
        "nbytes MiB",
        "B/point/level, all",
        "B/point/level, levels",
        "B/point once",
        "RSS growth MiB",
    ]
    print(table(header, build_rows, left=1))
    print()
    for line in report_lines:
        print(line)
    print(
        f"RSS: {base_rss:,.0f} MiB with data and boxes; peak RSS of the process so far "
        f"{peak_rss_mib():,.0f} MiB"
    )
    print(f"load average at end: {_load()}")
    return {
        "n": n,
        "rates": {(m, shape): rate for m, shape, rate, _, _ in results},
        "builds": {name: seconds for name, seconds, *_ in builds},
        "argsort": (default_sort_s, sort_s),
        "report": report_rates,
    }


class _Tee(io.TextIOBase):
    """Prints and keeps a copy, so the section holds exactly what the run printed."""

    def __init__(self, out) -> None:
        self.out, self.kept = out, io.StringIO()

    def write(self, text: str) -> int:
        self.out.write(text)
        return self.kept.write(text)

    def flush(self) -> None:
        self.out.flush()


HOW_TO_READ = """\
How to read it:

- boxwood's rates are the best of {repeats} passes over the whole batch of {q:,} boxes; the
  others were timed in one pass. "vs boxwood fast" is the method's boxes/s over boxwood
  fast's on the same shape. cpu/wall is process CPU seconds over wall seconds.
- The numpy scan and shapely's `STRtree` answer a box at a time in a Python loop and walk
  every match, so they were timed on the first boxes until their time budget ({scan:g} s and
  {st:g} s) was spent and extrapolated; "boxes timed" says how many. `cKDTree`
  (`workers=-1`, budget {kd:g} s) has no slab row: `query_ball_point(p=inf)` answers squares
  only.
- Checked in the run (assert): fast = compact on every box; the scan, `cKDTree` and `STRtree`
  = boxwood on every box each timed; `report()` offsets = the counts and its rows = the
  scan's on 20 large squares.
- "B/point/level, all" is `nbytes / n / height`; "B/point/level, levels" spreads only the
  parts every level adds to (cascade bits, the count cascade, level rows in the fast layout),
  and "B/point once" is the rest (both sorted axes with their search indexes, the leaf rows),
  from `RangeTree.nbytes_by_part` (per part: section *Memory by part*).
- "RSS growth" is the change of resident memory across one build; peak RSS is the whole
  process's so far (data, boxes, a report of about {report:,} row ids, each structure built
  after the previous was freed)."""


def readme_block(figures: dict) -> str:
    """The README's headline figures from the largest size's run."""
    n, rates, builds = figures["n"], figures["rates"], figures["builds"]
    shapes = {"small": "small squares", "large": "large squares"}
    ours = [rates[(f"boxwood {lay}", s)] for lay in ("fast", "compact") for s in SHAPES]

    def versus(method: str, shape: str) -> tuple[float, float]:
        them = rates[(method, shape)]
        mine = [rates[(f"boxwood {lay}", shape)] / them for lay in ("fast", "compact")]
        return min(mine), max(mine)

    kd = {k: versus("scipy cKDTree", s) for k, s in shapes.items()}
    scan = [r for s in SHAPES for r in versus("numpy sort+scan", s)]
    st = [r for s in SHAPES for r in versus("shapely STRtree", s)]
    default_sort, stable_sort = figures["argsort"]
    return "\n".join(
        [
            f"At n = {n:,} (`benches/bench_core.py`, section *Comparison table*):",
            "",
            f"- counting: {min(ours) / 1e6:.1f} to {max(ours) / 1e6:.1f} million boxes per "
            f"second on every shape; that is {kd['small'][0]:,.0f}x to {kd['small'][1]:,.0f}x "
            f"(small squares) and {kd['large'][0]:,.0f}x to {kd['large'][1]:,.0f}x (large "
            "squares) scipy's `cKDTree.query_ball_point(..., return_length=True, workers=-1)`, "
            f"{min(scan):,.0f}x to {max(scan):,.0f}x a numpy sort-and-scan, and "
            f"{min(st):,.0f}x to {max(st):,.0f}x shapely's "
            '`STRtree.query(..., predicate="covers")`;',
            f"- reporting: {figures['report']['fast'] / 1e6:,.0f} million row ids per second "
            f"on large boxes (fast layout), {figures['report']['compact'] / 1e6:,.0f} million "
            "(compact layout);",
            f"- building: {builds['boxwood fast']:.2f} s (fast) and "
            f"{builds['boxwood compact']:.2f} s (compact), against {default_sort:.2f} s for "
            f"numpy's default `argsort` of the x column alone ({stable_sort:.2f} s for its "
            "stable sort);",
        ]
    )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument(
        "--sizes",
        default=os.environ.get("BENCH_CORE_SIZES", "1e6,1e7"),
        help="comma-separated n (default BENCH_CORE_SIZES or 1e6,1e7)",
    )
    parser.add_argument(
        "--boxes",
        type=int,
        default=env_size("BENCH_CORE_BOXES", 100_000),
        help="boxes per shape (default BENCH_CORE_BOXES or 100000)",
    )
    parser.add_argument(
        "--quick", action="store_true", help="small n and fewer boxes; writes nothing"
    )
    parser.add_argument("--no-write", action="store_true", help="print only")
    parser.add_argument("--repeats", type=int, default=3, help="boxwood timings: best of N")
    parser.add_argument(
        "--scan-seconds", type=float, default=3.0, help="time budget per shape, numpy scan"
    )
    parser.add_argument(
        "--scan-min-boxes", type=int, default=200, help="numpy scan: check at least this many"
    )
    parser.add_argument(
        "--kdtree-seconds", type=float, default=30.0, help="time budget per shape, cKDTree"
    )
    parser.add_argument(
        "--strtree-seconds", type=float, default=3.0, help="time budget per shape, STRtree"
    )
    args = parser.parse_args(argv)
    if args.quick:
        sizes = [100_000, 300_000]
        q = min(args.boxes, 10_000)
        args.scan_seconds = min(args.scan_seconds, 0.5)
        args.strtree_seconds = min(args.strtree_seconds, 0.5)
    else:
        sizes = [int(float(s)) for s in args.sizes.split(",") if s.strip()]
        q = args.boxes
    if any(n < 1_000 for n in sizes) or q < 1:
        parser.error("sizes must be >= 1000 and --boxes >= 1")

    tee = _Tee(sys.stdout)
    with contextlib.redirect_stdout(tee):
        figures = run_all(sizes, q, args)
    if args.quick or args.no_write:
        return 0
    body = (
        fenced(tee.kept.getvalue().strip("\n"))
        + "\n\n"
        + HOW_TO_READ.format(
            repeats=args.repeats,
            q=q,
            scan=args.scan_seconds,
            st=args.strtree_seconds,
            kd=args.kdtree_seconds,
            report=REPORT_ROWS,
        )
    )
    write_section(
        "core",
        body,
        title="Comparison table: `benches/bench_core.py`",
        modules=("scipy", "shapely"),
    )
    write_readme_block("core", readme_block(max(figures, key=lambda f: f["n"])))
    return 0


def run_all(sizes: list[int], q: int, args) -> list[dict]:
    try:
        version = metadata.version("boxwood")
    except metadata.PackageNotFoundError:
        version = "unknown"
    print(
        f"boxwood {version}, numpy {np.__version__}, scipy {scipy.__version__}, "
        f"shapely {shapely.__version__}, "
        f"Python {platform.python_version()}, {os.cpu_count()} CPUs, {platform.machine()}"
    )
    print("boxes/s = boxes answered per wall-clock second; cpu/wall ~ cores kept busy")
    print(f"boxwood: best of {args.repeats} runs of the whole batch; others: one pass")
    t0 = time.perf_counter()
    figures = [run_size(n, q, args) for n in sizes]
    print(f"\ntotal wall time {time.perf_counter() - t0:.1f} s")
    return figures


if __name__ == "__main__":
    raise SystemExit(main())
