"""The command line's arguments: one subcommand each, sharing groups of options."""

from __future__ import annotations

import argparse
from typing import Any, Callable

from . import _exits
from ._answer import run_count, run_sum
from ._build import run_build
from ._describe import run_describe
from ._grid import run_grid
from ._grow import run_append, run_expire
from ._join import run_join
from ._sources import BOUND_OPTIONS
from ._stats import add_arguments as add_stats_arguments
from ._stats import run_stats
from ._verify import run_verify


def _exit_code_help() -> str:
    lines = [f"  {code:>3}  {meaning}" for code, meaning in _exits.TABLE]
    return "exit codes:\n" + "\n".join(lines)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="boxwood",
        description=(
            "Exact counts, weight sums and matches of axis-parallel boxes over 2-D points "
            "from Parquet or CSV files, with a static range tree, or a growing tree kept in "
            "a folder (append, expire)."
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
    build.add_argument(
        "points",
        metavar="POINTS",
        help="points file (.parquet or .csv), or a dataset (a folder of Parquet files, or a "
        "quoted glob)",
    )
    _add_point_columns(
        build, required=True, weights="column of weights, kept in the index for sums"
    )
    build.add_argument(
        "-o", "--output", required=True, metavar="INDEX", help="index file to write (*.boxwood)"
    )
    _add_by(
        build,
        "key column(s) of the points, comma-separated (--by site,bay): one tree for all keys, "
        "a box asks its own key",
    )

    append = command(
        "append",
        "add a Parquet or CSV file's points to a growing tree's folder (made on the first "
        "append); prints the new rows' ids",
        [common],
        run_append,
    )
    append.add_argument(
        "folder", metavar="FOLDER", help="the growing tree's folder (made if it does not exist)"
    )
    append.add_argument(
        "points",
        metavar="POINTS",
        help="points file (.parquet or .csv), or a dataset (a folder of Parquet files, or a "
        "quoted glob)",
    )
    _add_point_columns(
        append,
        required=True,
        weights="column of weights (a folder made with weights needs them in every append)",
        memory_check=False,
    )
    append.set_defaults(layout=None)  # a new folder's is compact; an existing one keeps its own
    _add_by(
        append,
        "key column(s) of the points, comma-separated: a new folder is keyed by them, an "
        "existing keyed one needs as many, in its order",
    )

    expire = command(
        "expire",
        "remove every row of a growing tree's folder whose x is below a bound (retention)",
        [common],
        run_expire,
    )
    expire.add_argument("folder", metavar="FOLDER", help="the growing tree's folder")
    expire.add_argument(
        "--before",
        required=True,
        metavar="VALUE",
        help="rows with x below VALUE go: a number, or on a time axis an ISO 8601 time "
        "(2025-06-09T08:30; an offset or Z for UTC) or a duration (15min)",
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
        _add_by(sub, _BY_BOXES)
        sub.add_argument(
            "--column",
            default=name,
            metavar="NAME",
            help=f"name of the result column (default: {name})",
        )

    stats = command(
        "stats",
        "count, min, max and quantiles (sum and mean with weights) of the points in each box",
        [common, _points_options("column of weights: adds sum and mean"), boxes],
        run_stats,
    )
    _add_source(stats)
    stats.add_argument("boxes", metavar="BOXES", help="boxes file (.parquet or .csv)")
    _add_output(stats)
    _add_by(stats, _BY_BOXES)
    add_stats_arguments(stats)

    join = command(
        "join",
        "one row per (box, point) match: the points' columns, then the boxes' (as box_join)",
        [common, _points_options(None), boxes],
        run_join,
    )
    _add_source(join)
    join.add_argument("boxes", metavar="BOXES", help="boxes file (.parquet or .csv)")
    _add_output(join)
    _add_by(join, _BY_BOXES + "; the result carries the key once, as the points' columns")
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
    _add_by(grid, "key column(s) of a points file, for a keyed tree (then --key is needed)")
    grid.add_argument(
        "--key",
        metavar="VALUE[,VALUE]",
        help="a keyed tree's grid of the points of this key: one value per key column, in "
        "the order of --by (an index file's: describe's key_columns), comma-separated as "
        "one CSV record (a value holding a comma in double quotes: "
        "--key '\"Dock, north\",3'); times in ISO 8601, an offset or Z making them UTC; "
        "booleans true or false",
    )

    describe = command(
        "describe",
        "rows, levels, bytes, dtypes and layout of an index file (or rows, segments and "
        "dtypes of a growing tree's folder)",
        [common],
        run_describe,
    )
    describe.add_argument(
        "index", metavar="INDEX", help="index file (*.boxwood) or a growing tree's folder"
    )
    describe.add_argument("--json", action="store_true", help="print one JSON object")

    verify = command(
        "verify",
        "check every checksum and section of an index file, and derive again what can be "
        "derived (the count cascade) and compare: for index files from elsewhere; for a "
        "growing tree's folder, every file so, and the ids across its segments",
        [common],
        run_verify,
    )
    verify.add_argument(
        "index", metavar="INDEX", help="index file (*.boxwood) or a growing tree's folder"
    )

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


def _add_point_columns(
    parser: Any, *, required: bool, weights: str | None, memory_check: bool = True
) -> None:
    parser.add_argument("--x", required=required, metavar="COL", help="column of x coordinates")
    parser.add_argument("--y", required=required, metavar="COL", help="column of y coordinates")
    if weights is not None:
        parser.add_argument("--weights", metavar="COL", help=weights)
    parser.add_argument(
        "--layout",
        choices=("fast", "compact"),
        default=None if not required else "compact",
        help="tree layout: compact (the default, but fast for join) or fast (row ids on every "
        "level: reports of many rows, such as joins, run faster, in about 4 times the memory)",
    )
    if memory_check:
        parser.add_argument(
            "--no-memory-check",
            action="store_true",
            default=None if not required else False,
            help="build even when the memory estimate (an upper bound) exceeds what is available",
        )
    parser.add_argument(
        "--allow-empty",
        action="store_true",
        default=None if not required else False,
        help="build from a points file with no rows (by default refused, exit code 3)",
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
    for role, flag in BOUND_OPTIONS:
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


_BY_BOXES = (
    "key column(s), the same in the points and the boxes file: each box counts only the "
    "points of its own key (with an index file, the boxes file's key columns)"
)


def _add_by(parser: argparse.ArgumentParser, help_: str) -> None:
    parser.add_argument("--by", metavar="COL[,COL]", help=help_)


def _add_source(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "source",
        metavar="SOURCE",
        help="index file (*.boxwood), a growing tree's folder, or points with --x and --y: a "
        ".parquet or .csv file, or a dataset (a folder of Parquet files, or a quoted glob)",
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
