"""One large tree: build n = 10^8 points (compact layout), report build time and peak memory,
count a batch of boxes, and check a few boxes against a numpy mask.

Run: ``.venv/bin/python benches/bench_large.py [--rows 100000000]`` (needs about 10 GB).
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np

import boxwood


def peak_rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=float, default=1e8)
    parser.add_argument("--boxes", type=int, default=100_000)
    parser.add_argument("--layout", choices=("fast", "compact"), default="compact")
    args = parser.parse_args(argv)
    n = int(args.rows)
    rng = np.random.default_rng(42)
    x = rng.random(n)
    y = rng.random(n)
    before = peak_rss_mib()
    t0 = time.perf_counter()
    tree = boxwood.RangeTree(x, y, layout=args.layout)
    build_s = time.perf_counter() - t0
    print(tree)
    print(
        f"build {build_s:.1f} s; peak RSS {before:,.0f} MiB with the input, "
        f"{peak_rss_mib():,.0f} MiB after the build"
    )
    q = args.boxes
    side = 0.2 / np.sqrt(n / 1e6) * 0.1
    a, c = rng.random(q), rng.random(q)
    t0 = time.perf_counter()
    counts = tree.count(a, a + side, c, c + side)
    count_s = time.perf_counter() - t0
    print(f"count {q:,} boxes: {q / count_s:,.0f} boxes/s, mean {counts.mean():.1f} points a box")
    for i in range(5):
        inside = (x >= a[i]) & (x <= a[i] + side) & (y >= c[i]) & (y <= c[i] + side)
        assert int(np.count_nonzero(inside)) == counts[i], i
    print("5 boxes checked against a numpy mask")


if __name__ == "__main__":
    main()
