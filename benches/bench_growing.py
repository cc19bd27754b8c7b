"""Data that grows: a growing tree's appends, counts and folder against one static tree.

Run from the repository root:

    .venv/bin/python benches/bench_growing.py            # the sizes below
    .venv/bin/python benches/bench_growing.py --quick    # small sizes, a smoke run: writes nothing

It writes the section ``growing`` of benches/RESULTS.md.

The data: ``BENCH_GROWING_ROWS`` points to start from (default 10^7), then
``BENCH_GROWING_APPENDS`` appends (default 100) of ``BENCH_GROWING_BATCH`` points each
(default 10^5); x is a time that only grows (each batch later than the one before, uniform
within it), y uniform on the unit square's side. All in one process, side by side:

* Appends: a growing tree made from a static tree of the first rows
  (:meth:`GrowingTree.from_tree`, so nothing is rebuilt) takes every batch; each append is
  timed (its merges run in the background, up to two at once: past the settled bound an
  append waits for them a little, at most as long as it took itself, and until a merge
  commits only when the segments would pass twice the settled bound), and the total takes in
  :meth:`close` after the last append (it waits for the merges to settle). Against it,
  rebuilding one static tree of all rows so far after each append (what a static tree
  forces): that rebuild is timed after every ``BENCH_GROWING_REBUILD_EVERY``-th append
  (default 10) and the total over all appends estimated from those samples (each sample
  stands for the appends around it; the output says how many were timed). The appends are
  made ``BENCH_GROWING_APPEND_RUNS`` times (default 3), each into a new growing tree, and
  each run's slowest and median append shown. Targets: total append time (the first run's)
  at most 0.1x the rebuilds', slowest single append at most 3x the median.
* The same appends into a folder (:meth:`GrowingTree.open`, every append durable: segment
  files written and synced, then the manifest): the durable total, and the folder's bytes
  against the index file (:meth:`RangeTree.save`) of one static tree of the same rows.
  Target: at most 1.3x.
* Counts: ``BENCH_GROWING_BOXES`` boxes (default 10^6; rectangles around random points
  holding about 400 points each) counted by the growing tree with the segments its policy keeps, by
  one static tree of the same rows, and by the growing tree after :meth:`compact`; best of
  five, the sides in turn. Every answer is checked equal to the static tree's, and the static
  tree's on a sample of boxes to NumPy masks over the points. Targets: at least 0.5x the
  static tree's throughput with the policy's segments, within 5 % after compaction.

The machine may be shared: the load average at the start is in the section's stamp, and the
load at the end of each part is printed beside it.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from results import env_size, write_section

import boxwood

SEED = 20261203
REPEATS = 5


# ------------------------------------------------------------------------------- data


def batch(rng: np.random.Generator, start: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """`n` points with x (a time) uniform in ``[start, start + n / RATE)``, sorted (rows
    arrive at a steady rate); y uniform in [0, 1)."""
    return start + np.sort(rng.random(n)) * (n / RATE), rng.random(n)


#: Rows per unit of x: every batch covers its own stretch of time, at the same density.
RATE = 1000.0


def all_batches(n0: int, appends: int, size: int):
    """The first rows (one batch from x = 0) and each appended batch in turn."""
    rng = np.random.default_rng(SEED)
    first = batch(rng, 0.0, n0)
    later = [batch(rng, (n0 + i * size) / RATE, size) for i in range(appends)]
    return first, later


def boxes(x: np.ndarray, y: np.ndarray, q: int, n_per_box: float):
    """`q` rectangles around random points holding about `n_per_box` points each (the
    points are uniform over x's whole extent and y's [0, 1))."""
    rng = np.random.default_rng(SEED + 1)
    at = rng.integers(0, x.size, q)
    share = float(np.sqrt(n_per_box / x.size))
    half_x = share * (x.size / RATE) / 2
    half_y = share / 2
    return x[at] - half_x, x[at] + half_x, y[at] - half_y, y[at] + half_y


def load_now() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg())


# ------------------------------------------------------------------------------- appends


def timed_appends(grow: boxwood.GrowingTree, later) -> tuple[list[float], list[int], float]:
    """Each append's seconds, the segments right after each append (merges run in the
    background, so they include segments a running merge has yet to replace), and the
    seconds of ``close()`` after the last (which waits for the merges to settle, so the
    appends' sum and it are the whole cost of the merges)."""
    times, segments = [], []
    for x, y in later:
        t0 = time.perf_counter()
        grow.append(x, y)
        times.append(time.perf_counter() - t0)
        segments.append(len(grow.segments))
    t0 = time.perf_counter()
    grow.close()
    return times, segments, time.perf_counter() - t0


def sampled_rebuilds(first, later, every: int) -> tuple[float, int]:
    """The estimated total of rebuilding one static tree after each append, from timing the
    rebuild after every `every`-th append (the last one always among them); each sample
    stands for the `every` appends ending at it. Returns (estimated total, samples timed)."""
    xs, ys = [first[0]], [first[1]]
    total, samples, since = 0.0, 0, 0
    for i, (x, y) in enumerate(later):
        xs.append(x)
        ys.append(y)
        since += 1
        if (i + 1) % every and i + 1 != len(later):
            continue
        allx, ally = np.concatenate(xs), np.concatenate(ys)
        t0 = time.perf_counter()
        tree = boxwood.RangeTree(allx, ally)
        total += (time.perf_counter() - t0) * since
        del tree, allx, ally
        samples, since = samples + 1, 0
    return total, samples


def appends_part(first, later, every: int, runs: int) -> tuple[list[str], boxwood.GrowingTree]:
    """The appends `runs` times, each into a new growing tree made from the same static tree
    of the first rows (the slowest append swings from run to run on a shared machine, so
    every run's is shown), and the rebuilds once. The total is the first run's."""
    static_first = boxwood.RangeTree(*first)
    results = []
    for run in range(runs):
        grow = boxwood.GrowingTree.from_tree(static_first)
        results.append(timed_appends(grow, later))
        if run == 0:
            kept = grow  # counted later; the other runs' trees are let go
    times, segments, closing = results[0]
    rebuild_total, samples = sampled_rebuilds(first, later, every)
    total = sum(times) + closing
    ratios = [max(r[0]) / statistics.median(r[0]) for r in results]
    met = sum(ratio <= 3 for ratio in ratios)
    rows = [
        [
            f"{len(later)} appends and close(), merges included (growing tree)",
            f"{total:.2f} s",
            f"{total / rebuild_total:.3f}x",
            "<= 0.1x",
            _met(total / rebuild_total <= 0.1),
        ],
        [
            f"rebuild one static tree after each append (estimated from {samples} of "
            f"{len(later)} rebuilds timed)",
            f"{rebuild_total:.1f} s",
            "1x",
            "",
            "",
        ],
        *(
            [
                f"slowest append / median append, run {i + 1} of {runs}",
                f"{max(r[0]):.3f} s / {statistics.median(r[0]):.3f} s",
                f"{ratio:.1f}x",
                "<= 3x",
                _met(ratio <= 3),
            ]
            for i, (r, ratio) in enumerate(zip(results, ratios))
        ),
    ]
    lines = [
        *_table(["", "time", "ratio", "target", "met"], rows),
        "",
        f"The slowest-append target met in {met} of {runs} runs. Final rows {len(kept):,} "
        f"in {len(kept.segments)} segments ({', '.join(f'{s.rows:,}' for s in kept.segments)}).",
    ]
    for i, (times, segments, _) in enumerate(results):
        slow = sorted(range(len(times)), key=times.__getitem__)[-3:][::-1]
        lines.append(
            f"Run {i + 1}, the slowest appends: "
            + ", ".join(
                f"#{j + 1} {times[j]:.3f} s ({segments[j]} segments after it)" for j in slow
            )
            + f"; the most segments right after an append {max(segments)} (merges running)."
        )
    lines.append(f"Load average at the end of this part: {load_now()}.")
    return lines, kept


def folder_part(first, later, static: boxwood.RangeTree) -> list[str]:
    tmp = Path(tempfile.mkdtemp(prefix="bench-growing-"))
    try:
        folder = tmp / "grow"
        t0 = time.perf_counter()
        grow = boxwood.GrowingTree.open(folder, tree=boxwood.RangeTree(*first))
        t_open = time.perf_counter() - t0
        times, _, closing = timed_appends(grow, later)
        folder_bytes = sum(p.stat().st_size for p in folder.iterdir() if p.is_file())
        segments = len(grow.segments)
        one = tmp / "one.boxwood"
        static.save(one)
        one_bytes = one.stat().st_size
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    ratio = folder_bytes / one_bytes
    rows = [
        [
            f"{len(later)} durable appends into a folder, and close()",
            f"{sum(times) + closing:.2f} s (median {statistics.median(times):.3f} s, slowest "
            f"{max(times):.2f} s)",
            "",
            "",
        ],
        [
            f"folder bytes ({segments} segments, manifest) / one static tree's index file",
            f"{folder_bytes / 2**20:,.1f} MiB / {one_bytes / 2**20:,.1f} MiB",
            f"{ratio:.3f}x",
            f"<= 1.3x: {_met(ratio <= 1.3)}",
        ],
    ]
    return [
        *_table(["", "measured", "ratio", "target"], rows),
        "",
        f"Making the folder from the first rows' tree took {t_open:.2f} s (one segment file "
        f"written and synced). Load average at the end of this part: {load_now()}.",
    ]


# ------------------------------------------------------------------------------- counts


def interleaved(*fns):
    """``[(result, best seconds), ...]`` of callables run in turn, REPEATS times."""
    best = [float("inf")] * len(fns)
    out: list = [None] * len(fns)
    for _ in range(REPEATS):
        for i, fn in enumerate(fns):
            t0 = time.perf_counter()
            out[i] = fn()
            best[i] = min(best[i], time.perf_counter() - t0)
    return list(zip(out, best))


def counts_part(
    grow: boxwood.GrowingTree, static: boxwood.RangeTree, x: np.ndarray, y: np.ndarray, q: int
) -> list[str]:
    b = boxes(x, y, q, 400)
    segments = len(grow.segments)
    (got_grow, t_grow), (got_static, t_static) = interleaved(
        lambda: grow.count(*b), lambda: static.count(*b)
    )
    np.testing.assert_array_equal(got_grow, got_static)
    for i in range(0, q, max(1, q // 50)):  # checked against NumPy masks over the points
        mask = (x >= b[0][i]) & (x <= b[1][i]) & (y >= b[2][i]) & (y <= b[3][i])
        assert got_static[i] == int(mask.sum())
    grow.compact()
    (got_one, t_one), (_, t_static2) = interleaved(lambda: grow.count(*b), lambda: static.count(*b))
    np.testing.assert_array_equal(got_one, got_static)
    ratio, ratio_one = t_static / t_grow, t_static2 / t_one
    rows = [
        [
            "one static tree of the same rows",
            f"{q / t_static / 1e6:.2f} M/s",
            "1x",
            "",
        ],
        [
            f"growing tree, the policy's {segments} segments",
            f"{q / t_grow / 1e6:.2f} M/s",
            f"{ratio:.2f}x",
            f">= 0.5x: {_met(ratio >= 0.5)}",
        ],
        [
            "growing tree after compact() (1 segment)",
            f"{q / t_one / 1e6:.2f} M/s",
            f"{ratio_one:.2f}x",
            f">= 0.95x: {_met(ratio_one >= 0.95)}",
        ],
    ]
    return [
        f"{q:,} boxes (rectangles around random points, about {got_static.mean():.0f} points "
        f"each) over {len(grow):,} rows; every count equal to the static tree's, which is "
        "checked on a sample of boxes against NumPy masks. Best of five, the sides in turn "
        "(the static tree timed again beside the compacted one).",
        "",
        *_table(["counts", "throughput", "growing / static", "target"], rows),
        "",
        f"Load average at the end of this part: {load_now()}.",
    ]


# ------------------------------------------------------------------------------- output


def _met(ok: bool) -> str:
    return "met" if ok else "**missed**"


def _table(header: list[str], rows: list[list[str]]) -> list[str]:
    return [
        "| " + " | ".join(header) + " |",
        "|" + "---|" * len(header),
        *("| " + " | ".join(r) + " |" for r in rows),
    ]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="small sizes; write nothing")
    args = parser.parse_args(sys.argv[1:] if argv is None else argv)
    if args.quick:
        n0, appends, size, every, q, runs = 200_000, 20, 2_000, 5, 20_000, 2
    else:
        n0 = env_size("BENCH_GROWING_ROWS", 10**7)
        appends = env_size("BENCH_GROWING_APPENDS", 100)
        size = env_size("BENCH_GROWING_BATCH", 10**5)
        every = env_size("BENCH_GROWING_REBUILD_EVERY", 10)
        q = env_size("BENCH_GROWING_BOXES", 10**6)
        runs = env_size("BENCH_GROWING_APPEND_RUNS", 3)
    first, later = all_batches(n0, appends, size)
    intro = (
        f"From {n0:,} rows, {appends} appends of {size:,} rows (x a growing time, y uniform), "
        "compact layout, one process."
    )
    print(intro, flush=True)
    part1, grow = appends_part(first, later, every, runs)
    print("\n".join(part1), flush=True)
    # One static tree of all the rows, as a static pipeline would hold after the last append.
    x = np.concatenate([first[0], *(b[0] for b in later)])
    y = np.concatenate([first[1], *(b[1] for b in later)])
    static = boxwood.RangeTree(x, y)
    part2 = folder_part(first, later, static)
    print("\n".join(part2), flush=True)
    part3 = counts_part(grow, static, x, y, q)
    print("\n".join(part3), flush=True)
    if not args.quick:
        body = "\n".join(
            [
                intro,
                "",
                "### Appends against rebuilding",
                "",
                *part1,
                "",
                "### In a folder: durable appends, bytes",
                "",
                *part2,
                "",
                "### Counts",
                "",
                *part3,
            ]
        )
        write_section("growing", body, title="Data that grows: `benches/bench_growing.py`")


if __name__ == "__main__":
    resource.setrlimit(resource.RLIMIT_CORE, (0, 0))
    main()
