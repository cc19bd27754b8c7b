"""Where a tree's bytes go: ``RangeTree.nbytes_by_part`` in bits per point per level.

    .venv/bin/python benches/bench_memory.py            # n = 1e6 and 1e7 (BENCH_MEMORY_SIZES)
    BENCH_MEMORY_SIZES=1e5 .venv/bin/python benches/bench_memory.py --no-write

For each size, both layouts, without and with float64 weights: the parts that every level
adds to (cascade bits, the count cascade, level rows, level weights) in bits per point per
level (``bytes * 8 / n / height``), and those that grow with n alone (sorted axes with their
search indexes, leaf rows) in bytes per point. These are sizes, not timings: the same on any
machine for the same n. Each tree is checked against a numpy mask on 50 boxes.

Writes the section ``memory`` of benches/RESULTS.md and the README block ``memory``.
"""

from __future__ import annotations

import argparse

import numpy as np
from results import env_sizes, write_readme_block, write_section

import boxwood

PER_LEVEL = ("cascade bits", "count cascade", "level rows", "level weights")
ONCE = ("sorted axes", "leaf rows")
DEFAULT_SIZES = (10**6, 10**7)


def check_counts(tree: boxwood.RangeTree, x: np.ndarray, y: np.ndarray, seed: int) -> None:
    """50 boxes against a numpy mask (the outside reference)."""
    rng = np.random.default_rng(seed)
    a, c = rng.random(50), rng.random(50)
    got = tree.count(a, a + 0.1, c, c + 0.1)
    for i in range(50):
        inside = (x >= a[i]) & (x <= a[i] + 0.1) & (y >= c[i]) & (y <= c[i] + 0.1)
        assert got[i] == np.count_nonzero(inside), (i, got[i])


def measure(n: int) -> list[dict]:
    rng = np.random.default_rng(11)
    x, y, w = rng.random(n), rng.random(n), rng.standard_normal(n)
    rows = []
    for layout in ("fast", "compact"):
        for weights in (None, w):
            tree = boxwood.RangeTree(x, y, weights=weights, layout=layout)
            check_counts(tree, x, y, seed=n)
            parts = tree.nbytes_by_part
            assert sum(parts.values()) == tree.nbytes, (parts, tree.nbytes)
            levels = n * tree.height
            rows.append(
                {
                    "n": n,
                    "layout": layout,
                    "weights": weights is not None,
                    "height": tree.height,
                    "nbytes": tree.nbytes,
                    "bits": {p: parts.get(p, 0) * 8 / levels for p in PER_LEVEL},
                    "once": sum(parts.get(p, 0) for p in ONCE) / n,
                }
            )
            del tree
    return rows


def table(rows: list[dict]) -> str:
    head = "| n | layout | weights | height | MiB | " + " | ".join(PER_LEVEL)
    head += " | all per-level parts | B/point once |"
    lines = [head, "|" + "---|" * (len(PER_LEVEL) + 7)]
    for r in rows:
        bits = [f"{r['bits'][p]:.2f}" for p in PER_LEVEL]
        lines.append(
            f"| {r['n']:,} | {r['layout']} | {'float64' if r['weights'] else 'none'} "
            f"| {r['height']} | {r['nbytes'] / 2**20:,.0f} | "
            + " | ".join(bits)
            + f" | {sum(r['bits'].values()):.2f} | {r['once']:.2f} |"
        )
    return "\n".join(lines)


def readme_lines(rows: list[dict]) -> str:
    largest = max(r["n"] for r in rows)
    pick = {(r["layout"], r["weights"]): r for r in rows if r["n"] == largest}
    compact, fast = pick[("compact", False)], pick[("fast", False)]
    cb, cc = compact["bits"]["cascade bits"], compact["bits"]["count cascade"]
    return (
        f"At n = {largest:,} (from `benches/bench_memory.py`, section *Memory by part* of "
        "[benches/RESULTS.md](benches/RESULTS.md)): the compact layout adds "
        f"{cb + cc:.2f} bits a point a level (cascade bits {cb:.2f}, count cascade {cc:.2f}), "
        f"the fast layout {sum(fast['bits'].values()):.2f} (its level rows "
        f"{fast['bits']['level rows']:.2f}); both keep {compact['once']:.1f} bytes a point once "
        f"(sorted axes and leaf rows); float64 weights add "
        f"{pick[('compact', True)]['bits']['level weights']:.1f} bits a point a level."
    )


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    rows = [r for n in env_sizes("BENCH_MEMORY_SIZES", DEFAULT_SIZES) for r in measure(n)]
    body = (
        table(rows) + "\n\nBits per point per level of each part that grows with the height "
        "(`bytes * 8 / n / height` from `RangeTree.nbytes_by_part`), and bytes per point of "
        "the parts that grow with n alone. Uniform float64 points; 50 counts of each tree "
        "checked against a numpy mask."
    )
    print(body)
    if not args.no_write:
        write_section("memory", body, title="Memory by part: `benches/bench_memory.py`")
        write_readme_block("memory", readme_lines(rows))


if __name__ == "__main__":
    main()
