"""Where a command's points and boxes come from: an index file or a points file, and a
boxes file answered in batches."""

from __future__ import annotations

import argparse
import os
import re
from dataclasses import dataclass
from typing import Any, Callable, Literal

import numpy as np

from .._boxwood import IndexFileError
from .._parts import Layout, Provenance, TreeParts, build_parts
from .._tree import RangeTree, load
from . import _cells, _tables
from ._datasets import dataset_files, is_dataset, read_dataset, source_kind
from ._exits import BadValues, FileUnreadable, UsageError
from ._folders import Tree, open_folder, tree_keys
from ._output import note
from ._progress import Progress, run_with_activity

#: Boxes per engine call in a batch: large enough to keep every core busy, small enough that
#: the progress bar moves.
BOXES_PER_CALL = 1 << 16
#: The boxes file's bound columns and the options that name them.
BOUND_OPTIONS = (("x_lo", "--x-lo"), ("x_hi", "--x-hi"), ("y_lo", "--y-lo"), ("y_hi", "--y-hi"))
_ROLE_WORDS = re.compile(r"\b(x_lo|x_hi|y_lo|y_hi|x|y|weights)\b")


@dataclass
class Source:
    """A tree and, for a points file, the points as read. The tree is static (an index
    file's, a points file's) or a growing folder's (a reader: ``GrowingTree``)."""

    tree: Tree
    path: str
    #: The points file's columns as read (every row), or None for an index file.
    points: Any = None
    #: Rows of ``points`` that the tree holds, when rows with missing values were dropped.
    kept: np.ndarray | None = None
    #: The coordinates the tree was built from (a points file only), for data ranges.
    coordinates: tuple[Any, Any] | None = None


def open_source(
    args: argparse.Namespace,
    *,
    weights: bool = False,
    carry: list[str] | None = None,
    layout: Layout = "compact",
) -> Source:
    """The tree of ``args.source``: loaded from an index file, built from a points file, or
    a growing tree's folder opened as a reader.

    ``carry`` names points-file columns to read besides the coordinates (for a join);
    ``["*"]`` reads them all. ``layout`` is the layout a points file is built in unless
    ``--layout`` says otherwise.
    """
    path = args.source
    kind = source_kind(path)
    if kind == "dataset":
        dataset_files(path)  # a folder or glob of no Parquet files is refused before options
    if kind in ("index", "folder"):
        options = ("x", "y", "weights", "layout", "on_missing", "no_memory_check", "allow_empty")
        given = [f"--{n.replace('_', '-')}" for n in options]
        given = [f for f in given if getattr(args, f[2:].replace("-", "_"), None) is not None]
        if given:
            what = "an index file" if kind == "index" else "a growing tree's folder"
            raise UsageError(f"{' '.join(given)}: options for a points file, but {path} is {what}")
        return Source(load_index(path) if kind == "index" else open_folder(path), path)
    if args.x is None or args.y is None:
        raise UsageError(f"{path}: a points file needs --x and --y to name its coordinate columns")
    if weights and args.weights is None:
        raise UsageError(f"{path}: sums need --weights to name the points file's weight column")
    return build_from_file(
        args,
        path,
        weights=getattr(args, "weights", None),  # count and join take no --weights
        layout=args.layout or layout,
        on_missing=args.on_missing or "raise",
        carry=carry,
    )


def load_index(path: str, *, verify: Literal["checksums", "full"] = "checksums") -> RangeTree:
    """A tree from an index file; any failure to read it is a bad-file error."""
    _tables.check_readable(path)
    try:
        return load(path, verify=verify)
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
    p = read_points(args, path, weights=weights, on_missing=on_missing, carry=carry)
    # As from_frame does: reported rows (and those of a saved index) stay file rows.
    kept = p.kept
    provenance = Provenance() if kept is None else Provenance(kept, p.table.num_rows - kept.size)

    def build() -> TreeParts:
        return build_parts(
            p.x,
            p.y,
            p.weights,
            layout=layout,
            check_memory=not args.no_memory_check,
            names=(args.x, args.y),
            provenance=provenance,
            by=p.by,
            by_names=tuple(p.key_names) or None,
        )

    progress = Progress(f"build {len(p):,} points", enabled=not args.quiet)
    with progress:
        try:
            parts = run_with_activity(progress, build)
        except (TypeError, ValueError, OverflowError) as exc:
            raise BadValues(f"{path}: {p.explained(exc)}") from None
    return Source(RangeTree._from_parts(parts), path, p.table, kept, (p.x, p.y))


@dataclass
class Points:
    """A points file's rows as the engine takes them, checked: no missing value is left."""

    #: The file's columns as read (every row).
    table: Any
    #: Rows of ``table`` kept, when rows with missing values were dropped (else None).
    kept: np.ndarray | None
    x: Any
    y: Any
    weights: Any
    key_names: list[str]
    #: The keys as ``by=`` takes them (None without --by).
    by: Any
    #: The options' names beside the file's column names, for messages.
    roles: dict[str, str]

    def __len__(self) -> int:
        return len(self.x)

    def explained(self, exc: BaseException) -> str:
        """The library's message, with the file's column names beside its argument names."""
        return _with_columns(exc, self.roles)


def read_points(
    args: argparse.Namespace,
    path: str,
    *,
    weights: str | None,
    on_missing: str,
    carry: list[str] | None = None,
) -> Points:
    """The columns ``--x``, ``--y``, `weights` and ``--by`` of a points file, checked for
    their types and missing values (refused, or with ``on_missing="drop"`` their rows left
    out and a note saying how many); `carry` as for :func:`open_source`."""
    by = key_columns(args)
    used = [args.x, args.y] + ([weights] if weights else []) + by
    columns = None if carry == ["*"] else list(dict.fromkeys(used + (carry or [])))
    table = _read(args, path, columns)
    _tables.require_columns(path, table.column_names, used)
    table = empty_keys_missing(path, table, by)
    if table.num_rows == 0 and not getattr(args, "allow_empty", False):
        action = "append no rows" if args.command == "append" else "build an empty index"
        raise FileUnreadable(f"{path}: no rows, only a header; pass --allow-empty to {action}")
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
            note(args, f"{path}: {dropped} with missing values")
    keys = tuple(key_values(points, name) for name in by)
    return Points(
        table,
        kept,
        _tables.engine_values(points, args.x),
        _tables.engine_values(points, args.y),
        _tables.engine_values(points, weights) if weights else None,
        by,
        None if not keys else (keys if len(keys) > 1 else keys[0]),
        {"x": args.x, "y": args.y, "weights": weights or ""},
    )


def key_columns(args: argparse.Namespace) -> list[str]:
    """The columns ``--by`` names (comma-separated), none without it."""
    text = getattr(args, "by", None)
    if text is None:
        return []
    names = [n.strip() for n in text.split(",") if n.strip()]
    if not names or len(set(names)) != len(names):
        raise UsageError(f"--by: name each key column once, comma-separated, got {text!r}")
    return names


def empty_keys_missing(path: str, table: Any, names: list[str]) -> Any:
    """`table` with a CSV file's empty cells of string key columns as nulls: an empty cell is
    a missing key (pyarrow reads it as the string "" otherwise), refused or dropped as any
    missing value. Parquet keeps its own nulls, and "" there is a key like any other."""
    if is_dataset(path) or _tables.table_kind(path) != "csv":
        return table
    pa = _tables.pyarrow()
    for name in names:
        at = table.column_names.index(name)
        column = table.column(at)
        if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
            empty = pa.compute.equal(column, "")
            column = pa.compute.if_else(empty, pa.scalar(None, column.type), column)
            table = table.set_column(at, name, column)
    return table


def key_values(table: Any, name: str) -> np.ndarray:
    """A key column as numpy: strings as Python str objects (never numpy's fixed-width
    strings, which drop trailing NUL characters), others as their numpy type."""
    column = table.column(name)
    pa = _tables.pyarrow()
    if pa.types.is_dictionary(column.type):
        column = column.cast(column.type.value_type)
    if pa.types.is_string(column.type) or pa.types.is_large_string(column.type):
        return np.array(column.to_pylist(), dtype=object)
    return column.to_numpy()


def read_box_keys(args: argparse.Namespace, tree: Tree) -> Any:
    """The boxes file's key columns (``--by``) as ``by=`` for `tree`'s queries, or None.

    A keyed tree needs them and an unkeyed one refuses them. A CSV column of a string key
    is read as text (so "007" stays "007"); other key columns with their inferred types.
    """
    names = key_columns(args)
    keys = tree_keys(tree)
    if keys is not None and not names:
        raise UsageError(
            f"{args.source}: the index is keyed by {', '.join(n for n, _ in keys)}; name "
            "the boxes file's key columns with --by"
        )
    if names and keys is None:
        raise UsageError(f"--by: {args.source} holds no keys (build it with --by)")
    if keys is None:
        return None
    if len(names) != len(keys):
        raise UsageError(f"--by names {len(names)} key columns but the tree has {len(keys)}")
    path = args.boxes
    table = empty_keys_missing(path, _read(args, path, names), names)
    text = None
    if _tables.table_kind(path) == "csv":
        text = empty_keys_missing(path, _read(args, path, names, as_text=True), names)
        _tables.refuse_missing(path, text, names, "every box needs its key")
    _tables.require_columns(path, table.column_names, names)
    _tables.refuse_missing(path, table, names, "every box needs its key")
    kinds = [kind for _, kind in keys]
    values = [
        key_values(text if (text is not None and kind == "str") else table, name)
        for name, kind in zip(names, kinds)
    ]
    return tuple(values) if len(values) > 1 else values[0]


def _read(
    args: argparse.Namespace, path: str, columns: list[str] | None, *, as_text: bool = False
) -> Any:
    progress = Progress(f"read {os.path.basename(path)}", enabled=not args.quiet)
    if is_dataset(path):  # a folder or glob of Parquet files: typed already, never as text
        with progress:
            return run_with_activity(progress, lambda: read_dataset(path, columns))
    with progress:
        return run_with_activity(
            progress, lambda: _tables.read_table(path, columns, as_text=as_text)
        )


def _with_columns(exc: BaseException, roles: dict[str, str]) -> str:
    """The library's message, with the file's column names beside its argument names."""
    message = str(exc)
    found = dict.fromkeys(_ROLE_WORDS.findall(message))
    named = [r for r in found if roles.get(r) and roles[r] != r]
    if not named:
        return message
    return message + " (" + ", ".join(f"{r} is column {roles[r]!r}" for r in named) + ")"


def read_boxes(args: argparse.Namespace, tree: Tree) -> tuple[Any, list[Any]]:
    """The boxes file (every column, to be written back as read) and its four bound columns
    as `tree`'s bounds.

    A CSV file's bound cells are parsed one by one from their text, for the axis each
    bounds (see :mod:`boxwood.cli._cells`), so that no cell is converted through the type
    another cell gave the column.
    """
    path = args.boxes
    names = [getattr(args, role) for role, _ in BOUND_OPTIONS]
    if _tables.table_kind(path) == "csv":
        text = _read(args, path, None, as_text=True)
        _tables.require_columns(path, text.column_names, names)
        roles = [role for role, _ in BOUND_OPTIONS]
        bounds = [_csv_bound(path, text, n, tree, r[0]) for n, r in zip(names, roles)]
        return _written_back(args, _read(args, path, None), text), bounds
    table = _read(args, path, None)
    _tables.require_columns(path, table.column_names, names)
    role = _tables.ColumnRole("bound", "")
    for name in names:
        _tables.check_type(path, table, name, role)
    _tables.refuse_missing(path, table, names, "every box needs all four bounds")
    return table, [_tables.engine_values(table, name) for name in names]


def _written_back(args: argparse.Namespace, typed: Any, text: Any) -> Any:
    """A CSV boxes file's columns as a result carries them: to a CSV result, each column as
    its cells' text unless pyarrow read it as integers or text (which it writes back the
    same), so that times keep their own ISO form and integers beside an ``inf`` stay
    integers; to a Parquet result, as pyarrow typed them."""
    if _tables.output_kind(getattr(args, "output", None)) == "parquet":
        return typed
    pa = _tables.pyarrow()
    columns = [
        typed.column(i)
        if pa.types.is_integer(typed.field(i).type) or pa.types.is_string(typed.field(i).type)
        else text.column(i)
        for i in range(typed.num_columns)
    ]
    return pa.table(columns, names=typed.column_names)


#: The axis kinds whose bounds a CSV cell can give, by numpy dtype kind.
_CELL_KINDS = {"f": "float", "i": "int", "u": "int", "M": "datetime"}


def _csv_bound(path: str, table: Any, name: str, tree: Tree, axis: str) -> Any:
    """One bound column of a CSV boxes file, its text parsed for the `axis` ("x" or "y")."""
    dtype = tree.x_dtype if axis == "x" else tree.y_dtype
    kind = _CELL_KINDS.get(dtype.kind, "float")
    column = table.column(name)
    missing = _missing_cells(column)
    if missing is not None:
        raise BadValues(
            f"{path}: column {name!r} has a missing value (empty, null, NaN or NaT) at row "
            f"{missing} (0-based); every box needs all four bounds"
        )
    fast = _cast_exactly(column, kind)
    if fast is not None:
        return fast
    data_range = (tree.x_range if axis == "x" else tree.y_range) if kind == "int" else None
    try:
        return _cells.bound_column(column.to_pylist(), name, kind, data_range)
    except _cells.CellError as exc:
        raise BadValues(f"{path}: {exc}") from None


def _missing_cells(column: Any) -> int | None:
    """The first row whose cell pyarrow would read as missing (its null words, NaN)."""
    pa = _tables.pyarrow()
    words = pa.array(pa.csv.ConvertOptions().null_values + ["NaN", "nan", "NaT", "nat"])
    trimmed = pa.compute.utf8_trim_whitespace(column)
    bad = pa.compute.or_(pa.compute.is_in(trimmed, value_set=words), pa.compute.is_null(column))
    rows = np.flatnonzero(bad.to_numpy(zero_copy_only=False))
    return int(rows[0]) if rows.size else None


def _cast_exactly(column: Any, kind: str) -> Any:
    """The column cast by pyarrow where that is exact: every cell an int64 integer, or every
    cell a float or ±inf with no integer of more than 15 digits among them (float64 holds
    those exactly), on a numeric axis; every cell a time, all with or all without a UTC
    offset, on a time axis. Else None, for the cell-by-cell parse."""
    pa = _tables.pyarrow()
    if kind == "datetime":
        targets = [pa.timestamp("ns"), pa.timestamp("ns", tz="UTC")]
    else:
        long_int = pa.compute.match_substring_regex(column, r"^\s*[+-]?\d{16,}\s*$")
        exact_floats = not pa.compute.any(long_int).as_py()
        targets = [pa.int64()] + ([pa.float64()] if exact_floats else [])
    for target in targets:
        try:
            cast = column.cast(target)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            continue
        return cast.to_pandas() if getattr(target, "tz", None) else cast.to_numpy()
    return None


def batched(
    args: argparse.Namespace,
    label: str,
    method: Callable[..., Any],
    bounds: list[Any],
    rows: int,
    *,
    inclusive: str | None = None,
    where: str | None = None,
    keys: Any = None,
) -> np.ndarray:
    """``method`` (a tree's count or sum) over all boxes, in pieces, with a progress bar.

    ``inclusive`` and ``where`` (the file named in messages) default to the boxes file's;
    ``keys`` are the boxes' keys (``read_box_keys``) for a keyed tree.
    """
    inclusive = args.inclusive if inclusive is None else inclusive
    where = args.boxes if where is None else where
    roles = {role: getattr(args, role, role) for role, _ in BOUND_OPTIONS}
    pieces = []
    with Progress(label, total=rows, unit="boxes", enabled=not args.quiet) as progress:
        for start in range(0, max(rows, 1), BOXES_PER_CALL):
            stop = min(start + BOXES_PER_CALL, rows)
            piece = [rows_of(bound, start, stop) for bound in bounds]
            by = {} if keys is None else {"by": keys_of(keys, start, stop)}
            try:
                pieces.append(np.asarray(method(*piece, inclusive=inclusive, **by)))
            except IndexFileError:  # a part checked at its first use: the entry point's to report
                raise
            except (TypeError, ValueError) as exc:
                raise BadValues(f"{where}: {_with_columns(exc, roles)}") from None
            except OverflowError as exc:
                raise BadValues(f"{where}: {exc}") from None
            progress.advance(stop - start)
    return np.concatenate(pieces)


def keys_of(keys: Any, start: int, stop: int) -> Any:
    """Rows ``start:stop`` of the boxes' keys (a tuple of columns for several)."""
    if isinstance(keys, tuple):
        return tuple(k[start:stop] for k in keys)
    return keys[start:stop]


def rows_of(values: Any, start: int, stop: int) -> Any:
    """Rows ``start:stop`` of a numpy array or a pandas Series, by position."""
    return values.iloc[start:stop] if hasattr(values, "iloc") else values[start:stop]
