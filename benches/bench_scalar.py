"""One box a call against one call for all boxes: what a box costs each way, all in.

    .venv/bin/python benches/bench_scalar.py             # n = 1e6 and 1e7
    BENCH_SCALAR_SIZES=1e5 BENCH_SCALAR_CALLS=5000 \
        .venv/bin/python benches/bench_scalar.py --no-write

For each n (uniform float64 points, the default layout) and the same boxes, squares holding
about 300 points each at random positions (so a call starts cold in the cache):

* a Python loop of ``tree.count(a, b, c, d)`` with Python floats,
* the same loop with numpy float64 scalars (what a pandas row holds),
* ``boxes.apply(lambda r: tree.count(r.x_lo, r.x_hi, r.y_lo, r.y_hi), axis=1)``,
* ``boxes.apply(lambda r: (r.x_lo, r.x_hi, r.y_lo, r.y_hi), axis=1)``: pandas reading the
  four fields of each row and nothing else (what the row-by-row call costs before a count),
* ``tree.count_boxes(boxes)``: one batched call for the whole frame,
* ``tree.count(x_lo, x_hi, y_lo, y_hi)`` with the four columns as numpy arrays.

Microseconds per box, best of 3 (``BENCH_REPEATS``). Every method's counts are checked equal
to the batched ones, and 200 of those against a numpy mask.

Writes the section ``scalar`` of benches/RESULTS.md and the README block ``scalar``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from results import env_size, env_sizes, write_readme_block, write_section

import boxwood

DEFAULT_SIZES = (10**6, 10**7)
POINTS_PER_BOX = 300


def best_of(fn, repeats: int):
    best, result = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = fn()
        best = min(best, time.perf_counter() - t0)
    return result, best


def measure(n: int, calls: int, apply_rows: int, repeats: int) -> tuple[str, list[tuple]]:
    rng = np.random.default_rng(5)
    x, y = rng.random(n), rng.random(n)
    tree = boxwood.RangeTree(x, y)
    side = float(np.sqrt(POINTS_PER_BOX / n))
    a, c = rng.random(calls), rng.random(calls)
    boxes = pd.DataFrame({"x_lo": a, "x_hi": a + side, "y_lo": c, "y_hi": c + side})
    few = boxes.iloc[:apply_rows]
    tree.count(0.25, 0.75, 0.25, 0.75)  # the thread pool and the pages, once

    batched, _ = best_of(lambda: tree.count_boxes(boxes).to_numpy(), 1)
    for i in range(200):
        inside = (x >= a[i]) & (x <= a[i] + side) & (y >= c[i]) & (y <= c[i] + side)
        assert batched[i] == np.count_nonzero(inside), i

    floats = list(zip(a.tolist(), (a + side).tolist(), c.tolist(), (c + side).tolist()))
    scalars = list(zip(a, a + side, c, c + side))
    assert isinstance(scalars[0][0], np.float64)

    def loop(bounds):
        return lambda: [tree.count(p, q, r, s) for p, q, r, s in bounds]

    def per_row(r):
        return tree.count(r.x_lo, r.x_hi, r.y_lo, r.y_hi)

    def fields_only(r):
        return (r.x_lo, r.x_hi, r.y_lo, r.y_hi)

    rows = []  # (method, boxes, seconds)
    for name, fn, k, want in (
        ("`tree.count` loop, Python floats", loop(floats), calls, batched),
        ("`tree.count` loop, numpy float64 scalars", loop(scalars), calls, batched),
        (
            "`boxes.apply(lambda r: tree.count(...), axis=1)`",
            lambda: few.apply(per_row, axis=1).to_numpy(),
            apply_rows,
            batched[:apply_rows],
        ),
        ("`boxes.apply(lambda r: (four fields), axis=1)`", None, apply_rows, None),
        ("`tree.count_boxes(boxes)`", lambda: tree.count_boxes(boxes).to_numpy(), calls, batched),
        (
            "`tree.count(...)` on four numpy arrays",
            lambda: tree.count(a, a + side, c, c + side),
            calls,
            batched,
        ),
    ):
        if fn is None:
            _, seconds = best_of(lambda: few.apply(fields_only, axis=1), repeats)
        else:
            got, seconds = best_of(fn, repeats)
            assert np.array_equal(np.asarray(got, dtype=np.int64), want), name
        rows.append((name, k, seconds))
    header = (
        f"n = {n:,}, layout {tree.layout!r}, squares of side {side:.3g} "
        f"(about {POINTS_PER_BOX} points each)"
    )
    return header, rows


def section_body(results: list[tuple[int, str, list[tuple]]], repeats: int) -> str:
    out = []
    for _, header, rows in results:
        batch_us = next(s / k for name, k, s in rows if "count_boxes" in name) * 1e6
        out += [f"{header}:", "", "| method | boxes | us per box | vs `count_boxes` |"]
        out.append("|---|---|---|---|")
        for name, k, seconds in rows:
            us = seconds / k * 1e6
            out.append(f"| {name} | {k:,} | {us:.3f} | {us / batch_us:,.1f}x |")
        out.append("")
    out.append(
        f"Best of {repeats}. Counts of every method equal to `count_boxes`; 200 of those "
        "checked against a numpy mask. The scalar calls hold the GIL (each is one short call); "
        "`count_boxes` and array calls release it while the engine counts on all cores."
    )
    return "\n".join(out)


def readme_block(results: list[tuple[int, str, list[tuple]]]) -> str:
    n, _, rows = max(results, key=lambda r: r[0])
    us = {name: seconds / k * 1e6 for name, k, seconds in rows}
    by_row = next(v for name, v in us.items() if "tree.count(...), axis=1" in name)
    fields = next(v for name, v in us.items() if "four fields" in name)
    batch = next(v for name, v in us.items() if "count_boxes" in name)
    plain = next(v for name, v in us.items() if "Python floats" in name)
    return (
        f"At n = {n:,} (`benches/bench_scalar.py`, section *Scalar counts* of "
        "[benches/RESULTS.md](benches/RESULTS.md)): the `apply` line costs "
        f"{by_row:.1f} us a row, of which {fields:.1f} us is pandas handing over the row's "
        f"four fields; `count_boxes` costs {batch:.2f} us a row ({by_row / batch:,.0f}x less); "
        f"a loop of `tree.count` over Python floats {plain:.2f} us a call."
    )


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    sizes = env_sizes("BENCH_SCALAR_SIZES", DEFAULT_SIZES)
    calls = env_size("BENCH_SCALAR_CALLS", 50_000)
    apply_rows = min(calls, env_size("BENCH_APPLY_ROWS", 20_000))
    repeats = env_size("BENCH_REPEATS", 3)
    results = []
    for n in sizes:
        header, rows = measure(n, calls, apply_rows, repeats)
        results.append((n, header, rows))
    body = section_body(results, repeats)
    print(body)
    if not args.no_write:
        write_section(
            "scalar", body, title="Scalar counts: `benches/bench_scalar.py`", modules=("pandas",)
        )
        write_readme_block("scalar", readme_block(results))


if __name__ == "__main__":
    main()
