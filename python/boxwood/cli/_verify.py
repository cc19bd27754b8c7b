"""``boxwood verify``: check an index file through and through, for files from elsewhere.

A plain load checks every checksum and the rules that keep queries in bounds, each part
before its first use. ``verify`` checks every part at once and also derives again what can
be derived from other sections (the count cascade from the cascade bits, float prefix sums
from the leaf weights) and compares, as
``boxwood.load(path, verify="full")`` does. A damaged file exits with the bad-file code.
"""

from __future__ import annotations

import argparse
import os
import time

from .._boxwood import FORMAT_VERSION
from . import _exits, _tables
from ._exits import UsageError
from ._sources import load_index


def run_verify(args: argparse.Namespace) -> int:
    if _tables.file_kind(args.index) != "index":
        raise UsageError(f"{args.index}: verify takes an index file (*.boxwood)")
    started = time.perf_counter()
    tree = load_index(args.index, verify="full")
    seconds = time.perf_counter() - started
    weights = tree.weights_dtype
    print(f"{args.index}: ok")
    print(
        f"  format version {FORMAT_VERSION}, {len(tree):,} rows, {tree.layout} layout, "
        f"weights {'none' if weights is None else weights}"
    )
    print(f"  checked: every checksum; {', '.join(tree.verified)}")
    print("  derived again and compared: the count cascade, the root-search indexes,")
    print("  the level row ids and the prefix sums (integer and float; those the file has)")
    print(f"  {os.path.getsize(args.index):,} bytes in {seconds:.2f} s")
    return _exits.OK
