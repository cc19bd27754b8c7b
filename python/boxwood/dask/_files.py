"""A sharded tree on disk: one index file per shard and a manifest, in one folder.

::

    trips.shards/
        manifest.json                    axes, boundaries, layout, row counts, one entry a shard
        shard-00000-of-00003.boxwood     an ordinary index file (boxwood.load opens it)
        shard-00001-of-00003.boxwood
        shard-00002-of-00003.boxwood

Every shard file is written atomically, and the manifest last: a folder without one is an
interrupted save, which :func:`read_manifest` refuses. Each manifest entry keeps the
file's size and header checksum, so a shard file swapped for another is caught before it
is loaded.
"""

from __future__ import annotations

import json
import os
import re
from typing import Any

import numpy as np

from .._boxwood import (
    FORMAT_VERSION,
    ChecksumMismatchError,
    CorruptIndexFileError,
    TruncatedIndexFileError,
    UnsupportedIndexFileError,
)
from .._keys import KeyDictionary
from .._persist import KIND_DOMAIN, axis_from_json, axis_to_json
from .._tree import RangeTree, load
from ._common import new_token
from ._routing import Plan

#: Version of the shard folder's manifest; bumped when its meaning changes. Version 2 adds
#: the shards' keys: a version 1 reader would have taken a keyed folder for an unkeyed one.
MANIFEST_VERSION = 2
MANIFEST_NAME = "manifest.json"
MANIFEST_KEY = "boxwood-shards"
# The index file format the shard files are written in (docs/index-format.md).
INDEX_FORMAT_VERSION = FORMAT_VERSION


def shard_file(shard: int, shards: int) -> str:
    return f"shard-{shard:05d}-of-{shards:05d}.boxwood"


_PARTIAL = re.compile(r"^\.shard-\d{5}-of-\d{5}\.boxwood\..*\.partial$")


def _file_fingerprint(path: str) -> tuple[int, str]:
    """Size and header checksum (which covers every section's checksum) of an index file."""
    with open(path, "rb") as f:
        f.seek(64)
        checksum = f.read(8).hex()
    return os.path.getsize(path), checksum


def save_shard(tree: RangeTree, path: str) -> dict[str, Any]:
    tree.save(path)  # atomic: a temporary file, synced, renamed
    size, checksum = _file_fingerprint(path)
    return {"file": os.path.basename(path), "rows": len(tree), "bytes": size, "xxh3": checksum}


def manifest_of(
    plan: Plan,
    *,
    layout: str,
    weights: str | None,
    rows: int,
    rows_dropped: int,
    partition_offsets: list[int],
    nbytes: int,
    keys: KeyDictionary | None = None,
) -> dict[str, Any]:
    """The manifest of a sharded tree, but for its shards' entries (added once saved). A
    keyed tree's records its key columns, its number of keys and the key codes of its
    boundaries; the dictionary itself is in every shard file, checked against these."""
    cuts = plan.boundaries
    return {
        MANIFEST_KEY: MANIFEST_VERSION,
        "index_format_version": INDEX_FORMAT_VERSION,
        "layout": layout,
        "x": axis_to_json(plan.x_axis),
        "y": axis_to_json(plan.y_axis),
        "weights": weights,
        "boundaries": {
            "domain": cuts.dtype.name,
            # Floats as exact repr strings ("inf" included), which JSON numbers are not.
            "values": [repr(float(v)) for v in cuts] if cuts.dtype.kind == "f" else cuts.tolist(),
        },
        "rows": rows,
        "rows_dropped": rows_dropped,
        "partition_offsets": partition_offsets,
        "nbytes": nbytes,
        "keys": None
        if keys is None or plan.key_codes is None
        else {
            "names": list(keys.names),
            "count": keys.count,
            "boundary_codes": plan.key_codes.tolist(),
        },
    }


def same_keys(
    shard: KeyDictionary | None, recorded: dict[str, Any] | None, first: KeyDictionary | None
) -> bool:
    """Whether a shard's key dictionary is the one the manifest records, and the same as
    the first shard's (every shard holds the whole tree's dictionary)."""
    if shard is None or recorded is None or first is None:
        return shard is None and recorded is None
    if list(shard.names) != recorded["names"] or shard.count != recorded["count"]:
        return False
    return all(
        a.dtype == b.dtype and np.array_equal(a, b) for a, b in zip(shard.values(), first.values())
    )


def write_manifest(folder: str, manifest: dict[str, Any], *saved: dict[str, Any]) -> str:
    """Last step of a save, after every shard file is in place: the folder becomes valid."""
    for name in os.listdir(folder):
        if _PARTIAL.match(name):  # left by a worker killed mid-save; its task was rerun
            os.remove(os.path.join(folder, name))
    manifest = dict(manifest, shards=list(saved))
    path = os.path.join(folder, MANIFEST_NAME)
    partial = os.path.join(folder, f".{MANIFEST_NAME}.{os.getpid()}-{new_token()}.partial")
    with open(partial, "w", encoding="utf-8") as f:
        json.dump(manifest, f, indent=1, sort_keys=True)
        f.flush()
        os.fsync(f.fileno())
    os.replace(partial, path)
    _sync_folder(folder)
    return path


def _sync_folder(folder: str) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def load_shard(path: str, expected: dict[str, Any], mmap: bool) -> RangeTree:
    size, checksum = _file_fingerprint(path)
    if size < expected["bytes"]:
        raise TruncatedIndexFileError(
            f"{path}: shard file is cut short: {size} bytes, the manifest says {expected['bytes']}"
        )
    if size != expected["bytes"]:
        raise CorruptIndexFileError(
            f"{path}: shard file is {size} bytes, the manifest says {expected['bytes']}"
        )
    if checksum != expected["xxh3"]:
        raise ChecksumMismatchError(
            f"{path}: shard file is not the one the manifest names (header checksum differs)"
        )
    tree = load(path, mmap=mmap)
    if len(tree) != expected["rows"]:
        raise CorruptIndexFileError(
            f"{path}: shard holds {len(tree)} rows, the manifest says {expected['rows']}"
        )
    return tree


def read_manifest(folder: str) -> dict[str, Any]:
    path = os.path.join(folder, MANIFEST_NAME)
    if not os.path.isdir(folder):
        raise FileNotFoundError(f"{folder}: no such shard folder")
    if not os.path.exists(path):
        raise FileNotFoundError(
            f"{folder}: no {MANIFEST_NAME}: not a finished shard folder (an interrupted save "
            "leaves none)"
        )
    try:
        with open(path, encoding="utf-8") as f:
            manifest = json.load(f)
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise CorruptIndexFileError(f"{path}: the manifest is not valid JSON") from None
    if not isinstance(manifest, dict) or not isinstance(manifest.get(MANIFEST_KEY), int):
        raise CorruptIndexFileError(f"{path}: not a boxwood shard manifest")
    if manifest[MANIFEST_KEY] != MANIFEST_VERSION:
        raise UnsupportedIndexFileError(
            f"{path}: manifest version {manifest[MANIFEST_KEY]}; this boxwood reads "
            f"version {MANIFEST_VERSION}"
        )
    try:
        return _manifest_fields(manifest, path)
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        if isinstance(exc, CorruptIndexFileError):
            raise
        raise CorruptIndexFileError(
            f"{path}: the manifest is incomplete or malformed ({exc!r})"
        ) from None


def _manifest_fields(manifest: dict[str, Any], path: str) -> dict[str, Any]:
    """The manifest with its axes and boundaries decoded; raises on anything out of place."""
    domain = manifest["boundaries"]["domain"]
    if domain not in ("float64", "int64"):
        raise CorruptIndexFileError(f"{path}: boundaries of unknown domain {domain!r}")
    x_axis = axis_from_json(manifest["x"], domain, path)
    y_kind = manifest["y"]["kind"]
    y_axis = axis_from_json(manifest["y"], KIND_DOMAIN[y_kind], path)
    values = manifest["boundaries"]["values"]
    cuts = np.array([float(v) for v in values] if domain == "float64" else values, dtype=domain)
    shards = manifest["shards"]
    if not isinstance(shards, list) or len(shards) != cuts.size + 1:
        raise CorruptIndexFileError(f"{path}: {cuts.size} boundaries need {cuts.size + 1} shards")
    for s, entry in enumerate(shards):
        if entry["file"] != shard_file(s, len(shards)):
            raise CorruptIndexFileError(f"{path}: shard {s} names the file {entry['file']!r}")
        for field in ("rows", "bytes"):
            if type(entry[field]) is not int or entry[field] < 0:
                raise CorruptIndexFileError(f"{path}: shard {s} has a bad {field!r}")
        if not isinstance(entry["xxh3"], str):
            raise CorruptIndexFileError(f"{path}: shard {s} has no header checksum")
    if manifest["layout"] not in ("fast", "compact") or manifest["weights"] not in (
        None,
        "float64",
        "int64",
    ):
        raise CorruptIndexFileError(f"{path}: unknown layout or weights")
    offsets = manifest["partition_offsets"]
    if sum(e["rows"] for e in shards) + manifest["rows_dropped"] != offsets[-1]:
        raise CorruptIndexFileError(f"{path}: the row counts do not add up")
    keys = manifest.get("keys")  # absent: a manifest of a tree without keys
    key_codes = None
    if keys is not None:
        key_codes = np.array(keys["boundary_codes"], dtype=np.int64)
        count = keys["count"]
        if (
            key_codes.shape != cuts.shape
            or type(count) is not int
            or np.any(np.diff(key_codes) < 0)
            or np.any((key_codes < 0) | (key_codes >= count))
            or not all(isinstance(n, str) for n in keys["names"])
        ):
            raise CorruptIndexFileError(f"{path}: the manifest's keys are malformed")
    return dict(manifest, x_axis=x_axis, y_axis=y_axis, cuts=cuts, keys=keys, key_codes=key_codes)
