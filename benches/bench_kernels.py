"""The criterion benchmarks of the engine kernels (rust_core/benches/kernels.rs), as a section.

    .venv/bin/python benches/bench_kernels.py            # `make bench-rust`
    .venv/bin/python benches/bench_kernels.py --no-run   # tabulate the last cargo bench run

Runs ``cargo bench -p boxwood-core --bench kernels`` (extra arguments after ``--`` go to
criterion, e.g. ``-- --quick``), then reads criterion's own estimates of each benchmark
(``target/criterion/GROUP/NAME/new/estimates.json`` and ``benchmark.json``, written by the
run just made) and writes them as the section ``kernels`` of benches/RESULTS.md: the median
time and its confidence interval, and the throughput the kernel declares (points, boxes or
row ids per second). The kernels check their own answers in ``cargo test``; this only times
them.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

from results import REPO, write_section

CRITERION = REPO / "target" / "criterion"
UNITS = {
    "build": "points/s",
    "count_batch": "boxes/s",
    "report_batch": "row ids/s",
    "root_ranks": "boxes/s",
}


def _seconds(ns: float) -> str:
    for scale, unit in ((1e9, "s"), (1e6, "ms"), (1e3, "us")):
        if ns >= scale:
            return f"{ns / scale:.3g} {unit}"
    return f"{ns:.3g} ns"


def read_estimates(since: float) -> list[dict]:
    """Each benchmark criterion wrote after `since` (a time.time()): group, name, median ns,
    its confidence interval, the declared elements per iteration."""
    out = []
    for est_path in sorted(CRITERION.glob("*/*/new/estimates.json")):
        if est_path.stat().st_mtime < since:
            continue
        meta = json.loads((est_path.parent / "benchmark.json").read_text())
        median = json.loads(est_path.read_text())["median"]
        elements = (meta.get("throughput") or {}).get("Elements")
        out.append(
            {
                "group": meta["group_id"],
                "name": meta.get("function_id") or meta.get("value_str") or "",
                "median": median["point_estimate"],
                "low": median["confidence_interval"]["lower_bound"],
                "high": median["confidence_interval"]["upper_bound"],
                "elements": elements,
            }
        )
    return out


def table(rows: list[dict]) -> str:
    lines = ["| group | kernel | median | 95 % interval | throughput |", "|---|---|---|---|---|"]
    for r in rows:
        rate = ""
        if r["elements"]:
            per_s = r["elements"] / (r["median"] * 1e-9)
            rate = f"{per_s / 1e6:,.1f} M {UNITS.get(r['group'], 'elements/s')}"
        lines.append(
            f"| {r['group']} | {r['name']} | {_seconds(r['median'])} | "
            f"{_seconds(r['low'])} to {_seconds(r['high'])} | {rate} |"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--no-run", action="store_true", help="only read the last run")
    parser.add_argument("--no-write", action="store_true", help="print only")
    parser.add_argument("criterion_args", nargs="*", help="passed to criterion after --")
    args = parser.parse_args(argv)
    command = ["cargo", "bench", "-p", "boxwood-core", "--bench", "kernels"]
    if args.criterion_args:
        command += ["--", *args.criterion_args]
    since = 0.0
    if not args.no_run:
        since = time.time()
        subprocess.run(command, cwd=REPO, check=True)
    rows = read_estimates(since)
    if not rows:
        print(f"no criterion estimates under {CRITERION}", file=sys.stderr)
        return 1
    body = table(rows) + (
        "\n\nn = 10^6 uniform points (`rust_core/benches/kernels.rs`): count batches of "
        "100,000 squares (small: side 0.02; large: side 0.2) on a compact tree, report "
        "batches of 1,000 squares of side 0.1, root searches alone (boxes empty in y). "
        "Criterion's median of its samples and the interval it gives for that median."
    )
    print(body)
    if not args.no_write:
        shown = " ".join(command)
        write_section(
            "kernels",
            body,
            command=f"{shown}; through .venv/bin/python benches/bench_kernels.py",
            title="Engine kernels (criterion): `benches/bench_kernels.py`",
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
