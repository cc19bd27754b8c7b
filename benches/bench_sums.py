"""Weighted sums at scale: boxes per second of ``RangeTree.sum`` next to ``count``.

    .venv/bin/python benches/bench_sums.py               # n = 1e7, 100,000 boxes
    BENCH_SUMS_ROWS=1e5 BENCH_SUMS_BOXES=10000 .venv/bin/python benches/bench_sums.py --no-write

For each layout: n float64 points (uniform), float64 weights, one tree with weights; then
squares holding a few hundred points each, summed and counted as one batch (best of 3). The
first 200 sums are checked against ``math.fsum`` of a numpy mask, and 2,000 of them against
one-box calls (the batch must add the same runs in the same order: equal bit for bit).

Writes the section ``sums`` of benches/RESULTS.md and the README block ``sums``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from results import env_size, write_readme_block, write_section

import boxwood


def best_of(fn, repeats: int = 3) -> tuple[object, float]:
    best, result = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return result, best


def measure(n: int, q: int) -> tuple[str, list[tuple[str, float, float, float]]]:
    rng = np.random.default_rng(3)
    x, y = rng.random(n), rng.random(n)
    w = rng.standard_normal(n)
    side = math.sqrt(300 / n)
    a, c = rng.random(q), rng.random(q)
    rows = []
    for layout in ("fast", "compact"):
        t0 = time.perf_counter()
        tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
        build_s = time.perf_counter() - t0
        sums, sum_s = best_of(lambda tree=tree: tree.sum(a, a + side, c, c + side))
        _, count_s = best_of(lambda tree=tree: tree.count(a, a + side, c, c + side))
        assert isinstance(sums, np.ndarray)
        tolerance = 4 * (2 * tree.height + 2) * 2.0**-52 * math.fsum(np.abs(w))
        for i in range(min(q, 200)):
            inside = (x >= a[i]) & (x <= a[i] + side) & (y >= c[i]) & (y <= c[i] + side)
            assert abs(sums[i] - math.fsum(w[inside])) <= tolerance, i
        for i in range(min(q, 2000)):
            one = tree.sum(float(a[i]), float(a[i] + side), float(c[i]), float(c[i] + side))
            assert one == sums[i], i
        rows.append((layout, build_s, q / sum_s, q / count_s))
        del tree
    header = f"n = {n:,} uniform points, float64 weights; {q:,} squares of side {side:.3g}"
    return header, rows


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    n, q = env_size("BENCH_SUMS_ROWS", 10**7), env_size("BENCH_SUMS_BOXES", 100_000)
    header, rows = measure(n, q)
    lines = [header, "", "| layout | build s (with weights) | sum boxes/s | count boxes/s |"]
    lines.append("|---|---|---|---|")
    lines += [f"| {r[0]} | {r[1]:.2f} | {r[2]:,.0f} | {r[3]:,.0f} |" for r in rows]
    lines += [
        "",
        "Best of 3 batches. The first 200 sums checked against `math.fsum` of a numpy mask, "
        "2,000 equal bit for bit to one-box sums.",
    ]
    body = "\n".join(lines)
    print(body)
    if not args.no_write:
        write_section("sums", body, title="Weighted sums: `benches/bench_sums.py`")
        rates = [r[2] for r in rows]
        write_readme_block(
            "sums",
            f"Summing float weights at n = {n:,}: {min(rates) / 1e6:.2f} to "
            f"{max(rates) / 1e6:.2f} million boxes per second (`benches/bench_sums.py`, "
            "section *Weighted sums*).",
        )


if __name__ == "__main__":
    main()
