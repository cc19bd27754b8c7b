"""The ``boxwood`` command: range trees from Parquet or CSV files, boxes answered to files.

::

    boxwood build trips.parquet --x start --y minutes --weights fare -o trips.boxwood
    boxwood count trips.boxwood boxes.csv -o counts.parquet
    boxwood sum trips.parquet boxes.csv --x start --y minutes --weights fare -o sums.csv
    boxwood join trips.boxwood boxes.parquet -o matches.parquet
    boxwood grid trips.parquet --x start --y minutes --x-bins 24 --y-bins 12
    boxwood describe trips.boxwood
    boxwood demo --rows 100000

Every command that answers boxes takes either an index file (``.boxwood``, from ``build``) or
a points file (Parquet or CSV, with ``--x``/``--y`` naming its columns). Results are the
boxes' own columns with the answer beside them, written as Parquet or CSV by the output's
extension (CSV on stdout without ``-o``). User errors print one line on stderr and exit with
the codes in :mod:`boxwood.cli._exits`; see ``boxwood --help``.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import sys
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from .._parts import Layout, Provenance, TreeParts, build_parts
from .._tree import RangeTree
from . import _bins as _cli_grid
from . import _exits, _tables
from ._exits import BadValues, CommandError, FileUnreadable, UsageError
from ._progress import Progress, run_with_activity

#: Boxes per engine call in a batch: large enough to keep every core busy, small enough that
#: the progress bar moves.
BOXES_PER_CALL = 1 << 16
#: Matched (box, point) pairs per piece of a join written out, to bound memory.
JOIN_ROWS_PER_PIECE = 1 << 21
#: Suffixes for a column name that both the boxes and the points files have, in a join.
JOIN_SUFFIXES = ("_box", "_point")

_BOUND_OPTIONS = (("x_lo", "--x-lo"), ("x_hi", "--x-hi"), ("y_lo", "--y-lo"), ("y_hi", "--y-hi"))
_ROLE_WORDS = re.compile(r"\b(x_lo|x_hi|y_lo|y_hi|x|y|weights)\b")


# --------------------------------------------------------------------------------------------
# Entry point
# --------------------------------------------------------------------------------------------


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; returns the exit code (the console script exits with it)."""
    parser = build_parser()
    arguments = list(sys.argv[1:] if argv is None else argv)
    try:
        args, extra = parser.parse_known_args(arguments)
        if extra and args.command != "demo":
            parser.error(f"unrecognized arguments: {' '.join(extra)}")
    except SystemExit as exit_:  # argparse's usage errors (2) and --help (0)
        return _exit_code(exit_)
    try:
        if args.command == "demo":
            return _run_demo(extra)
        return args.run(args)
    except CommandError as exc:
        _error(args.command, str(exc))
        return exc.code
    except BrokenPipeError:  # a print to stdout (describe, grid), such as `| head -1`
        _tables.silence(sys.stdout)
        _error(args.command, "stdout was closed before the whole result was written")
        return _exits.CANNOT_WRITE
    except MemoryError as exc:  # also the library's refusal of a build that cannot fit
        reason = str(exc).replace("layout='compact'", "--layout compact")
        _error(args.command, f"not enough memory: {reason}" if reason else "not enough memory")
        return _exits.OUT_OF_MEMORY
    except KeyboardInterrupt:
        _error(args.command, "interrupted")
        return _exits.INTERRUPTED


def _exit_code(exit_: SystemExit) -> int:
    code = exit_.code
    return code if isinstance(code, int) else (0 if code is None else _exits.USAGE)


def _error(command: str, message: str) -> None:
    # One line, so that a scheduler's log shows the whole reason in one place.
    _to_stderr(f"boxwood {command}: error: {' '.join(message.split())}")


def _note(args: argparse.Namespace, message: str) -> None:
    if not args.quiet:
        _to_stderr(f"boxwood {args.command}: {message}")


def _to_stderr(line: str) -> None:
    """One line on stderr. A reader that has gone (`2>&1 | head`) is nobody's error: the
    exit code still says what happened, and a traceback would be lost in the pipe too."""
    try:
        print(line, file=sys.stderr, flush=True)
    except BrokenPipeError:
        _tables.silence(sys.stderr)


# --------------------------------------------------------------------------------------------
# Arguments
# --------------------------------------------------------------------------------------------


def _exit_code_help() -> str:
    lines = [f"  {code:>3}  {meaning}" for code, meaning in _exits.TABLE]
    return "exit codes:\n" + "\n".join(lines)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="boxwood",
        description=(
            "Exact counts, weight sums and matches of axis-parallel boxes over 2-D points "
            "from Parquet or CSV files, with a static range tree."
        ),
        epilog=_exit_code_help(),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    from .. import __version__

    parser.add_argument("--version", action="version", version=f"boxwood {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    common = _common_options()
    boxes = _box_options()

    def command(name: str, help_: str, parents: list[argparse.ArgumentParser], run: Callable):
        sub = commands.add_parser(
            name,
            help=help_,
            description=help_,
            parents=parents,
            epilog=_exit_code_help(),
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        sub.set_defaults(run=run)
        return sub

    build = command(
        "build", "build an index file from a Parquet or CSV file of points", [common], run_build
    )
    build.add_argument("points", metavar="POINTS", help="points file (.parquet or .csv)")
    _add_point_columns(
        build, required=True, weights="column of weights, kept in the index for sums"
    )
    build.add_argument(
        "-o", "--output", required=True, metavar="INDEX", help="index file to write (*.boxwood)"
    )

    for name, what in (("count", "the number of points"), ("sum", "the weight sum of points")):
        weights = "column of weights to sum" if name == "sum" else None
        sub = command(
            name,
            f"{what} in each box of a boxes file, written beside the boxes' columns",
            [common, _points_options(weights), boxes],
            run_count if name == "count" else run_sum,
        )
        _add_source(sub)
        sub.add_argument("boxes", metavar="BOXES", help="boxes file (.parquet or .csv)")
        _add_output(sub)
        sub.add_argument(
            "--column",
            default=name,
            metavar="NAME",
            help=f"name of the result column (default: {name})",
        )

    join = command(
        "join",
        "one row per (box, point) match, with the columns of both files",
        [common, _points_options(None), boxes],
        run_join,
    )
    _add_source(join)
    join.add_argument("boxes", metavar="BOXES", help="boxes file (.parquet or .csv)")
    _add_output(join)
    join.add_argument(
        "--point-columns",
        metavar="A,B,...",
        help="points-file columns to carry into the result (default: all of them)",
    )

    grid = command(
        "grid",
        "point counts (or weight sums) in the cells of a grid, numpy.histogram2d's bins",
        [common, _points_options("column of weights, summed per cell with --sum")],
        run_grid,
    )
    _add_source(grid)
    for axis in ("x", "y"):
        edges = grid.add_mutually_exclusive_group(required=True)
        edges.add_argument(
            f"--{axis}-bins",
            type=_positive_int,
            metavar="N",
            help=f"N equal-width bins over the data's {axis} range (or --{axis}-range)",
        )
        edges.add_argument(
            f"--{axis}-edges",
            metavar="E0,E1,...",
            help="explicit increasing bin edges: numbers, or ISO 8601 times on a time axis",
        )
        grid.add_argument(
            f"--{axis}-range",
            metavar="LO,HI",
            help=f"the span that --{axis}-bins divides (default: the data's {axis} range)",
        )
    grid.add_argument(
        "--sum", action="store_true", help="weight sums per cell instead of point counts"
    )
    grid.add_argument(
        "-o", "--output", metavar="FILE", help="write one row per cell (.parquet or .csv)"
    )
    grid.add_argument("--png", metavar="FILE", help="also draw the grid as a heatmap PNG")

    describe = command(
        "describe",
        "rows, levels, bytes, dtypes and layout of an index file",
        [common],
        run_describe,
    )
    describe.add_argument("index", metavar="INDEX", help="index file (*.boxwood)")
    describe.add_argument("--json", action="store_true", help="print one JSON object")

    commands.add_parser(
        "demo",
        help="run the demo on invented data (options: boxwood demo --help)",
        add_help=False,
    )
    return parser


def _common_options() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "-q", "--quiet", action="store_true", help="no progress bars and no notes on stderr"
    )
    return common


def _points_options(weights: str | None) -> argparse.ArgumentParser:
    """The points-file options; `weights` is the help of --weights, None where not used."""
    points = argparse.ArgumentParser(add_help=False)
    group = points.add_argument_group("points file (instead of an index file)")
    _add_point_columns(group, required=False, weights=weights)
    return points


def _add_point_columns(parser: Any, *, required: bool, weights: str | None) -> None:
    parser.add_argument("--x", required=required, metavar="COL", help="column of x coordinates")
    parser.add_argument("--y", required=required, metavar="COL", help="column of y coordinates")
    if weights is not None:
        parser.add_argument("--weights", metavar="COL", help=weights)
    parser.add_argument(
        "--layout",
        choices=("fast", "compact"),
        default=None if not required else "fast",
        help="tree layout: fast (row ids on every level) or compact (default: fast)",
    )
    parser.add_argument(
        "--on-missing",
        choices=("raise", "drop"),
        default=None if not required else "raise",
        help="a point with an empty, NaN or NaT value: fail (raise, default) or skip it",
    )


def _box_options() -> argparse.ArgumentParser:
    boxes = argparse.ArgumentParser(add_help=False)
    group = boxes.add_argument_group("boxes file")
    for role, flag in _BOUND_OPTIONS:
        group.add_argument(
            flag, dest=role, default=role, metavar="COL", help=f"column of {role} (default: {role})"
        )
    group.add_argument(
        "--inclusive",
        choices=("both", "neither", "left", "right"),
        default="both",
        help="which box edges are closed, the same on both axes (default: both)",
    )
    return boxes


def _add_source(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "source",
        metavar="SOURCE",
        help="index file (*.boxwood), or points file (.parquet or .csv) with --x and --y",
    )


def _add_output(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "-o",
        "--output",
        metavar="FILE",
        help="result file, .parquet or .csv (default: CSV on stdout)",
    )


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


# --------------------------------------------------------------------------------------------
# Where the points come from: an index file or a points file
# --------------------------------------------------------------------------------------------


@dataclass
class Source:
    """A tree and, for a points file, the points as read."""

    tree: RangeTree
    path: str
    #: The points file's columns as read (every row), or None for an index file.
    points: Any = None
    #: Rows of ``points`` that the tree holds, when rows with missing values were dropped.
    kept: np.ndarray | None = None
    #: The coordinates the tree was built from (a points file only), for data ranges.
    coordinates: tuple[Any, Any] | None = None


def open_source(
    args: argparse.Namespace, *, weights: bool = False, carry: list[str] | None = None
) -> Source:
    """The tree of ``args.source``: loaded from an index file or built from a points file.

    ``carry`` names points-file columns to read besides the coordinates (for a join);
    ``["*"]`` reads them all.
    """
    path = args.source
    if _tables.file_kind(path) == "index":
        given = [f"--{n.replace('_', '-')}" for n in ("x", "y", "weights", "layout", "on_missing")]
        given = [f for f in given if getattr(args, f[2:].replace("-", "_"), None) is not None]
        if given:
            raise UsageError(
                f"{' '.join(given)}: options for a points file, but {path} is an index file"
            )
        return Source(load_index(path), path)
    if args.x is None or args.y is None:
        raise UsageError(f"{path}: a points file needs --x and --y to name its coordinate columns")
    if weights and args.weights is None:
        raise UsageError(f"{path}: sums need --weights to name the points file's weight column")
    return build_from_file(
        args,
        path,
        weights=getattr(args, "weights", None),  # count and join take no --weights
        layout=args.layout or "fast",
        on_missing=args.on_missing or "raise",
        carry=carry,
    )


def load_index(path: str) -> RangeTree:
    """A tree from an index file; any failure to read it is a bad-file error."""
    _tables.check_readable(path)
    from .. import load

    try:
        return load(path)
    except (OSError, ValueError, TypeError) as exc:
        # The library's message names the file already.
        message = str(exc) if path in str(exc) else f"{path}: {exc}"
        raise FileUnreadable(message) from None


def build_from_file(
    args: argparse.Namespace,
    path: str,
    *,
    weights: str | None,
    layout: Layout,
    on_missing: str,
    carry: list[str] | None = None,
) -> Source:
    """The tree of a points file, with the table as read and the rows kept."""
    used = [args.x, args.y] + ([weights] if weights else [])
    columns = None if carry == ["*"] else used + (carry or [])
    table = _read(args, path, columns)
    _tables.require_columns(path, table.column_names, used)
    coordinate = _tables.ColumnRole("coordinate", "")
    for name in (args.x, args.y):
        _tables.check_type(path, table, name, coordinate)
    if weights:
        _tables.check_type(path, table, weights, _tables.ColumnRole("weight", ""))
    kept = None
    points = table
    if on_missing == "raise":
        advice = "pass --on-missing drop to skip such rows"
        _tables.refuse_missing(path, table, used, advice)
    else:
        missing = _tables.missing_mask(table, used)
        if missing.any():
            kept = np.flatnonzero(~missing)
            points = table.filter(_tables.pyarrow().array(~missing))
            dropped = f"dropped {int(missing.sum()):,} of {len(missing):,} rows"
            _note(args, f"{path}: {dropped} with missing values")
    xs = _tables.engine_values(points, args.x)
    ys = _tables.engine_values(points, args.y)
    ws = _tables.engine_values(points, weights) if weights else None
    roles = {"x": args.x, "y": args.y, "weights": weights or ""}
    # As from_frame does: reported rows (and those of a saved index) stay file rows.
    provenance = Provenance() if kept is None else Provenance(kept, table.num_rows - kept.size)

    def build() -> TreeParts:
        return build_parts(xs, ys, ws, layout=layout, names=(args.x, args.y), provenance=provenance)

    progress = Progress(f"build {points.num_rows:,} points", enabled=not args.quiet)
    with progress:
        try:
            parts = run_with_activity(progress, build)
        except (TypeError, ValueError, OverflowError) as exc:
            raise BadValues(f"{path}: {_with_columns(exc, roles)}") from None
    return Source(RangeTree._from_parts(parts), path, table, kept, (xs, ys))


def _read(args: argparse.Namespace, path: str, columns: list[str] | None) -> Any:
    progress = Progress(f"read {os.path.basename(path)}", enabled=not args.quiet)
    with progress:
        return run_with_activity(progress, lambda: _tables.read_table(path, columns))


def _with_columns(exc: BaseException, roles: dict[str, str]) -> str:
    """The library's message, with the file's column names beside its argument names."""
    message = str(exc)
    found = dict.fromkeys(_ROLE_WORDS.findall(message))
    named = [r for r in found if roles.get(r) and roles[r] != r]
    if not named:
        return message
    return message + " (" + ", ".join(f"{r} is column {roles[r]!r}" for r in named) + ")"


# --------------------------------------------------------------------------------------------
# Boxes
# --------------------------------------------------------------------------------------------


def read_boxes(args: argparse.Namespace) -> tuple[Any, list[Any]]:
    """The boxes file (every column) and its four bound columns as engine input."""
    path = args.boxes
    names = [getattr(args, role) for role, _ in _BOUND_OPTIONS]
    table = _read(args, path, None)
    _tables.require_columns(path, table.column_names, names)
    role = _tables.ColumnRole("bound", "")
    for name in names:
        _tables.check_type(path, table, name, role)
    _tables.refuse_missing(path, table, names, "every box needs all four bounds")
    return table, [_tables.engine_values(table, name) for name in names]


def batched(
    args: argparse.Namespace,
    label: str,
    method: Callable[..., Any],
    bounds: list[Any],
    rows: int,
    *,
    inclusive: str | None = None,
    where: str | None = None,
) -> np.ndarray:
    """``method`` (a tree's count or sum) over all boxes, in pieces, with a progress bar.

    ``inclusive`` and ``where`` (the file named in messages) default to the boxes file's.
    """
    inclusive = args.inclusive if inclusive is None else inclusive
    where = args.boxes if where is None else where
    roles = {role: getattr(args, role, role) for role, _ in _BOUND_OPTIONS}
    pieces = []
    with Progress(label, total=rows, unit="boxes", enabled=not args.quiet) as progress:
        for start in range(0, max(rows, 1), BOXES_PER_CALL):
            stop = min(start + BOXES_PER_CALL, rows)
            piece = [_rows(bound, start, stop) for bound in bounds]
            try:
                pieces.append(np.asarray(method(*piece, inclusive=inclusive)))
            except (TypeError, ValueError) as exc:
                raise BadValues(f"{where}: {_with_columns(exc, roles)}") from None
            except OverflowError as exc:
                raise BadValues(f"{where}: {exc}") from None
            progress.advance(stop - start)
    return np.concatenate(pieces)


def _rows(values: Any, start: int, stop: int) -> Any:
    """Rows ``start:stop`` of a numpy array or a pandas Series, by position."""
    return values.iloc[start:stop] if hasattr(values, "iloc") else values[start:stop]


# --------------------------------------------------------------------------------------------
# Commands
# --------------------------------------------------------------------------------------------


def run_build(args: argparse.Namespace) -> int:
    if not args.output.lower().endswith(_tables.INDEX_SUFFIX):
        raise UsageError(f"{args.output}: an index file's name ends in {_tables.INDEX_SUFFIX}")
    _tables.table_kind(args.points)
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
    note = f"wrote {args.output}: {len(tree):,} points, {tree.height} levels, {tree.nbytes:,} bytes"
    _note(args, note)
    return _exits.OK


def save_index(args: argparse.Namespace, tree: RangeTree, path: str) -> None:
    progress = Progress(f"save {os.path.basename(path)}", enabled=not args.quiet)
    with progress:
        try:
            run_with_activity(progress, lambda: tree.save(path))
        except OSError as exc:
            raise _exits.CannotWrite(f"{path}: {exc}") from None


def run_count(args: argparse.Namespace) -> int:
    return _answer_boxes(args, "count")


def run_sum(args: argparse.Namespace) -> int:
    return _answer_boxes(args, "sum")


def _answer_boxes(args: argparse.Namespace, what: str) -> int:
    """count or sum: the boxes' columns and one result column, to a file or stdout."""
    _prepare_output(args, args.output)
    source = open_source(args, weights=what == "sum")
    tree = source.tree
    if what == "sum" and tree.weights_dtype is None:
        raise UsageError(f"{source.path}: the index was built without --weights; cannot sum")
    boxes, bounds = read_boxes(args)
    if args.column in boxes.column_names:
        raise UsageError(
            f"{args.boxes}: already has a column {args.column!r}; name the result with --column"
        )
    method = tree.count if what == "count" else tree.sum
    values = batched(args, what, method, bounds, boxes.num_rows)
    pa = _tables.pyarrow()
    result = boxes.append_column(args.column, pa.array(values))
    _tables.write_table(args.output, result)
    _note(args, f"wrote {boxes.num_rows:,} boxes with {args.column!r} to {_where(args.output)}")
    return _exits.OK


def run_join(args: argparse.Namespace) -> int:
    """One row per match, written piece by piece, so the join never sits in memory whole."""
    _prepare_output(args, args.output)
    carry = ["*"] if args.point_columns is None else _split_names(args.point_columns)
    source = open_source(args, carry=carry)
    boxes, bounds = read_boxes(args)
    tree = source.tree
    counts = batched(args, "count", tree.count, bounds, boxes.num_rows)
    total = int(counts.sum())
    points = None
    if source.points is not None:
        keep = source.points.column_names if carry == ["*"] else carry
        points = source.points.select(keep)
    empty = np.zeros(0, dtype=np.int64)
    schema = _joined(boxes, points, empty, empty).schema
    progress = Progress("join", total=total, unit="matches", enabled=not args.quiet)
    with _tables.TableWriter(args.output, schema) as out, progress:
        for start, stop in join_pieces(counts, JOIN_ROWS_PER_PIECE):
            piece = [_rows(bound, start, stop) for bound in bounds]
            box, row = tree.pairs(*piece, inclusive=args.inclusive, ordered=True)
            out.write(_joined(boxes, points, box + start, row))
            progress.advance(box.size)
    _note(args, f"wrote {total:,} matches of {boxes.num_rows:,} boxes to {_where(args.output)}")
    return _exits.OK


def join_pieces(counts: np.ndarray, limit: int) -> Iterator[tuple[int, int]]:
    """Runs ``[start, stop)`` of boxes with about ``limit`` matches each (at least one box)."""
    ends = np.cumsum(counts)
    start = 0
    while start < counts.size:
        before = int(ends[start - 1]) if start else 0
        stop = int(np.searchsorted(ends, before + limit, side="right"))
        stop = min(max(stop, start + 1), start + BOXES_PER_CALL)
        yield start, stop
        start = stop


def _joined(boxes: Any, points: Any, box: np.ndarray, point_row: np.ndarray) -> Any:
    """The table of matches: box_row, the boxes' columns, point_row, the points' columns."""
    pa = _tables.pyarrow()
    box_side = {"box_row": pa.array(box, pa.int64())}
    for name in boxes.column_names:
        box_side[name] = boxes.column(name).take(pa.array(box, pa.int64()))
    point_side = {"point_row": pa.array(point_row, pa.int64())}
    if points is not None:
        for name in points.column_names:
            point_side[name] = points.column(name).take(pa.array(point_row, pa.int64()))
    clash = set(box_side) & set(point_side)
    columns = {(n + JOIN_SUFFIXES[0] if n in clash else n): v for n, v in box_side.items()}
    for name, values in point_side.items():
        columns[name + JOIN_SUFFIXES[1] if name in clash else name] = values
    return pa.table(columns)


def run_describe(args: argparse.Namespace) -> int:
    if _tables.file_kind(args.index) != "index":
        raise UsageError(f"{args.index}: describe takes an index file (*.boxwood)")
    tree = load_index(args.index)
    facts = describe(args.index, tree)
    if args.json:
        print(json.dumps(facts))
    else:
        width = max(len(k) for k in facts)
        for key, value in facts.items():
            shown = f"{value:,}" if isinstance(value, int) else str(value)
            print(f"{key:<{width}}  {shown}")
    return _exits.OK


def describe(path: str, tree: RangeTree) -> dict[str, Any]:
    weights = tree.weights_dtype
    return {
        "file": path,
        "file_bytes": os.path.getsize(path),
        "rows": len(tree),
        "rows_dropped": tree.rows_dropped,
        "levels": tree.height,
        "tree_bytes": tree.nbytes,
        "x_column": tree.x_name,
        "y_column": tree.y_name,
        "x_dtype": _dtype_label(tree, "x"),
        "y_dtype": _dtype_label(tree, "y"),
        "weights_dtype": "none" if weights is None else str(weights),
        "layout": tree.layout,
    }


def _dtype_label(tree: RangeTree, axis: str) -> str:
    info = tree._parts.x if axis == "x" else tree._parts.y  # the axis keeps the time zone
    return str(info.dtype) if info.tz is None else f"{info.dtype} ({info.tz})"


def run_grid(args: argparse.Namespace) -> int:
    """Counts (or sums) per grid cell: a matrix on stdout, or one row per cell to a file."""
    if args.output is not None:
        _prepare_output(args, args.output)
    if args.png is not None:
        _prepare_png(args.png)
    source = open_source(args, weights=args.sum)
    tree = source.tree
    if args.sum and tree.weights_dtype is None:
        raise UsageError(f"{source.path}: the index was built without --weights; cannot sum")
    x_edges = _grid_edges(args, source, "x")
    y_edges = _grid_edges(args, source, "y")
    values = grid_values(args, tree, x_edges, y_edges, sums=args.sum)
    what = "weight sum" if args.sum else "points"
    if args.output is None:
        print(_cli_grid.matrix_text(values, x_edges, y_edges, what))
    else:
        _tables.write_table(args.output, _grid_table(values, x_edges, y_edges, args.sum))
        _note(args, f"wrote {values.size:,} cells to {_where(args.output)}")
    if args.png is not None:
        from ._plot import write_heatmap

        x_name = args.x or tree.x_name
        y_name = args.y or tree.y_name
        write_heatmap(
            args.png,
            values,
            _cli_grid.naive_numpy(x_edges),
            _cli_grid.naive_numpy(y_edges),
            title=f"{os.path.basename(source.path)}: {what} per cell",
            x_label=x_name + (" (UTC)" if tree._parts.x.tz else ""),
            y_label=y_name + (" (UTC)" if tree._parts.y.tz else ""),
            value_label="weight sum per cell" if args.sum else "points per cell",
        )
        _note(args, f"wrote the heatmap to {args.png}")
    return _exits.OK


def _grid_edges(args: argparse.Namespace, source: Source, axis: str) -> Any:
    """The bin edges of one axis, from --AXIS-edges or --AXIS-bins (with --AXIS-range)."""
    info = source.tree._parts.x if axis == "x" else source.tree._parts.y
    edges_text = getattr(args, f"{axis}_edges")
    range_text = getattr(args, f"{axis}_range")
    if edges_text is not None:
        if range_text is not None:
            raise UsageError(f"--{axis}-range goes with --{axis}-bins, not with --{axis}-edges")
        return _cli_grid.parse_edges(edges_text, info, f"--{axis}-edges")
    if range_text is not None:
        lo, hi = _cli_grid.parse_range(range_text, info, f"--{axis}-range")
    elif source.coordinates is not None:
        lo, hi = _cli_grid.data_range(source.coordinates[0 if axis == "x" else 1])
    else:
        lo, hi = _cli_grid.index_range(source.tree, axis)
    return _cli_grid.equal_bins(getattr(args, f"{axis}_bins"), lo, hi, info)


def grid_values(
    args: argparse.Namespace, tree: RangeTree, x_edges: Any, y_edges: Any, *, sums: bool
) -> np.ndarray:
    """Cell values by numpy.histogram2d's bins: ``[lo, hi)``, the last bin on each axis closed."""
    cells = (len(x_edges) - 1) * (len(y_edges) - 1)
    progress = Progress(f"grid of {cells:,} cells", enabled=not args.quiet)
    with progress:
        try:
            return run_with_activity(progress, lambda: tree.grid(x_edges, y_edges, weighted=sums))
        except (TypeError, ValueError) as exc:
            raise UsageError(f"grid edges: {exc}") from None
        except OverflowError as exc:
            raise BadValues(f"{args.source}: {exc}") from None


def _grid_table(values: np.ndarray, x_edges: Any, y_edges: Any, sums: bool) -> Any:
    pa = _tables.pyarrow()
    nx, ny = values.shape
    xi = np.repeat(np.arange(nx), ny)
    yj = np.tile(np.arange(ny), nx)
    return pa.table(
        {
            "x_lo": pa.array(_cli_grid.take(x_edges, xi)),
            "x_hi": pa.array(_cli_grid.take(x_edges, xi + 1)),
            "y_lo": pa.array(_cli_grid.take(y_edges, yj)),
            "y_hi": pa.array(_cli_grid.take(y_edges, yj + 1)),
            "sum" if sums else "count": pa.array(values.ravel()),
        }
    )


def _prepare_png(path: str) -> None:
    if not path.lower().endswith(".png"):
        raise UsageError(f"{path}: a heatmap is written as .png")
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        raise _exits.extra_missing("matplotlib", "plot", "drawing a heatmap") from None
    _tables.check_writable(path)


def _run_demo(argv: list[str]) -> int:
    from .. import demo

    try:
        return demo.main(argv, prog="boxwood demo")
    except SystemExit as exit_:  # the demo's own argparse: --help (0) and usage errors (2)
        return _exit_code(exit_)


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------


def _prepare_output(args: argparse.Namespace, path: str | None) -> None:
    """Refuse a bad output before reading anything: a wrong name or a missing directory."""
    _tables.output_kind(path)
    _tables.check_writable(path)


def _where(path: str | None) -> str:
    return "stdout" if path in (None, "-") else str(path)


def _split_names(text: str) -> list[str]:
    names = [n.strip() for n in text.split(",") if n.strip()]
    if not names:
        raise UsageError(f"--point-columns: no column names in {text!r}")
    return names


if __name__ == "__main__":
    raise SystemExit(main())
