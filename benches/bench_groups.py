"""Keyed boxes (``by=``): keyed against unkeyed on the same points, and next to DuckDB and polars.

Run from the repository root:

    .venv/bin/python benches/bench_groups.py            # the sizes below
    .venv/bin/python benches/bench_groups.py --quick    # small sizes, a smoke run: writes nothing

It writes the section ``groups`` of benches/RESULTS.md.

Part 1, the targets (``BENCH_GROUPS_ROWS`` points, default 10^7, in ``BENCH_GROUPS_KEYS``
keys, default 10^4; ``BENCH_GROUPS_BOXES`` boxes, default 10^6): the points are uniform on the
unit square, keys uniform integers. Two trees of the same points, the same layout (compact,
the default): one built with ``by=keys``, one without. The boxes are squares around randomly
drawn points, each given that point's key. Counted side by side: the keyed tree's counts
of the boxes with their keys, and the unkeyed tree's counts of the same bounds (the same
boxes without keys, the whole point set). Targets: keyed count throughput at least 0.9x the
unkeyed, keyed build at most 1.15x the unkeyed build (both builds from the same arrays; the
keyed one includes making the key dictionary). ``BENCH_GROUPS_REPEATS`` rounds (default 7),
each running the two sides back to back: the table gives each side's best, and every round's
own ratio is listed beside it (wall time, and the build's CPU time), with their median and
range.

Part 2, against engines that join on a key and two inequalities
(``BENCH_GROUPS_JOIN_ROWS`` points, default 10^6, ``BENCH_GROUPS_JOIN_KEYS`` keys, default
10^3, ``BENCH_GROUPS_JOIN_BOXES`` boxes, default 10^4): every method runs in its own child
process (so its peak memory is its own: the child's ``VmHWM``, less its resident memory once
the data are made), timed from data in memory to answer, build included:

* boxwood: ``RangeTree(x, y, by=key)`` then ``count(..., by=)`` (counts), and
  ``RangeTree.pairs(..., by=)`` (joined (box, row) pairs);
* DuckDB: ``p.key = b.key and p.x between b.x_lo and b.x_hi and p.y between b.y_lo and
  b.y_hi``, counts by a ``group by`` of that join, pairs by the join itself;
* polars: ``join_where`` with the same three predicates (``key == key_box``, then the four
  inequalities), counts by ``group_by("box").len()``.

Every count array and every sorted pair list is compared with boxwood's (assert). A child
that passes ``BENCH_GROUPS_CAP_GIB`` (default 8) of resident memory is stopped and reported
as out of memory at that cap.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from results import env_size, write_section

import boxwood

SEED = 20261203
HERE = Path(__file__).resolve()


# ------------------------------------------------------------------------------- data


def points(n: int, keys: int, seed: int):
    rng = np.random.default_rng(seed)
    return rng.random(n), rng.random(n), rng.integers(0, keys, n)


def boxes(x, y, key, q: int, side: float, seed: int):
    """Squares of side `side` around `q` random points, each with that point's key."""
    rng = np.random.default_rng(seed + 1)
    at = rng.integers(0, x.size, q)
    half = side / 2
    return {
        "x_lo": x[at] - half,
        "x_hi": x[at] + half,
        "y_lo": y[at] - half,
        "y_hi": y[at] + half,
        "key": key[at],
    }


def peak_rss_bytes() -> int:
    """This process's peak resident memory (VmHWM: its own, from its exec on; a forked
    child's ``ru_maxrss`` would start from the parent's)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    raise OSError("no VmHWM in /proc/self/status")


class Rounds:
    """Wall-clock and CPU seconds (this process's, every thread's) of each round of one side.

    On the shared machine other processes take cores and wall time swings; CPU time counts
    the work done, which they change less (they still share caches and memory bandwidth)."""

    def __init__(self) -> None:
        self.wall: list[float] = []
        self.cpu: list[float] = []


def interleaved(first, second, repeats: int):
    """``((result, Rounds), (result, Rounds))`` of two callables run in turn, `repeats`
    rounds of one run each, after one untimed round (the first run of a process also pays
    for its first page faults and cold caches)."""
    rounds = [Rounds(), Rounds()]
    out = [first(), second()]
    for _ in range(repeats):
        for i, fn in enumerate((first, second)):
            w0, c0 = time.perf_counter(), time.process_time()
            out[i] = fn()
            rounds[i].cpu.append(time.process_time() - c0)
            rounds[i].wall.append(time.perf_counter() - w0)
    return (out[0], rounds[0]), (out[1], rounds[1])


def per_round(ratios: list[float]) -> str:
    """Every round's ratio in run order, then their median and range."""
    each = ", ".join(f"{r:.2f}" for r in ratios)
    return (
        f"{each} (median {float(np.median(ratios)):.2f}x, "
        f"from {min(ratios):.2f}x to {max(ratios):.2f}x)"
    )


def rss_bytes() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


# ------------------------------------------------------------------------------- part 1


def targets(n: int, k: int, q: int, repeats: int) -> str:
    x, y, key = points(n, k, SEED)
    # Boxes holding about 400 points of the whole set, so about 400 / k of their key.
    side = float(np.sqrt(400 / n))
    b = boxes(x, y, key, q, side, SEED)
    bounds = (b["x_lo"], b["x_hi"], b["y_lo"], b["y_hi"])
    # Each round runs both sides back to back, so a change in the machine's load (it is
    # shared) falls on both alike; the table takes each side's best, and every round's own
    # ratio is listed beside it.
    (plain, builds_plain), (keyed, builds_keyed) = interleaved(
        lambda: boxwood.RangeTree(x, y), lambda: boxwood.RangeTree(x, y, by=key), repeats
    )
    (counts_plain, counts_t_plain), (counts_keyed, counts_t_keyed) = interleaved(
        lambda: plain.count(*bounds), lambda: keyed.count(*bounds, by=b["key"]), repeats
    )
    t_plain, t_keyed = min(builds_plain.wall), min(builds_keyed.wall)
    c_plain, c_keyed = min(counts_t_plain.wall), min(counts_t_keyed.wall)

    def ratios(numerator: list[float], denominator: list[float]) -> str:
        return per_round([a / b for a, b in zip(numerator, denominator)])

    # Checked: the keyed counts are the unkeyed tree's counts restricted to the key, on a
    # sample of boxes (numpy masks over the points).
    for i in range(0, q, max(1, q // 50)):
        mask = (
            (key == b["key"][i])
            & (x >= bounds[0][i])
            & (x <= bounds[1][i])
            & (y >= bounds[2][i])
            & (y <= bounds[3][i])
        )
        assert counts_keyed[i] == int(mask.sum())
    assert counts_keyed.sum() <= counts_plain.sum()
    rows = [
        ["build", f"{t_plain:.2f} s", f"{t_keyed:.2f} s", f"{t_keyed / t_plain:.2f}x", "<= 1.15x"],
        [
            f"count {q:,} boxes",
            f"{q / c_plain / 1e6:.2f} M/s",
            f"{q / c_keyed / 1e6:.2f} M/s",
            f"{c_plain / c_keyed:.2f}x",
            ">= 0.9x",
        ],
    ]
    header = ["", "without keys", f"with {k:,} keys", "keyed / unkeyed", "target"]
    lines = [
        f"n = {n:,} uniform points, {k:,} integer keys, compact layout; boxes: squares of "
        f"side {side:.2e} around random points (about {counts_plain.mean():.0f} points "
        f"each without keys, {counts_keyed.mean():.2f} of their key).",
        "",
        "| " + " | ".join(header) + " |",
        "|" + "---|" * len(header),
        *("| " + " | ".join(r) + " |" for r in rows),
        "",
        "Build ratio: keyed time / unkeyed time (lower is better); count ratio: keyed "
        "throughput / unkeyed throughput (higher is better). The keyed boxes are the same "
        "bounds but hold only their key's points; keyed batches are answered in (key, "
        f"Z-order) order, unkeyed ones in Z-order. The table: best of {repeats} runs each, "
        "the two sides in turn, one process; the load average at the start is in the stamp "
        "above.",
        "",
        "Each round's own ratio (its two runs back to back, after one untimed round), "
        "in run order; CPU time is this process's on every thread, which other processes "
        "on the shared machine change less than they change wall time:",
        "",
        f"- build time, keyed / unkeyed: {ratios(builds_keyed.wall, builds_plain.wall)}",
        f"- build CPU time, keyed / unkeyed: {ratios(builds_keyed.cpu, builds_plain.cpu)}",
        f"- count throughput, keyed / unkeyed: {ratios(counts_t_plain.wall, counts_t_keyed.wall)}",
        "",
        f"Tree sizes: {plain.nbytes / n:.1f} bytes a point without keys, "
        f"{keyed.nbytes / n:.1f} with.",
    ]
    return "\n".join(lines)


# ------------------------------------------------------------------------------- part 2


def child(method: str, n: int, k: int, q: int, out: str) -> None:
    """Run one method on the join data; save its answer and print its figures as JSON."""
    x, y, key = points(n, k, SEED + 1)
    b = boxes(x, y, key, q, float(np.sqrt(2000 / n)), SEED + 1)
    base = rss_bytes()
    t0 = time.perf_counter()
    if method.startswith("boxwood"):
        tree = boxwood.RangeTree(x, y, by=key)
        bounds = (b["x_lo"], b["x_hi"], b["y_lo"], b["y_hi"])
        if method == "boxwood count":
            answer = {"counts": tree.count(*bounds, by=b["key"])}
        else:
            box, row = tree.pairs(*bounds, by=b["key"])
            answer = {"box": box, "row": row}
    elif method.startswith("duckdb"):
        import duckdb
        import pandas as pd

        con = duckdb.connect()
        con.register("p", pd.DataFrame({"key": key, "x": x, "y": y, "row": np.arange(n)}))
        con.register("b", pd.DataFrame({**b, "box": np.arange(q)}))
        join = (
            "from b join p on p.key = b.key and p.x between b.x_lo and b.x_hi "
            "and p.y between b.y_lo and b.y_hi"
        )
        if method == "duckdb count":
            got = con.execute(f"select b.box, count(*) as c {join} group by b.box").fetchnumpy()
            counts = np.zeros(q, dtype=np.int64)
            counts[got["box"]] = got["c"]
            answer = {"counts": counts}
        else:
            got = con.execute(f"select b.box, p.row {join}").fetchnumpy()
            answer = {"box": got["box"], "row": got["row"]}
    else:
        import polars as pl

        p = pl.DataFrame({"key": key, "x": x, "y": y, "row": np.arange(n)})
        bf = pl.DataFrame(
            {"key_box": b["key"], **{c: b[c] for c in bounds_names()}}
        ).with_row_index("box")
        joined = p.join_where(
            bf,
            pl.col("key") == pl.col("key_box"),
            pl.col("x") >= pl.col("x_lo"),
            pl.col("x") <= pl.col("x_hi"),
            pl.col("y") >= pl.col("y_lo"),
            pl.col("y") <= pl.col("y_hi"),
        )
        if method == "polars count":
            got = joined.group_by("box").len()
            counts = np.zeros(q, dtype=np.int64)
            counts[got["box"].to_numpy()] = got["len"].to_numpy()
            answer = {"counts": counts}
        else:
            answer = {"box": joined["box"].to_numpy(), "row": joined["row"].to_numpy()}
    seconds = time.perf_counter() - t0
    np.savez(out, **answer)
    print(json.dumps({"seconds": seconds, "base": base, "peak": peak_rss_bytes()}))


def bounds_names() -> tuple[str, ...]:
    return ("x_lo", "x_hi", "y_lo", "y_hi")


def run_child(method: str, n: int, k: int, q: int, cap: int) -> dict:
    """One method in its own process, stopped if it passes `cap` bytes resident."""
    with tempfile.TemporaryDirectory() as tmp:
        out = os.path.join(tmp, "answer.npz")
        cmd = [sys.executable, str(HERE), "--child", method, str(n), str(k), str(q), out]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True)
        capped, usage, status = False, None, 0
        while usage is None:
            pid, status, got = os.wait4(proc.pid, os.WNOHANG)
            if pid:
                usage = got
                break
            try:
                with open(f"/proc/{proc.pid}/statm") as f:
                    rss = int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
            except OSError:
                rss = 0
            if rss > cap and not capped:
                proc.send_signal(signal.SIGKILL)
                capped = True
            time.sleep(0.02)
        proc.returncode = status  # reaped here, not by Popen
        text = proc.stdout.read() if proc.stdout else ""
        if capped:
            return {"method": method, "oom": True}
        if status != 0:
            raise SystemExit(f"{method} failed (status {status})")
        figures = json.loads(text.strip().splitlines()[-1])
        answer = dict(np.load(out))
        peak = figures["peak"]
        return {
            "method": method,
            "oom": False,
            "seconds": figures["seconds"],
            "memory": peak - figures["base"],
            "answer": answer,
        }


def _pairs(answer: dict) -> np.ndarray:
    order = np.lexsort((answer["row"], answer["box"]))
    return np.stack([answer["box"][order], answer["row"][order]]).astype(np.int64)


def against_engines(n: int, k: int, q: int, cap: int) -> str:
    rows = []
    reference: dict[str, dict] = {}
    for what in ("count", "join"):
        for engine in ("boxwood", "duckdb", "polars"):
            r = run_child(f"{engine} {what}", n, k, q, cap)
            if r["oom"]:
                rows.append(
                    [f"{engine} {what}", "out of memory", f"> {cap / 2**30:.0f} GiB", "", ""]
                )
                continue
            if engine == "boxwood":
                reference[what] = r
                base = r
            elif what == "count":
                np.testing.assert_array_equal(r["answer"]["counts"], base["answer"]["counts"])
            else:
                np.testing.assert_array_equal(_pairs(r["answer"]), _pairs(base["answer"]))
            matches = (
                int(r["answer"]["counts"].sum()) if what == "count" else len(r["answer"]["row"])
            )
            rows.append(
                [
                    f"{engine} {what}",
                    f"{r['seconds']:.3f} s",
                    f"{r['memory'] / 2**20:,.0f} MiB",
                    f"{r['seconds'] / reference[what]['seconds']:.1f}x",
                    f"{matches:,}",
                ]
            )
    header = ["method", "time (build included)", "peak memory", "time / boxwood's", "matches"]
    return "\n".join(
        [
            f"n = {n:,} uniform points in {k:,} integer keys, {q:,} boxes (squares around "
            "random points, each with that point's key); each method in its own process, "
            "its peak resident memory less the data's; every answer checked equal to boxwood's.",
            "",
            "| " + " | ".join(header) + " |",
            "|" + "---|" * len(header),
            *("| " + " | ".join(r) + " |" for r in rows),
        ]
    )


def versions() -> str:
    import duckdb
    import polars

    return (
        f"boxwood {boxwood.__version__}, duckdb {duckdb.__version__}, polars {polars.__version__}"
    )


def main(argv: list[str] | None = None) -> None:
    argv = sys.argv[1:] if argv is None else argv
    if argv and argv[0] == "--child":
        method = f"{argv[1]}"
        child(method, int(argv[2]), int(argv[3]), int(argv[4]), argv[5])
        return
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="small sizes; write nothing")
    args = parser.parse_args(argv)
    if args.quick:
        n, k, q, jn, jk, jq = 200_000, 1_000, 20_000, 50_000, 100, 2_000
    else:
        n = env_size("BENCH_GROUPS_ROWS", 10**7)
        k = env_size("BENCH_GROUPS_KEYS", 10**4)
        q = env_size("BENCH_GROUPS_BOXES", 10**6)
        jn = env_size("BENCH_GROUPS_JOIN_ROWS", 10**6)
        jk = env_size("BENCH_GROUPS_JOIN_KEYS", 10**3)
        jq = env_size("BENCH_GROUPS_JOIN_BOXES", 10**4)
    repeats = env_size("BENCH_GROUPS_REPEATS", 2 if args.quick else 7)
    cap = int(float(os.environ.get("BENCH_GROUPS_CAP_GIB", "8")) * 2**30)
    part1 = targets(n, k, q, repeats)
    print(part1, flush=True)
    part2 = against_engines(jn, jk, jq, cap)
    print(part2, flush=True)
    if not args.quick:
        body = "\n".join(
            [
                f"Software: {versions()}.",
                "",
                "### Keyed against unkeyed, same points",
                "",
                part1,
                "",
                "### Keyed counts and joins next to DuckDB and polars",
                "",
                part2,
            ]
        )
        write_section("groups", body, title="Boxes per key: `benches/bench_groups.py`")


if __name__ == "__main__":
    resource.setrlimit(resource.RLIMIT_CORE, (0, 0))
    main()
