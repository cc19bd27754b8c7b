"""``boxwood stats``: how the points in each box are spread, beside the boxes' columns.

The columns are those of :meth:`boxwood.RangeTree.stats_boxes`: ``count``, ``sum`` and
``mean`` (when the tree has weights), ``min``, ``max`` and one column a quantile
(``q0.5``, ...) of the axis ``--of`` names. A statistic of an empty box is a missing value
(a null in Parquet, an empty cell in CSV).
"""

from __future__ import annotations

import argparse
from typing import Any

import numpy as np

from .. import _stats
from . import _exits, _tables
from ._exits import UsageError
from ._folders import axis_of, is_growing
from ._output import counted, note, prepare_output, shown_path
from ._progress import Progress, run_with_activity
from ._sources import batched, open_source, read_box_keys, read_boxes


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The options of ``stats`` beyond those every box command takes."""
    parser.add_argument(
        "--of",
        choices=("x", "y"),
        default="y",
        help="the axis the statistics are of (default: y)",
    )
    parser.add_argument(
        "--quantiles",
        default="0.5,0.95,0.99",
        metavar="Q,Q,...",
        help="probabilities in [0, 1], comma-separated (default: 0.5,0.95,0.99; '' for none)",
    )
    parser.add_argument(
        "--method",
        default="linear",
        choices=_stats.METHODS,
        metavar="METHOD",
        help="numpy.quantile's method (default: linear): " + ", ".join(_stats.METHODS),
    )


def _probabilities(text: str) -> list[float]:
    try:
        probs = [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise UsageError(f"--quantiles: not a comma-separated list of numbers: {text!r}") from None
    bad = [p for p in probs if not 0 <= p <= 1]
    if bad:
        raise UsageError(f"--quantiles: {bad[0]:g} is not in [0, 1]")
    return probs


def run_stats(args: argparse.Namespace) -> int:
    prepare_output(args, args.output)
    probs = _probabilities(args.quantiles)
    source = open_source(args)
    tree = source.tree  # counts and sums add up across a growing folder's segments
    boxes, bounds = read_boxes(args, tree)
    keys = read_box_keys(args, tree)
    rows = boxes.num_rows
    count = batched(args, "count", tree.count, bounds, rows, keys=keys)
    spread_of = _static(args, tree)
    empty = count == 0
    columns: dict[str, Any] = {"count": count}
    if tree.weights_dtype is not None:
        total = batched(args, "sum", tree.sum, bounds, rows, keys=keys)
        columns["sum"] = total
        columns["mean"] = total / np.maximum(count, 1)
    for name in ("min", "max"):
        extreme = _data(getattr(spread_of, name), of=args.of)
        columns[name] = batched(args, name, extreme, bounds, rows, keys=keys)
    if probs:
        spread = _data(spread_of.quantile, probs, of=args.of, method=args.method)
        values = batched(args, "quantiles", spread, bounds, rows, keys=keys).reshape(rows, -1)
        for j, q in enumerate(probs):
            columns[f"q{q:g}"] = values[:, j]
    clash = [name for name in columns if name in boxes.column_names]
    if clash:
        raise UsageError(f"{args.boxes}: already has a column {clash[0]!r}")
    zone = axis_of(tree, args.of).tz
    result = boxes
    for name, values in columns.items():
        result = result.append_column(
            name, _arrow(values, None if name == "count" else empty, zone)
        )
    _tables.write_table(args.output, result)
    note(
        args,
        f"wrote {counted(rows, 'box', 'boxes')} with their statistics to {shown_path(args.output)}",
    )
    return _exits.OK


def _static(args: argparse.Namespace, tree: Any) -> Any:
    """The static tree the statistics are asked of: a growing folder's live rows as one
    tree (its own when it is one segment with nothing deleted), since a minimum or a
    quantile does not add up across segments as counts and sums do."""
    if not is_growing(tree):
        return tree
    if len(tree) == 0:  # every box is empty: its statistics are missing values
        return _Nothing(axis_of(tree, args.of).dtype)
    progress = Progress(f"one tree of {len(tree):,} live rows", enabled=not args.quiet)
    with progress:
        static = run_with_activity(progress, tree.to_tree)
    segments = counted(len(tree.segments), "segment")
    note(args, f"{args.source}: the statistics of one tree of its {segments}' live rows")
    return static


class _Nothing:
    """The statistics of a growing folder with no live rows (whose keys' types, before any
    row gave them, no static tree could take): values of the axis's dtype, every box empty
    and so masked by its count."""

    def __init__(self, dtype: np.dtype) -> None:
        self.dtype = dtype

    def _values(self, x_lo: Any, *rest: Any, **options: Any) -> np.ndarray:
        return np.zeros(np.shape(x_lo), dtype=self.dtype)

    min = max = _values

    def quantile(self, x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any, q: Any, **options: Any):
        return np.zeros((*np.shape(x_lo), len(q)), dtype=self.dtype)


def _data(statistic: Any, *extra: Any, **options: Any) -> Any:
    """A tree statistic for `batched`: its values as a plain array (the mask of an integer
    answer is the boxes' emptiness, which the caller has from the counts)."""

    def call(x_lo: Any, x_hi: Any, y_lo: Any, y_hi: Any, **rest: Any) -> np.ndarray:
        return np.ma.getdata(statistic(x_lo, x_hi, y_lo, y_hi, *extra, **options, **rest))

    return call


def _arrow(values: np.ndarray, empty: np.ndarray | None, zone: str | None) -> Any:
    """A statistic column as an Arrow array, null where its box is empty; times of a
    tz-aware axis (naive UTC here) as timestamps in its zone."""
    pa = _tables.pyarrow()
    if empty is not None and values.ndim > 1:
        empty = np.broadcast_to(empty[:, None], values.shape)
    if values.dtype.kind == "M" and zone is not None:
        unit = np.datetime_data(values.dtype)[0]
        return pa.array(values.view(np.int64), type=pa.timestamp(unit, tz=zone), mask=empty)
    return pa.array(values, mask=empty)
