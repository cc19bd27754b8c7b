"""``boxwood build``: an index file from a points file."""

from __future__ import annotations

import argparse
import os

from .._tree import RangeTree
from . import _exits, _tables
from ._datasets import require_points
from ._exits import UsageError
from ._output import counted, note
from ._progress import Progress, run_with_activity
from ._sources import build_from_file


def run_build(args: argparse.Namespace) -> int:
    if not args.output.lower().endswith(_tables.INDEX_SUFFIX):
        raise UsageError(f"{args.output}: an index file's name ends in {_tables.INDEX_SUFFIX}")
    require_points(args.points)
    _tables.check_writable(args.output)
    source = build_from_file(
        args,
        args.points,
        weights=args.weights,
        layout=args.layout,
        on_missing=args.on_missing,
    )
    tree = source.tree
    save_index(args, tree, args.output)
    wrote = ", ".join(
        [counted(len(tree), "point"), counted(tree.height, "level"), counted(tree.nbytes, "byte")]
    )
    note(args, f"wrote {args.output}: {wrote}")
    return _exits.OK


def save_index(args: argparse.Namespace, tree: RangeTree, path: str) -> None:
    progress = Progress(f"save {os.path.basename(path)}", enabled=not args.quiet)
    with progress:
        try:
            run_with_activity(progress, lambda: tree.save(path))
        except OSError as exc:
            raise _exits.CannotWrite(f"{path}: {exc}") from None
