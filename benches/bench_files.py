"""Index files at scale: save a tree, then open it in a fresh process, memory-mapped and read.

For each layout: build n = 10^7 points, save, and time `boxwood.load` in a new Python process
(so nothing is warm in the interpreter; the file is in the page cache, as it is for worker
processes on one machine). The load time includes checking every checksum and the structural
rules of the format. Answers of the loaded tree are compared with the built one.

Run: ``.venv/bin/python benches/bench_files.py [--rows 10000000] [--folder /tmp]``.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

import boxwood

_CHILD = """
import sys, time
t0 = time.perf_counter()
import boxwood
t1 = time.perf_counter()
tree = boxwood.load(sys.argv[1], mmap=sys.argv[2] == "mmap")
t2 = time.perf_counter()
import numpy as np
lo = np.linspace(0, 0.9, 1000)
print(t1 - t0, t2 - t1, int(tree.count(lo, lo + 0.05, 0.2, 0.6).sum()))
"""


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rows", type=float, default=1e7)
    parser.add_argument("--folder", default=tempfile.gettempdir())
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    n = int(args.rows)
    rng = np.random.default_rng(7)
    x, y = rng.random(n), rng.random(n)
    lo = np.linspace(0, 0.9, 1000)
    print(f"n = {n:,}; {os.cpu_count()} cores; folder {args.folder}")
    print("| layout | file MB | save s | load mmap s (import s) | load read s |")
    print("|---|---|---|---|---|")
    for layout in ("fast", "compact"):
        tree = boxwood.RangeTree(x, y, layout=layout)
        expected = int(tree.count(lo, lo + 0.05, 0.2, 0.6).sum())
        path = os.path.join(args.folder, f"bench-{layout}.boxwood")
        t0 = time.perf_counter()
        tree.save(path)
        save_s = time.perf_counter() - t0
        del tree
        times = {}
        for how in ("mmap", "read"):
            runs = []
            for _ in range(args.repeats):
                out = subprocess.run(
                    [sys.executable, "-c", _CHILD, path, how],
                    capture_output=True,
                    text=True,
                    check=True,
                ).stdout.split()
                imp, load, total = float(out[0]), float(out[1]), int(out[2])
                assert total == expected, (how, total, expected)
                runs.append((load, imp))
            times[how] = min(runs)
        size = os.path.getsize(path) / 1e6
        print(
            f"| {layout} | {size:,.0f} | {save_s:.2f} | {times['mmap'][0]:.3f} "
            f"({times['mmap'][1]:.2f}) | {times['read'][0]:.3f} |"
        )
        os.remove(path)


if __name__ == "__main__":
    main()
