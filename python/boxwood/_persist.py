"""Index files and pickling: a tree written once, read back by many processes without copying.

>>> import os, tempfile, numpy as np, boxwood
>>> tree = boxwood.RangeTree(np.arange(10.0), np.arange(10) % 3)
>>> path = os.path.join(tempfile.mkdtemp(), "docks.boxwood")
>>> tree.save(path)
>>> again = boxwood.load(path)          # memory-mapped: pages shared between processes
>>> again.count(2, 7, 0, 1) == tree.count(2, 7, 0, 1)
True

The bytes are the engine's index file (``docs/index-format.md``); this module adds one
attachment of its own, a JSON description of the two axes (dtype, time zone) and of rows
dropped by :meth:`RangeTree.from_frame`, and a second one holding the source positions of
the rows when some were dropped. Reading returns a tree's parts
(:class:`boxwood._parts.TreeParts`); :func:`boxwood.load` makes the tree of them.
"""

from __future__ import annotations

import json
import os
import pickle
from typing import Any, Literal

import numpy as np

from ._boxwood import CorruptIndexFileError, _Tree
from ._columns import AxisInfo
from ._fingerprint import SourceColumns
from ._parts import Provenance, TreeParts

#: The version of the Python-side description; bumped when its meaning changes.
_META_VERSION = 1
_META_KEY = "boxwood-python"


def save(parts: TreeParts, path: str | bytes | os.PathLike[str] | os.PathLike[bytes]) -> None:
    """Write a tree's parts to `path` atomically (see :meth:`RangeTree.save`)."""
    parts.engine.save(os.fsdecode(path), _attachments(parts))


def load_parts(
    path: str | bytes | os.PathLike[str] | os.PathLike[bytes],
    *,
    mmap: bool = True,
    verify: Literal["checksums", "full"] = "checksums",
) -> TreeParts:
    """The parts of the tree in an index file (see :func:`boxwood.load`)."""
    path = os.fsdecode(path)
    if verify not in ("checksums", "full"):
        raise ValueError(f"verify must be 'checksums' or 'full', got {verify!r}")
    inner, attachments = _Tree.load(path, mmap, verify)
    return _restore(inner, attachments, path)


def to_bytes(parts: TreeParts) -> bytes:
    return parts.engine.to_bytes(_attachments(parts))


def parts_from_bytes(data: bytes | bytearray | memoryview | pickle.PickleBuffer) -> TreeParts:
    """The parts of a tree pickled by :meth:`RangeTree.__reduce_ex__`, from bytes or any
    contiguous buffer (an out-of-band pickle buffer arrives as one)."""
    if not isinstance(data, bytes):
        try:
            data = memoryview(data).tobytes()
        except TypeError:
            raise TypeError(
                f"a tree is read back from bytes or a buffer, not {type(data).__name__}"
            ) from None
    inner, attachments = _Tree.from_bytes(data)
    return _restore(inner, attachments, "pickled tree")


def _attachments(parts: TreeParts) -> list[bytes]:
    source_rows = parts.provenance.source_rows
    meta = {
        _META_KEY: _META_VERSION,
        "x": axis_to_json(parts.x),
        "y": axis_to_json(parts.y),
        "rows_dropped": int(parts.provenance.rows_dropped),
        "source_rows": source_rows is not None,
        "columns": None if parts.provenance.columns is None else parts.provenance.columns.to_json(),
    }
    out = [json.dumps(meta, sort_keys=True).encode()]
    if source_rows is not None:
        out.append(np.ascontiguousarray(source_rows, dtype="<i8").tobytes())
    return out


def _restore(inner: _Tree, attachments: list[bytes], where: str) -> TreeParts:
    meta = _read_meta(attachments, where)
    x = axis_from_json(meta["x"], inner.x_domain, where)
    y = axis_from_json(meta["y"], inner.y_domain, where)
    rows_dropped = _non_negative_int(meta.get("rows_dropped", 0), where)
    source_rows = _source_rows(meta, attachments, len(inner), where)
    columns = SourceColumns.from_json(meta.get("columns"))
    return TreeParts(inner, x, y, Provenance(source_rows, rows_dropped, columns))


def _corrupt(where: str, what: str) -> CorruptIndexFileError:
    return CorruptIndexFileError(f"{where}: index file is corrupt: {what}")


def _read_meta(attachments: list[bytes], where: str) -> dict[str, Any]:
    if not attachments:
        raise _corrupt(where, "it carries no description of its columns")
    try:
        meta = json.loads(attachments[0].decode())
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise _corrupt(where, "its column description is not valid JSON") from None
    if not isinstance(meta, dict) or meta.get(_META_KEY) != _META_VERSION:
        raise _corrupt(where, "its column description is of an unknown version")
    return meta


def axis_to_json(axis: AxisInfo) -> dict[str, Any]:
    return {"name": axis.name, "dtype": axis.dtype.str, "kind": axis.kind, "tz": axis.tz}


# What each axis kind may be stored as, and the engine domain it needs.
KIND_DOMAIN = {"float": "float64", "int": "int64", "datetime": "int64", "timedelta": "int64"}
_KIND_DTYPE = {"float": "fc", "int": "iu", "datetime": "M", "timedelta": "m"}


def axis_from_json(d: Any, domain: str, where: str) -> AxisInfo:
    try:
        kind, name, tz = d["kind"], d["name"], d["tz"]
        dtype = np.dtype(d["dtype"])
    except (TypeError, KeyError, ValueError):
        raise _corrupt(where, "an axis description is incomplete") from None
    if (
        KIND_DOMAIN.get(kind) != domain
        or dtype.kind not in _KIND_DTYPE[kind]
        or not isinstance(name, str)
        or not (tz is None or isinstance(tz, str))
    ):
        raise _corrupt(where, "an axis description does not match its keys")
    return AxisInfo(name=name, dtype=dtype, kind=kind, tz=tz)


def _non_negative_int(v: Any, where: str) -> int:
    if type(v) is not int or v < 0:
        raise _corrupt(where, "the dropped-row count is not a non-negative integer")
    return v


def _source_rows(meta: dict[str, Any], attachments: list[bytes], n: int, where: str):
    has_rows = meta.get("source_rows")
    if has_rows is False and len(attachments) == 1:
        return None
    if has_rows is not True or len(attachments) != 2 or len(attachments[1]) != 8 * n:
        raise _corrupt(where, "the source row positions are missing or of the wrong length")
    rows = np.frombuffer(attachments[1], dtype="<i8").astype(np.int64)
    if n and (rows[0] < 0 or np.any(np.diff(rows) <= 0)):
        raise _corrupt(where, "the source row positions are not ascending")
    return rows
