"""Spread statistics: boxes per second of ``min``, ``max`` and ``quantile`` next to ``count``.

    .venv/bin/python benches/bench_stats.py                 # n = 1e7, 100,000 boxes a shape
    BENCH_STATS_ROWS=1e5 BENCH_STATS_BOXES=1000 BENCH_STATS_DUCKDB_ROWS=1e4 \\
        .venv/bin/python benches/bench_stats.py --no-write

Part 1, one tree of n uniform float64 points (compact layout; the statistics read only the
count cascades, the same in both layouts): for each box shape, a batch of boxes counted,
then their min and max of y and of x and their median (``quantile(..., 0.5)``, linear: two
order statistics after a count) of y and of x, each best of 3, side by side in one run; the
ratio to the count's rate is the issue's target (min/max at least 0.5, one quantile at
least 0.25). The first y statistic derives the transposed cascade: timed on its own. The
first 30 boxes of each shape are checked against ``numpy.quantile`` / ``numpy.min`` of a
numpy mask.

Part 2, what a user would write instead, on the small squares: ``report`` then
``numpy.quantile`` of each box's values (a Python loop, on the first boxes only), and at
``BENCH_STATS_DUCKDB_ROWS`` points a DuckDB range join with ``quantile_cont`` grouped by box
against ``tree.quantile`` on the same boxes (answers compared).

Writes the section ``stats`` of benches/RESULTS.md.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from results import env_size, write_section

import boxwood


def best_of(fn, repeats: int = 3) -> tuple[object, float]:
    best, result = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return result, best


def shapes(n: int, q: int, rng: np.random.Generator) -> dict[str, tuple[np.ndarray, ...]]:
    """Boxes of three shapes: squares of about 300 points, strips of about 300 points across
    half of x, squares of about 1% of the points."""
    out = {}
    for name, (wx, wy) in {
        "squares, ~300 points": (math.sqrt(300 / n), math.sqrt(300 / n)),
        "strips, ~300 points": (0.5, 600 / n),
        "squares, ~1% of points": (0.1, 0.1),
    }.items():
        a, c = rng.random(q) * (1 - wx), rng.random(q) * (1 - wy)
        out[name] = (a, a + wx, c, c + wy)
    return out


def check(tree, x, y, box, boxes: int = 30) -> None:
    a, b, c, d = box
    for of, values in (("y", y), ("x", x)):
        med = tree.quantile(a[:boxes], b[:boxes], c[:boxes], d[:boxes], 0.5, of=of)
        low = tree.min(a[:boxes], b[:boxes], c[:boxes], d[:boxes], of=of)
        for i in range(boxes):
            inside = values[(x >= a[i]) & (x <= b[i]) & (y >= c[i]) & (y <= d[i])]
            if inside.size:
                assert med[i] == np.quantile(inside, 0.5), (of, i)
                assert low[i] == inside.min(), (of, i)


def part_one(n: int, q: int) -> tuple[list[str], dict]:
    rng = np.random.default_rng(13)
    x, y = rng.random(n), rng.random(n)
    t0 = time.perf_counter()
    tree = boxwood.RangeTree(x, y)
    build_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    tree.min(0.0, 1.0, 0.0, 1e-9, of="y")  # the first y statistic derives the cascade
    derive_s = time.perf_counter() - t0
    lines = [
        f"n = {n:,} uniform float64 points, compact layout (built in {build_s:.1f} s); "
        f"{q:,} boxes a shape, one batch a call, best of 3. The first y statistic derived the "
        f"transposed cascade in {derive_s:.2f} s "
        f"({tree.nbytes_by_part['transposed cascade'] / 2**20:,.0f} MiB).",
        "",
        "| boxes | count boxes/s | min y | max y | min x | max x | median y | median x |",
        "|---|---|---|---|---|---|---|---|",
    ]
    small = None
    for name, box in shapes(n, q, rng).items():
        small = small or box
        check(tree, x, y, box)
        _, count_s = best_of(lambda box=box: tree.count(*box))
        rates = []
        for call in (
            lambda box=box: tree.min(*box, of="y"),
            lambda box=box: tree.max(*box, of="y"),
            lambda box=box: tree.min(*box, of="x"),
            lambda box=box: tree.max(*box, of="x"),
            lambda box=box: tree.quantile(*box, 0.5, of="y"),
            lambda box=box: tree.quantile(*box, 0.5, of="x"),
        ):
            _, s = best_of(call)
            rates.append(count_s / s)
        cells = " | ".join(f"{r:.2f}x" for r in rates)
        lines.append(f"| {name} | {q / count_s:,.0f} | {cells} |")
    lines += [
        "",
        "Statistics as ratios to the count's rate on the same boxes and tree (targets: min "
        "and max at least 0.5x, one quantile at least 0.25x). The first 30 boxes of each "
        "shape checked against numpy.quantile and numpy.min of a numpy mask.",
    ]
    return lines, {"tree": tree, "x": x, "y": y, "box": small}


def part_two(ctx: dict, per_box: int, duck_n: int, duck_q: int) -> list[str]:
    tree, y, box = ctx["tree"], ctx["y"], ctx["box"]
    a, b, c, d = (v[:per_box] for v in box)

    def by_report():
        offsets, rows = tree.report(a, b, c, d, ordered=False)
        return [
            np.quantile(y[rows[offsets[i] : offsets[i + 1]]], 0.5)
            if offsets[i + 1] > offsets[i]
            else np.nan
            for i in range(per_box)
        ]

    loop, loop_s = best_of(by_report)
    ours, ours_s = best_of(lambda: tree.quantile(a, b, c, d, 0.5))
    assert np.array_equal(np.asarray(loop), ours, equal_nan=True)
    lines = [
        "",
        f"What a user would write instead, on the first {per_box:,} small squares: `report` "
        f"then `numpy.quantile` per box, {per_box / loop_s:,.0f} boxes/s; `tree.quantile` "
        f"{per_box / ours_s:,.0f} boxes/s ({loop_s / ours_s:,.0f}x; answers equal).",
    ]
    try:
        import duckdb
        import pandas as pd
    except ImportError:
        return [*lines, "", "DuckDB is not installed: its comparison was not run."]
    rng = np.random.default_rng(17)
    px, py = rng.random(duck_n), rng.random(duck_n)
    side = math.sqrt(300 / duck_n)
    ba, bc = rng.random(duck_q) * (1 - side), rng.random(duck_q) * (1 - side)
    small_tree = boxwood.RangeTree(px, py)
    small_tree.min(0.0, 1.0, 0.0, 1e-9)  # derive the transposed cascade outside the timing
    con = duckdb.connect()
    con.register("p", pd.DataFrame({"x": px, "y": py}))
    con.register(
        "b",
        pd.DataFrame(
            {"box": np.arange(duck_q), "x_lo": ba, "x_hi": ba + side, "y_lo": bc, "y_hi": bc + side}
        ),
    )
    sql = (
        "select b.box, quantile_cont(p.y, 0.5) as med from b join p on p.x between b.x_lo "
        "and b.x_hi and p.y between b.y_lo and b.y_hi group by b.box"
    )
    got, duck_s = best_of(lambda: con.execute(sql).fetchnumpy())
    ours, ours_s = best_of(lambda: small_tree.quantile(ba, ba + side, bc, bc + side, 0.5))
    med = np.full(duck_q, np.nan)
    med[got["box"]] = got["med"]
    np.testing.assert_allclose(med, ours, rtol=1e-12)
    lines.append(
        f"At n = {duck_n:,} points and {duck_q:,} squares of about 300 points: DuckDB "
        f"{duckdb.__version__} (range join, `quantile_cont` grouped by box) "
        f"{duck_q / duck_s:,.0f} boxes/s, `tree.quantile` {duck_q / ours_s:,.0f} boxes/s "
        f"({duck_s / ours_s:,.0f}x; medians equal within 1e-12 relative)."
    )
    return lines


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    n, q = env_size("BENCH_STATS_ROWS", 10**7), env_size("BENCH_STATS_BOXES", 100_000)
    duck_n = env_size("BENCH_STATS_DUCKDB_ROWS", 10**6)
    lines, ctx = part_one(n, q)
    lines += part_two(ctx, min(q, 2000), duck_n, min(q, 10_000))
    lines += [
        "",
        "The machine was shared with other work while this ran: compare the ratios, taken "
        "side by side in one run, rather than the rates.",
    ]
    body = "\n".join(lines)
    print(body)
    if not args.no_write:
        write_section(
            "stats",
            body,
            title="Spread statistics: `benches/bench_stats.py`",
            modules=("duckdb", "pandas"),
        )


if __name__ == "__main__":
    main()
