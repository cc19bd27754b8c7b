"""Weighted sums at scale: boxes per second of ``RangeTree.sum`` next to ``count``.

For each layout: n float64 points (uniform), float64 weights, one tree with weights; then
100,000 squares holding a few hundred points each, summed and counted as one batch (best of
3). The first 200 sums are checked against ``math.fsum`` of a numpy mask, and 2,000 of them
against one-box calls (the batch must add the same runs in the same order: equal bit for bit).

Run: ``.venv/bin/python benches/bench_sums.py [--rows 10000000] [--boxes 100000]``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

import boxwood


def best_of(fn, repeats: int = 3) -> tuple[object, float]:
    best, result = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return result, best


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--rows", type=float, default=1e7)
    parser.add_argument("--boxes", type=int, default=100_000)
    args = parser.parse_args(argv)
    n, q = int(args.rows), args.boxes
    rng = np.random.default_rng(3)
    x, y = rng.random(n), rng.random(n)
    w = rng.standard_normal(n)
    side = math.sqrt(300 / n)
    a, c = rng.random(q), rng.random(q)
    print(f"n = {n:,} uniform points, float64 weights; {q:,} squares of side {side:.3g}")
    print("| layout | build s | sum boxes/s | count boxes/s |")
    print("|---|---|---|---|")
    for layout in ("fast", "compact"):
        t0 = time.perf_counter()
        tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
        build_s = time.perf_counter() - t0
        sums, sum_s = best_of(lambda tree=tree: tree.sum(a, a + side, c, c + side))
        _, count_s = best_of(lambda tree=tree: tree.count(a, a + side, c, c + side))
        assert isinstance(sums, np.ndarray)
        tolerance = 4 * (2 * tree.height + 2) * 2.0**-52 * math.fsum(np.abs(w))
        for i in range(200):
            inside = (x >= a[i]) & (x <= a[i] + side) & (y >= c[i]) & (y <= c[i] + side)
            assert abs(sums[i] - math.fsum(w[inside])) <= tolerance, i
        for i in range(2000):
            one = tree.sum(float(a[i]), float(a[i] + side), float(c[i]), float(c[i] + side))
            assert one == sums[i], i
        print(f"| {layout} | {build_s:.2f} | {q / sum_s:,.0f} | {q / count_s:,.0f} |")
        del tree
    print("200 sums checked against math.fsum of a mask, 2,000 equal to one-box sums")


if __name__ == "__main__":
    main()
