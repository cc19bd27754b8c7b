"""One large tree: build n = 10^8 points (compact layout), report build time and peak memory,
count a batch of boxes, and check a few boxes against a numpy mask.

    .venv/bin/python benches/bench_large.py              # needs about 10 GB; `make bench-large`
    BENCH_LARGE_ROWS=1e6 .venv/bin/python benches/bench_large.py --no-write

Sizes: ``BENCH_LARGE_ROWS`` (10^8), ``BENCH_LARGE_BOXES`` (100,000), ``BENCH_LARGE_LAYOUT``
(compact). Writes the section ``large`` of benches/RESULTS.md and the README block ``large``.
"""

from __future__ import annotations

import argparse
import os
import resource
import time

import numpy as np
from results import env_size, fenced, write_readme_block, write_section

import boxwood


def peak_rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    n = env_size("BENCH_LARGE_ROWS", 10**8)
    q = env_size("BENCH_LARGE_BOXES", 100_000)
    layout = os.environ.get("BENCH_LARGE_LAYOUT", "compact")
    rng = np.random.default_rng(42)
    x = rng.random(n)
    y = rng.random(n)
    before = peak_rss_mib()
    estimate = boxwood.estimate_bytes(n, layout=layout)
    t0 = time.perf_counter()
    tree = boxwood.RangeTree(x, y, layout=layout)
    build_s = time.perf_counter() - t0
    after = peak_rss_mib()
    side = 0.2 / np.sqrt(n / 1e6) * 0.1
    a, c = rng.random(q), rng.random(q)
    t0 = time.perf_counter()
    counts = tree.count(a, a + side, c, c + side)
    count_s = time.perf_counter() - t0
    for i in range(5):
        inside = (x >= a[i]) & (x <= a[i] + side) & (y >= c[i]) & (y <= c[i] + side)
        assert int(np.count_nonzero(inside)) == counts[i], i
    out = "\n".join(
        [
            repr(tree),
            f"build {build_s:.1f} s; peak RSS {before:,.0f} MiB with the input, "
            f"{after:,.0f} MiB after the build",
            f"estimate_bytes: index {estimate.index_bytes / 2**20:,.0f} MiB, build peak "
            f"{estimate.peak_build_bytes / 2**20:,.0f} MiB on top of the input (an upper bound)",
            f"count {q:,} boxes: {q / count_s:,.0f} boxes/s, mean {counts.mean():.1f} points a box",
            "5 boxes checked against a numpy mask",
        ]
    )
    print(out)
    if not args.no_write:
        body = fenced(out) + (
            "\n\nUniform points, squares of side "
            f"{side:.3g}. The count rate is one timing of one batch (it includes the thread "
            "pool's first use); peak RSS is the process's maximum resident set "
            "(`getrusage`), the input columns included."
        )
        write_section("large", body, title=f"n = {n:,}: `benches/bench_large.py`")
        write_readme_block(
            "large",
            f"At n = {n:,} points (`benches/bench_large.py`, section *n = {n:,}*), a tree "
            f"builds in {build_s:.0f} s ({layout} layout; peak resident memory "
            f"{after / 1024:.1f} GiB including the {2 * n * 8 / 2**30:.1f} GiB input, "
            f"against an upper-bound estimate of {estimate.peak_build_bytes / 2**30:.1f} GiB "
            f"on top of the input from `estimate_bytes`) and counts "
            f"{q / count_s / 1e6:.2f} million boxes per second.",
        )


if __name__ == "__main__":
    main()
