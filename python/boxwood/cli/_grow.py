"""``boxwood append`` and ``boxwood expire``: a growing tree's folder changed from the shell.

``append`` adds a points file's rows to a folder, making it on the first append (its axes,
weights and keys then those of the file's columns), and prints the new rows' ids; ``expire``
removes every row whose x is below a bound and prints how many went. Each change is durable
when the command exits 0 (``docs/growing-folder.md``); a command that fails changes
nothing, and a folder it was making is removed again. One writer at a time: a folder another
writer holds is refused with its own exit code, so a scheduler can try again later.
"""

from __future__ import annotations

import argparse
import os
import shutil
from typing import Any

import numpy as np

from .._columns import AxisInfo
from .._growing import FolderError, GrowingTree
from .._growing._folder import LOCK, MANIFEST
from . import _bins, _exits
from ._datasets import require_points
from ._exits import BadValues, CannotWrite, FileUnreadable, UsageError
from ._folders import axis_of, folder_error, not_growing, open_folder
from ._output import counted, note
from ._progress import Progress, run_with_activity
from ._sources import Points, read_points

#: Integers beyond this lose their exactness as float64; they are refused on a float axis.
_FLOAT_EXACT = 2**53


def run_append(args: argparse.Namespace) -> int:
    folder = args.folder
    require_points(args.points)
    if _is_growing_folder(folder):
        with open_folder(folder, readonly=False) as tree:
            _check_fits(args, tree)
            points = _read(args)
            ids = _append(args, tree, points)
            _report_append(args, tree, ids)
        return _exits.OK
    points = _read(args)
    if len(points) == 0:
        raise FileUnreadable(
            f"{args.points}: no rows, so nothing to make the folder's axes from; {folder} "
            "is made by the first append of some rows"
        )
    made = not os.path.exists(folder)
    tree, fresh = _created(args, folder, points)
    try:
        with tree:
            ids = _append(args, tree, points)
    except BaseException:
        if fresh:  # made by this command, which fails: as if it had never run
            _unmake(folder, made)
        raise
    _report_append(args, tree, ids)
    return _exits.OK


def run_expire(args: argparse.Namespace) -> int:
    folder = args.folder
    if not _is_growing_folder(folder):
        raise FileUnreadable(not_growing(folder))
    with open_folder(folder, readonly=False) as tree:
        bound = _bins.parse_value(args.before, axis_of(tree, "x"), "--before")
        progress = Progress("expire", enabled=not args.quiet)
        with progress:
            try:
                removed = run_with_activity(progress, lambda: tree.expire(bound))
            except (TypeError, ValueError) as exc:
                raise BadValues(f"--before: {exc}") from None
            except OSError as exc:  # the new files or the manifest (a full disk)
                raise CannotWrite(f"{folder}: {exc}") from None
        print(f"expired {counted(removed, 'row')}; {counted(len(tree), 'live row')} remain")
        note(args, f"{folder}: {_shape(tree)}")
    return _exits.OK


def _is_growing_folder(folder: str) -> bool:
    """True for a growing folder; False for a folder to make (none there yet, or an empty
    directory); the errors for a file or a directory of other files."""
    if os.path.isfile(os.path.join(folder, MANIFEST)):
        return True
    if os.path.exists(folder) and not os.path.isdir(folder):
        raise UsageError(
            f"{folder}: a file, not a folder; a growing tree is kept in a folder of its own "
            "(boxwood append makes it)"
        )
    if os.path.isdir(folder) and set(os.listdir(folder)) - {LOCK}:
        raise FileUnreadable(not_growing(folder) + ", and it holds other files")
    return False


def _read(args: argparse.Namespace) -> Points:
    return read_points(args, args.points, weights=args.weights, on_missing=args.on_missing)


def _check_fits(args: argparse.Namespace, tree: GrowingTree) -> None:
    """The options against the folder's own weights, keys and layout, before any reading."""
    folder = args.folder
    if tree.weights_dtype is not None and args.weights is None:
        raise UsageError(
            f"{folder}: its rows have {tree.weights_dtype} weights; name the points file's "
            "weight column with --weights"
        )
    if tree.weights_dtype is None and args.weights is not None:
        raise UsageError(f"--weights: {folder} was made without weights")
    names = [n.strip() for n in (args.by or "").split(",") if n.strip()]
    keys = tree.key_names or ()
    if len(names) != len(keys):
        wanted = f"keyed by {', '.join(keys)}" if keys else "without keys"
        raise UsageError(
            f"--by: {folder} was made {wanted}; name the points file's "
            f"{len(keys)} key column(s) with --by, in that order"
        )
    if args.layout is not None and args.layout != tree.layout:
        raise UsageError(
            f"--layout: {folder} keeps its segments in the {tree.layout} layout, chosen when "
            "it was made"
        )


def _created(args: argparse.Namespace, folder: str, points: Points) -> tuple[GrowingTree, bool]:
    """A new growing folder with the axes, weights and keys of the points' columns, and
    whether this call made it (False when another append made it meanwhile)."""
    names = (args.x, args.y, args.weights or "weights")
    by: Any = list(points.key_names) or None
    weights = None if points.weights is None else _dtype(points.weights)
    try:
        tree = GrowingTree.open(
            folder,
            _dtype(points.x),
            _dtype(points.y),
            weights=weights,
            by=by,
            layout=args.layout or "compact",
            names=names,
        )
    except FolderError as exc:
        raise folder_error(folder, exc) from None
    except (TypeError, ValueError) as exc:
        if os.path.isfile(os.path.join(folder, MANIFEST)):  # another append made it first
            tree = open_folder(folder, readonly=False)
            try:
                _check_fits(args, tree)
            except BaseException:
                tree.close()
                raise
            return tree, False
        raise BadValues(f"{args.points}: {points.explained(exc)}") from None
    except OSError as exc:  # the folder cannot be made
        raise CannotWrite(f"{folder}: {exc}") from None
    return tree, True


def _dtype(values: Any) -> Any:
    return values.dtype  # a pandas tz-aware dtype keeps its zone


def _unmake(folder: str, made: bool) -> None:
    """Remove a folder this command was making (its first append failed): all of it if the
    command made the directory, else what it put in the directory it found empty."""
    if not os.path.isdir(folder):
        return
    if made:
        shutil.rmtree(folder, ignore_errors=True)
        return
    for name in os.listdir(folder):
        os.remove(os.path.join(folder, name))


def _append(args: argparse.Namespace, tree: GrowingTree, points: Points) -> np.ndarray:
    path = args.points
    x = _fitted(points.x, axis_of(tree, "x"), "x", args.x, path)
    y = _fitted(points.y, axis_of(tree, "y"), "y", args.y, path)
    weights = points.weights
    if weights is not None and tree.weights_dtype == np.float64:
        weights = _as_float(np.asarray(weights), "weights", args.weights, path)
    progress = Progress(f"append {len(points):,} points", enabled=not args.quiet)
    with progress:
        try:
            return run_with_activity(
                progress, lambda: tree.append(x, y, weights=weights, by=points.by)
            )
        except (TypeError, ValueError, OverflowError) as exc:
            raise BadValues(f"{path}: {points.explained(exc)}") from None
        except OSError as exc:  # the new segment files or the manifest (a full disk)
            raise CannotWrite(f"{args.folder}: {exc}") from None


def _fitted(values: Any, axis: AxisInfo, role: str, column: str, path: str) -> Any:
    """`values` in the folder's axis type where that is exact (times in the axis's unit,
    integers as floats on a float axis); other differences are left for the tree to
    refuse, naming both types."""
    if hasattr(values, "dt"):  # tz-aware times (a pandas Series)
        if axis.tz is None or values.dt.unit == axis.unit:
            return values
        converted = values.dt.as_unit(axis.unit)
        if not (converted.dt.as_unit(values.dt.unit) == values).all():
            raise _inexact(path, column, values.dtype, role, axis)
        return converted
    array = np.asarray(values)
    if axis.is_time and axis.tz is None and array.dtype.kind == axis.dtype.kind:
        if array.dtype == axis.dtype:
            return array
        converted = array.astype(axis.dtype)
        if not np.array_equal(converted.astype(array.dtype), array):
            raise _inexact(path, column, array.dtype, role, axis)
        return converted
    if axis.kind == "float":
        return _as_float(array, role, column, path)
    return array


def _as_float(array: np.ndarray, role: str, column: str, path: str) -> np.ndarray:
    """Integers as float64 when every one is exact there; others as they are."""
    if array.dtype.kind not in "iu":
        return array
    if ((array > _FLOAT_EXACT) | (array < -_FLOAT_EXACT)).any():
        raise BadValues(
            f"{path}: column {column!r} holds integers beyond 2**53, which the folder's "
            f"float64 {role} cannot hold exactly"
        )
    return array.astype(np.float64)


def _inexact(path: str, column: str, dtype: Any, role: str, axis: AxisInfo) -> BadValues:
    return BadValues(
        f"{path}: column {column!r} holds {dtype} values that the folder's {role} axis "
        f"({axis.dtype}) cannot hold exactly"
    )


def _report_append(args: argparse.Namespace, tree: GrowingTree, ids: np.ndarray) -> None:
    if ids.size:
        print(f"ids {int(ids[0])} to {int(ids[-1])} ({counted(ids.size, 'row')})")
    else:
        print("no rows appended")
    note(args, f"{args.folder}: {_shape(tree)}")


def _shape(tree: GrowingTree) -> str:
    segments = tree.segments
    deleted = sum(s.deleted for s in segments)
    return (
        f"{counted(len(tree), 'live row')} in {counted(len(segments), 'segment')}"
        + (f" ({counted(deleted, 'deleted row')} kept until merged away)" if deleted else "")
        + f", next id {tree.next_id:,}"
    )
