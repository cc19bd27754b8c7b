"""Points datasets: a folder of Parquet files, or a glob of them, read as one table.

>>> from boxwood.cli._datasets import is_dataset
>>> is_dataset("trips/*.parquet"), is_dataset("trips/day=*/part-*.parquet"), is_dataset("a.csv")
(True, True, False)

A SOURCE is a dataset when it is a glob pattern (``*``, ``?`` or ``[``) that names no file
as it is, or a folder that holds no growing tree (no ``MANIFEST`` file). Its files are the
``.parquet`` and ``.pq`` files the glob matches or the folder holds (at any depth), in sorted
path order, names starting with ``.`` or ``_`` left out (``_SUCCESS``, ``.crc`` files);
rows are numbered in that order, which is the order reports and joins give row ids in.
Folders named ``key=value`` on the way to a file are hive partitions: each is a column of
every row below it (integers when every value is one, else strings), usable in ``--x``,
``--y``, ``--weights`` and ``--by`` like any column.

Only the columns a command needs are read, record batch by record batch (a Parquet file's
row groups), so memory stays near those columns' size; the files' other columns are never
read. Every file must have the same columns of the same types: the schemas are read from
the files' footers first, and a file that differs is named with what differs.
"""

from __future__ import annotations

import glob
import importlib
import os
from typing import Any

from .._growing._folder import MANIFEST
from . import _tables
from ._exits import FileUnreadable

_GLOB_CHARACTERS = "*?["
_SUFFIXES = (".parquet", ".pq")
#: Names pyarrow's own discovery leaves out too: hidden files and writers' markers.
_IGNORED_PREFIXES = (".", "_")


def is_dataset(path: str) -> bool:
    """Whether `path` names a points dataset (a glob, or a folder without a growing tree)."""
    if os.path.isdir(path):
        return not os.path.isfile(os.path.join(path, MANIFEST))
    return any(c in path for c in _GLOB_CHARACTERS) and not os.path.exists(path)


def source_kind(path: str) -> str:
    """``"dataset"`` for a points dataset, else the file kind (``_tables.file_kind``)."""
    return "dataset" if is_dataset(path) else _tables.file_kind(path)


def require_points(path: str) -> None:
    """Refuse POINTS that are neither a points file nor a dataset (an index file, a growing
    tree's folder), before anything is read."""
    if not is_dataset(path):
        _tables.table_kind(path)


def dataset_files(path: str) -> tuple[list[str], str]:
    """The dataset's Parquet files in sorted order, and the folder its partitions start in."""
    if os.path.isdir(path):
        found = [os.path.join(folder, name) for folder, _, names in os.walk(path) for name in names]
        base = path
    else:
        found = glob.glob(path, recursive=True)
        if not found:
            raise FileUnreadable(f"{path}: the pattern matches no file")
        base = _fixed_prefix(path)
    files = sorted(f for f in found if os.path.isfile(f) and _is_part(os.path.relpath(f, base)))
    if not files:
        if os.path.isdir(path):
            raise FileUnreadable(
                f"{path}: a folder with no Parquet files (*.parquet, *.pq) and no growing tree "
                f"(no {MANIFEST} file); a points dataset is a folder of Parquet files"
            )
        shown = ", ".join(sorted(found)[:3])
        raise FileUnreadable(
            f"{path}: the pattern matches no Parquet file (*.parquet, *.pq), only {shown}"
        )
    return files, base


def _is_part(relative: str) -> bool:
    parts = relative.split(os.sep)
    if any(p.startswith(_IGNORED_PREFIXES) for p in parts):
        return False
    return parts[-1].lower().endswith(_SUFFIXES)


def _fixed_prefix(pattern: str) -> str:
    """The folder of a glob pattern before its first wildcard: where partitions start."""
    parts = pattern.split(os.sep)
    fixed = []
    for part in parts[:-1]:
        if any(c in part for c in _GLOB_CHARACTERS):
            break
        fixed.append(part)
    return os.sep.join(fixed) or "."


def open_dataset(path: str) -> Any:
    """A ``pyarrow.dataset.Dataset`` of the files, with hive partitions as columns, after
    checking that every file has the first file's schema."""
    pa = _tables.pyarrow()
    ds = _dataset_module()
    files, base = dataset_files(path)
    first = _file_schema(files[0])
    for other in files[1:]:
        why = _schema_difference(first, _file_schema(other))
        if why is not None:
            raise FileUnreadable(
                f"{path}: the files differ in their columns: {why} in {other} but not in "
                f"{files[0]}; every file of a dataset needs the same columns and types"
            )
    try:
        return ds.dataset(
            files,
            format="parquet",
            partitioning=ds.partitioning(flavor="hive"),
            partition_base_dir=base,
        )
    except (OSError, pa.ArrowException) as exc:
        raise FileUnreadable(f"{path}: {_message(exc)}") from None


def _dataset_module() -> Any:
    _tables.pyarrow()  # the error naming the extra, when pyarrow is not installed
    return importlib.import_module("pyarrow.dataset")


def _message(exc: BaseException) -> str:
    """pyarrow's message, its first line."""
    return (str(exc).strip() or type(exc).__name__).splitlines()[0]


def _file_schema(file: str) -> Any:
    pa = _tables.pyarrow()
    _tables.check_readable(file)
    try:
        return pa.parquet.read_schema(file)
    except (OSError, pa.ArrowException) as exc:
        raise FileUnreadable(f"{file}: {_message(exc)}") from None


def _schema_difference(first: Any, other: Any) -> str | None:
    """What `other` has that `first` has not: a column, or a column's type; None if alike."""
    names = set(first.names)
    for field in other:
        if field.name not in names:
            return f"column {field.name!r} ({field.type}) is"
        kind = first.field(field.name).type
        if kind != field.type:
            return f"column {field.name!r} is {field.type} (not {kind})"
    missing = [n for n in first.names if n not in set(other.names)]
    if missing:
        return f"column {missing[0]!r} is missing"
    return None


def dataset_columns(path: str) -> list[str]:
    """The dataset's column names: the files' columns, then the partitions'."""
    return list(open_dataset(path).schema.names)


def read_dataset(path: str, columns: list[str] | None) -> Any:
    """A pyarrow Table of the named columns (all when None), read batch by batch."""
    pa = _tables.pyarrow()
    dataset = open_dataset(path)
    available = list(dataset.schema.names)
    wanted = None if columns is None else list(dict.fromkeys(columns))
    if wanted is not None:
        _tables.require_columns(path, available, wanted)
    try:
        scanner = dataset.scanner(columns=wanted)
        return pa.Table.from_batches(scanner.to_batches(), schema=scanner.projected_schema)
    except (OSError, pa.ArrowException) as exc:
        raise FileUnreadable(f"{path}: {_message(exc)}") from None
