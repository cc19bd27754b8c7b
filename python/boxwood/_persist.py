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
from ._keys import KeyDictionary, KeyLevels
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
    out = [b""]
    if source_rows is not None:
        out.append(np.ascontiguousarray(source_rows, dtype="<i8").tobytes())
    if parts.keys is not None:
        meta["keys"] = _keys_to_json(parts.keys, len(out))
        out.extend(_key_attachments(parts.keys))
    out[0] = json.dumps(meta, sort_keys=True).encode()
    return out


# ---------------------------------------------------------------- key dictionaries
# Each key column's sorted distinct values are one attachment (int64, datetime64 ticks as
# int64, bool as uint8, little-endian; strings as a JSON list), then each combining step's
# sorted uint64 codes; the description says where they start and what they hold. The
# attachments are checksummed sections of the index file like any other.

_KEY_KINDS = ("int", "bool", "str", "datetime")


def _keys_to_json(keys: KeyDictionary, first: int) -> dict[str, Any]:
    return {
        "first_attachment": first,
        "columns": [
            {"name": c.name, "kind": c.kind, "dtype": c.levels.dtype.str} for c in keys.columns
        ],
        "count": keys.count,
    }


def _key_attachments(keys: KeyDictionary) -> list[bytes]:
    out = []
    for c in keys.columns:
        if c.kind == "str":
            out.append(json.dumps(c.levels.tolist()).encode())
        elif c.kind == "bool":
            out.append(c.levels.astype(np.uint8).tobytes())
        else:
            out.append(np.ascontiguousarray(c.levels.view(np.int64), dtype="<i8").tobytes())
    out.extend(np.ascontiguousarray(step, dtype="<u8").tobytes() for step in keys.steps)
    return out


def _keys_from_json(
    meta: dict[str, Any], attachments: list[bytes], inner: _Tree, where: str
) -> KeyDictionary | None:
    d = meta.get("keys")
    offsets = inner.key_offsets
    if d is None:
        if offsets is not None:
            raise _corrupt(where, "the tree is keyed but the file carries no key dictionary")
        return None
    if offsets is None:
        raise _corrupt(where, "a key dictionary is described but the tree is not keyed")
    try:
        first, described, count = d["first_attachment"], d["columns"], d["count"]
        kinds = [(c["name"], c["kind"], np.dtype(c["dtype"])) for c in described]
    except (TypeError, KeyError, ValueError):
        raise _corrupt(where, "the key dictionary's description is incomplete") from None
    m = len(kinds)
    if (
        type(first) is not int
        or type(count) is not int
        or m == 0
        or first != 1 + (meta.get("source_rows") is True)
        or first + 2 * m - 1 != len(attachments)
        or count != offsets.size - 1
    ):
        raise _corrupt(where, "the key dictionary does not fit the tree's key offsets")
    columns = tuple(
        _key_levels(name, kind, dtype, attachments[first + i], where)
        for i, (name, kind, dtype) in enumerate(kinds)
    )
    steps = []
    previous = len(columns[0].levels)
    for i, column in enumerate(columns[1:]):
        raw = attachments[first + m + i]
        if len(raw) % 8:
            raise _corrupt(where, "a key combining step is not a whole number of codes")
        step = np.frombuffer(raw, dtype="<u8").astype(np.uint64)
        width = len(column.levels)
        if step.size and (
            np.any(np.diff(step) == 0)
            or np.any(step[1:] < step[:-1])
            or int(step[-1]) >= previous * width
        ):
            raise _corrupt(where, "a key combining step is not ascending or out of range")
        steps.append(step)
        previous = step.size
    keys = KeyDictionary(columns, tuple(steps))
    if keys.count != count:
        raise _corrupt(where, "the key dictionary does not fit the tree's key offsets")
    return keys


def _key_levels(name: Any, kind: Any, dtype: np.dtype, raw: bytes, where: str) -> KeyLevels:
    if not isinstance(name, str) or kind not in _KEY_KINDS:
        raise _corrupt(where, "a key column's description is of an unknown kind")
    try:
        if kind == "str":
            values = json.loads(raw.decode())
            if not isinstance(values, list) or not all(isinstance(v, str) for v in values):
                raise ValueError
            levels = np.array(values, dtype=object)
        elif kind == "bool":
            levels = np.frombuffer(raw, dtype=np.uint8)
            if np.any(levels > 1):
                raise ValueError
            levels = levels.astype(bool)
        else:
            if len(raw) % 8 or (kind == "datetime") != (dtype.kind == "M"):
                raise ValueError
            levels = np.frombuffer(raw, dtype="<i8").astype(np.int64)
            if kind == "datetime":
                levels = levels.view(dtype)
    except (UnicodeDecodeError, ValueError, TypeError):
        raise _corrupt(where, f"the levels of key column {name!r} cannot be read") from None
    ascending = levels.size < 2 or bool(np.all(levels[1:] > levels[:-1]))
    if not ascending:
        raise _corrupt(where, f"the levels of key column {name!r} are not strictly ascending")
    return KeyLevels(name, kind, levels)


def _restore(inner: _Tree, attachments: list[bytes], where: str) -> TreeParts:
    meta = _read_meta(attachments, where)
    x = axis_from_json(meta["x"], inner.x_domain, where)
    y = axis_from_json(meta["y"], inner.y_domain, where)
    rows_dropped = _non_negative_int(meta.get("rows_dropped", 0), where)
    source_rows = _source_rows(meta, attachments, len(inner), where)
    columns = SourceColumns.from_json(meta.get("columns"))
    keys = _keys_from_json(meta, attachments, inner, where)
    return TreeParts(inner, x, y, Provenance(source_rows, rows_dropped, columns), keys)


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
    # Attachments after the description (and the source rows): the key dictionary's.
    own = 1 + (has_rows is True)
    keyed = isinstance(meta.get("keys"), dict)
    if not keyed and len(attachments) != own:
        raise _corrupt(where, "the source row positions are missing or of the wrong length")
    if has_rows is False:
        return None
    if has_rows is not True or len(attachments) < 2 or len(attachments[1]) != 8 * n:
        raise _corrupt(where, "the source row positions are missing or of the wrong length")
    rows = np.frombuffer(attachments[1], dtype="<i8").astype(np.int64)
    if n and (rows[0] < 0 or np.any(np.diff(rows) <= 0)):
        raise _corrupt(where, "the source row positions are not ascending")
    return rows
