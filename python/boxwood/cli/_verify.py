"""``boxwood verify``: check an index file, or a growing tree's folder, through and through.

A plain load checks every checksum and the rules that keep queries in bounds, each part
before its first use. ``verify`` checks every part at once and also derives again what can
be derived from other sections (the count cascade from the cascade bits, float prefix sums
from the leaf weights) and compares, as ``boxwood.load(path, verify="full")`` does. For a
growing folder it does that for every segment and deleted-rows file, and checks the ids
across them (``boxwood.verify_folder``). Damage exits with the bad-file code.
"""

from __future__ import annotations

import argparse
import os
import time

from .._boxwood import FORMAT_VERSION
from .._growing import FolderError, verify_folder
from .._growing._folder import VERSION as FOLDER_VERSION
from . import _exits, _tables
from ._exits import FileUnreadable, UsageError
from ._folders import folder_error, not_growing
from ._output import counted
from ._sources import load_index


def run_verify(args: argparse.Namespace) -> int:
    kind = _tables.file_kind(args.index)
    if kind == "folder":
        return _verify_folder(args.index)
    if kind != "index":
        raise UsageError(
            f"{args.index}: verify takes an index file (*.boxwood) or a growing tree's folder"
        )
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


def _verify_folder(path: str) -> int:
    started = time.perf_counter()
    try:
        check = verify_folder(path)
    except FileNotFoundError:
        raise FileUnreadable(not_growing(path)) from None
    except (FolderError, OSError, ValueError) as exc:
        raise folder_error(path, exc) from None
    seconds = time.perf_counter() - started
    print(f"{path}: ok")
    print(
        f"  growing folder version {FOLDER_VERSION}, generation {check.generation:,}: "
        f"{counted(check.live_rows, 'live row')} ({check.deleted_rows:,} deleted) in "
        f"{counted(check.segments, 'segment')}, next id {check.next_id:,}"
    )
    print("  checked: the manifest's checksum and fields; every segment and deleted-rows file")
    print("  as verify checks an index file; ids ascending within and across segments and")
    print("  below the next id; each deleted row's point the same as its segment's")
    print(f"  {counted(check.files, 'file')}, {check.file_bytes:,} bytes in {seconds:.2f} s")
    if check.leftovers:
        print(
            f"  left by an interrupted change (deleted when a writer opens the folder): "
            f"{', '.join(check.leftovers)}"
        )
    return _exits.OK
