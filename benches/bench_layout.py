"""The two layouts side by side in one run: counts, sums, reports (ordered and not) and joins.

    .venv/bin/python benches/bench_layout.py              # n = 1e7, 100,000 boxes
    BENCH_LAYOUT_ROWS=1e6 BENCH_LAYOUT_BOXES=20000 .venv/bin/python benches/bench_layout.py

This is the measurement behind the default layout (``layout="compact"``) and behind the
``ordered=True`` default of reports. Both trees are built from the same n uniform float64
points with float64 weights and kept alive together, and every timing alternates between
them (fast, compact, fast, compact, ...; best of 3 each), so both see the same machine load.

* count and sum: one batch of squares holding about 300 points each;
* report: squares of about 300 and about 20,000 points, as many as give about 10^7 row ids,
  with ``ordered=True`` (the default) and ``ordered=False``;
* join: ``boxwood.box_join`` of a pandas frame of ``BENCH_LAYOUT_JOIN_ROWS`` points (default
  10^6) with 10,000 squares of about 300 points, given a tree of each layout, and the build
  of that tree (what a join that builds its own tree adds).

Checked in the run (assert): counts equal in both layouts and to numpy masks on the first
100 boxes; sums equal in both layouts and within the compensated-sum bound of ``math.fsum``
on the first 100; each report's rows, ordered, equal the other layout's and the unordered
report's rows sorted; both joins equal.

Writes the section ``layout`` of benches/RESULTS.md and the README block ``layout``.
"""

from __future__ import annotations

import argparse
import gc
import math
import textwrap
import time
from typing import Any, Callable

import numpy as np
import pandas as pd
from results import env_size, write_readme_block, write_section

import boxwood

LAYOUTS = ("fast", "compact")
REPORT_ROWS = 10_000_000  # row ids a report timing produces (sets how many boxes it asks)
JOIN_BOXES = 10_000


def alternating_best(calls: dict[str, Callable[[], Any]], repeats: int = 3) -> dict[str, Any]:
    """``{name: (result, best seconds)}``, the calls run in turn `repeats` times."""
    best = dict.fromkeys(calls, math.inf)
    result: dict[str, Any] = {}
    for _ in range(repeats):
        for name, call in calls.items():
            gc.collect()
            t0 = time.perf_counter()
            result[name] = call()
            best[name] = min(best[name], time.perf_counter() - t0)
    return {name: (result[name], best[name]) for name in calls}


def squares(n: int, q: int, holding: int, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    side = math.sqrt(holding / n)
    a, c = rng.random(q) * (1 - side), rng.random(q) * (1 - side)
    return a, a + side, c, c + side


def check_counts_and_sums(x, y, w, box, counts, sums, height: int) -> None:
    total = math.fsum(np.abs(w))
    for i in range(min(100, box[0].size)):
        inside = (x >= box[0][i]) & (x <= box[1][i]) & (y >= box[2][i]) & (y <= box[3][i])
        assert counts[i] == np.count_nonzero(inside), i  # reference: a numpy mask
        bound = 4 * (2 * height + 2) * 2.0**-52 * total
        assert abs(sums[i] - math.fsum(w[inside])) <= bound, i


def measure(n: int, q: int, join_rows: int) -> tuple[list[str], dict[str, float]]:
    rng = np.random.default_rng(29)
    x, y, w = rng.random(n), rng.random(n), rng.standard_normal(n)
    trees, lines, figures = {}, [], {}
    for layout in LAYOUTS:
        t0 = time.perf_counter()
        trees[layout] = boxwood.RangeTree(x, y, weights=w, layout=layout)
        figures[f"build {layout}"] = time.perf_counter() - t0
    plain = {lay: boxwood.estimate_bytes(n, layout=lay).index_bytes for lay in LAYOUTS}
    rows = [
        "| | fast | compact | compact / fast |",
        "|---|---|---|---|",
        _row("build s (with weights)", figures["build fast"], figures["build compact"], "{:.2f}"),
        _row("MiB, no weights", plain["fast"] / 2**20, plain["compact"] / 2**20, "{:,.0f}"),
        _row(
            "MiB, float64 weights",
            trees["fast"].nbytes / 2**20,
            trees["compact"].nbytes / 2**20,
            "{:,.0f}",
        ),
    ]

    small = squares(n, q, 300, rng)
    for what in ("count", "sum"):
        timed = alternating_best(
            {lay: (lambda t=trees[lay], m=what: getattr(t, m)(*small)) for lay in LAYOUTS}
        )
        assert np.array_equal(timed["fast"][0], timed["compact"][0]) or what == "sum"
        rate = {lay: q / timed[lay][1] for lay in LAYOUTS}
        figures[what] = rate["compact"] / rate["fast"]
        rows.append(_row(f"{what}, boxes/s (~300 points a box)", *rate.values(), "{:,.0f}"))
        if what == "count":
            counts = timed["fast"][0]
        else:
            sums = timed["fast"][0]
            assert np.allclose(sums, timed["compact"][0], rtol=0, atol=1e-9 * math.fsum(abs(w)))
    check_counts_and_sums(x, y, w, small, counts, sums, trees["fast"].height)

    for holding in (300, 20_000):
        box = squares(n, max(1, min(q, REPORT_ROWS // holding)), holding, rng)
        k = box[0].size
        for ordered in (True, False):
            timed = alternating_best(
                {
                    lay: (lambda t=trees[lay], o=ordered, b=box: t.report(*b, ordered=o))
                    for lay in LAYOUTS
                }
            )
            ids = timed["fast"][0][1].size
            rate = {lay: ids / timed[lay][1] for lay in LAYOUTS}
            figures[f"report {holding} {ordered}"] = rate["compact"] / rate["fast"]
            figures[f"report rate {holding} {ordered} fast"] = rate["fast"]
            figures[f"report rate {holding} {ordered} compact"] = rate["compact"]
            how = "" if ordered else " ordered=False"
            label = f"report{how}, row ids/s ({k:,} boxes of ~{holding:,} points)"
            rows.append(_row(label, *rate.values(), "{:,.0f}"))
            _check_reports(x, y, box, timed, ordered)

    rows += join_rows_measured(join_rows, rng, figures)
    ordered_cost = {
        lay: figures[f"report rate 20000 False {lay}"] / figures[f"report rate 20000 True {lay}"]
        for lay in LAYOUTS
    }
    figures.update({f"unordered gain {lay}": ordered_cost[lay] for lay in LAYOUTS})
    header = (
        f"n = {n:,} uniform float64 points with float64 weights, both trees alive together; "
        f"{q:,} squares for counts and sums; best of 3, fast and compact timed in turn."
    )
    lines = [header, "", *rows]
    return lines, figures


def _check_reports(x, y, box, timed: dict[str, Any], ordered: bool) -> None:
    """Both layouts report the same rows; ordered ones ascend within a box and equal numpy
    masks (the reference) on the first boxes; unordered ones are the same rows re-sorted."""
    (f_off, f_rows), (c_off, c_rows) = timed["fast"][0], timed["compact"][0]
    assert np.array_equal(f_off, c_off)
    owner = np.repeat(np.arange(f_off.size - 1), np.diff(f_off))
    if not ordered:
        f_rows, c_rows = f_rows[np.lexsort((f_rows, owner))], c_rows[np.lexsort((c_rows, owner))]
    assert np.array_equal(f_rows, c_rows)
    assert np.all((np.diff(f_rows) > 0) | (np.diff(owner) > 0))
    for i in range(min(3, f_off.size - 1)):
        inside = (x >= box[0][i]) & (x <= box[1][i]) & (y >= box[2][i]) & (y <= box[3][i])
        assert np.array_equal(f_rows[f_off[i] : f_off[i + 1]], np.flatnonzero(inside)), i


def join_rows_measured(n: int, rng: np.random.Generator, figures: dict[str, float]) -> list[str]:
    points = pd.DataFrame({"x": rng.random(n), "y": rng.random(n), "trip": np.arange(n)})
    x_lo, x_hi, y_lo, y_hi = squares(n, JOIN_BOXES, 300, rng)
    boxes = pd.DataFrame(
        {"x_lo": x_lo, "x_hi": x_hi, "y_lo": y_lo, "y_hi": y_hi, "zone": np.arange(JOIN_BOXES)}
    )
    built = alternating_best(
        {
            lay: (lambda lay=lay: boxwood.RangeTree.from_frame(points, "x", "y", layout=lay))
            for lay in LAYOUTS
        }
    )
    joined = alternating_best(
        {
            lay: (lambda t=built[lay][0]: boxwood.box_join(points, boxes, x="x", y="y", tree=t))
            for lay in LAYOUTS
        }
    )
    pd.testing.assert_frame_equal(joined["fast"][0], joined["compact"][0])
    matches = len(joined["fast"][0])
    join_s = {lay: joined[lay][1] for lay in LAYOUTS}
    total_s = {lay: built[lay][1] + joined[lay][1] for lay in LAYOUTS}
    figures["join"] = join_s["compact"] / join_s["fast"]
    figures["join with build"] = total_s["compact"] / total_s["fast"]
    what = f"{n:,} points x {JOIN_BOXES:,} boxes, {matches:,} matches"
    return [
        _row(f"box_join s, tree given ({what})", *join_s.values(), "{:.3f}"),
        _row("box_join s, tree built first (from_frame + join)", *total_s.values(), "{:.3f}"),
    ]


def _row(label: str, fast: float, compact: float, fmt: str) -> str:
    ratio = compact / fast
    return f"| {label} | {fmt.format(fast)} | {fmt.format(compact)} | {ratio:.2f} |"


HOW_TO_READ = """\
"compact / fast" is the compact layout's figure over the fast one's: above 1 compact is
faster for rates, below 1 it is faster for seconds, and below 1 it is smaller for MiB. MiB
without weights are `boxwood.estimate_bytes(n, layout=...).index_bytes` (exactly `nbytes`);
with weights, the trees' `nbytes`. `report ordered=False` skips the sort that puts each box's
rows in increasing row order."""


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-write", action="store_true", help="print only")
    args = parser.parse_args(argv)
    n = env_size("BENCH_LAYOUT_ROWS", 10**7)
    q = env_size("BENCH_LAYOUT_BOXES", 100_000)
    join_rows = env_size("BENCH_LAYOUT_JOIN_ROWS", 10**6)
    lines, figures = measure(n, q, join_rows)
    body = "\n".join(lines) + "\n\n" + HOW_TO_READ
    print(body)
    if args.no_write:
        return
    write_section("layout", body, title="Layouts side by side: `benches/bench_layout.py`")
    write_readme_block("layout", readme_block(n, figures))


def readme_block(n: int, f: dict[str, float]) -> str:
    """The README's lines: wrapped, since the block sits in a list item."""
    return textwrap.fill(
        f"At n = {n:,} (`benches/bench_layout.py`, section *Layouts side by side*), compact "
        f"counts at {f['count']:.2f}x and sums at {f['sum']:.2f}x the fast layout's rate and "
        f"reports at {f['report 300 True']:.2f}x (about 300 rows a box) to "
        f"{f['report 20000 True']:.2f}x (about 20,000) of its row ids per second; a "
        f"`box_join` given a compact tree takes {f['join']:.2f}x the time it takes given a "
        f"fast one ({f['join with build']:.2f}x counting the tree's build). `ordered=False` "
        f"reports large boxes {f['unordered gain fast']:.2f}x (fast) and "
        f"{f['unordered gain compact']:.2f}x (compact) as fast as the default.",
        width=94,
    )


if __name__ == "__main__":
    main()
