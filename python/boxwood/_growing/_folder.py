"""A growing tree in a folder: segment index files and a manifest replaced atomically.

The manifest names the live segment files; replacing it is the commit point of every change
(``docs/growing-folder.md``). New segment files are written and synced first (each by the
index file writer: temporary name, sync, rename, sync of the folder), then the manifest is
written under a temporary name, synced, renamed over the old one and the folder synced.
Files no manifest names (an interrupted change's, or segments merged away) are deleted by
the writer after its commit and when it opens the folder. One writer holds the lock file;
readers take no lock and read the manifest, then the files it names.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import fcntl
import hashlib
import json
import os
import re
import threading
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._persist import KIND_DOMAIN, axis_from_json, axis_to_json
from .._tree import RangeTree, load
from ._segments import Schema, Segment

MANIFEST = "MANIFEST"
LOCK = "LOCK"
#: The manifest's version; a reader refuses others.
VERSION = 1
_MAGIC = "boxwood growing tree"
_FILE = re.compile(r"^(seg|dead)-\d{8}\.boxwood$")
#: How often a reader retries when the writer deleted a file between its reading the
#: manifest and opening the file (a newer manifest names other files then).
_READ_ATTEMPTS = 20


class FolderError(Exception):
    """A growing tree's folder that cannot be opened or changed; the base of the others."""


class CorruptFolderError(FolderError, ValueError):
    """A damaged manifest, or one that does not fit the segment files it names."""


class UnsupportedFolderError(FolderError, ValueError):
    """A manifest of a version this boxwood does not know."""


class FolderLockedError(FolderError, RuntimeError):
    """Another writer has the folder open (one writer at a time; readers are many)."""


class ReadOnlyError(FolderError, PermissionError):
    """A change asked of a growing tree opened with ``readonly=True``."""


@dataclass(frozen=True)
class Snapshot:
    """One committed state of the folder."""

    generation: int
    schema: Schema
    segments: tuple[Segment, ...]
    next_id: int


class Folder:
    """The files of one growing tree, as its writer or as a reader."""

    def __init__(self, path: str, readonly: bool) -> None:
        self.path = path
        self.readonly = readonly
        self._lock_fd: int | None = None
        self.generation = -1
        self._next_file = 0
        #: Files written by merges in flight, not yet named by a manifest: kept by cleaning.
        self._pending: set[str] = set()
        self._names = threading.Lock()
        if not readonly:
            self._lock()

    # ------------------------------------------------------------ opening

    def exists(self) -> bool:
        return os.path.exists(self._at(MANIFEST))

    def _lock(self) -> None:
        os.makedirs(self.path, exist_ok=True)
        fd = os.open(self._at(LOCK), os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            holder = os.read(fd, 64).decode(errors="replace").strip() or "unknown"
            os.close(fd)
            if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                raise FolderLockedError(
                    f"{self.path} is open for writing by another writer (process {holder}); "
                    "one writer at a time: open it with readonly=True to read"
                ) from None
            raise
        os.ftruncate(fd, 0)
        os.write(fd, str(os.getpid()).encode())
        self._lock_fd = fd

    def close(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # releases the lock
            self._lock_fd = None

    def read(self, reuse: tuple[Segment, ...] = ()) -> Snapshot:
        """The committed state; segments already loaded (`reuse`) are kept, not reloaded."""
        for attempt in range(_READ_ATTEMPTS):
            manifest = self._read_manifest()
            try:
                snapshot = self._snapshot(manifest, reuse)
            except FileNotFoundError:
                if self.readonly and attempt + 1 < _READ_ATTEMPTS:
                    continue  # the writer committed meanwhile: read its newer manifest
                raise
            self.generation = snapshot.generation
            self._next_file = manifest["next_file"]
            if not self.readonly:
                self._clean(snapshot.segments)
            return snapshot
        raise AssertionError("unreachable")

    def _read_manifest(self) -> dict[str, Any]:
        where = self._at(MANIFEST)
        with open(where, "rb") as f:
            raw = f.read()
        head, _, body = raw.partition(b"\n")
        words = head.decode(errors="replace").split(" ")
        if " ".join(words[:3]) != _MAGIC or len(words) != 5:
            raise CorruptFolderError(f"{where}: not a growing tree's manifest")
        if words[3] != str(VERSION):
            raise UnsupportedFolderError(
                f"{where}: manifest version {words[3]}; this boxwood reads version {VERSION} "
                "(upgrade boxwood to open it)"
            )
        if hashlib.sha256(body).hexdigest() != words[4]:
            raise CorruptFolderError(f"{where}: the manifest does not match its checksum")
        try:
            manifest = json.loads(body.decode())
            _check_manifest(manifest)
        except (ValueError, KeyError, TypeError) as exc:
            raise CorruptFolderError(f"{where}: the manifest cannot be read ({exc})") from None
        return manifest

    def _snapshot(self, manifest: dict[str, Any], reuse: tuple[Segment, ...]) -> Snapshot:
        schema = _schema_from_json(manifest["schema"], self._at(MANIFEST))
        known = {s.name: s for s in reuse if s.name is not None}
        segments = []
        for entry in manifest["segments"]:
            old = known.get(entry["tree"])
            if old is not None and old.dead_name == entry["dead"]:
                segments.append(old)
                continue
            tree = old.tree if old is not None else self._load(entry["tree"])
            dead_tree = None if entry["dead"] is None else self._load(entry["dead"])
            segments.append(_segment(tree, dead_tree, entry, self._at(MANIFEST)))
        return Snapshot(manifest["generation"], schema, tuple(segments), manifest["next_id"])

    def _load(self, name: str) -> RangeTree:
        return load(self._at(name))

    # ------------------------------------------------------------ the writer's commit

    def commit(self, schema: Schema, segments: tuple[Segment, ...], next_id: int) -> Snapshot:
        """Write the segments not yet written, then the manifest naming them all; returns
        the committed state (segments named by their files)."""
        self._writable()
        named = tuple(self._written(s) for s in segments)
        manifest = {
            "generation": self.generation + 1,
            "next_id": int(next_id),
            "next_file": self._next_file,
            "schema": _schema_to_json(schema),
            "segments": [_entry(s) for s in named],
        }
        self._replace_manifest(manifest)
        self.generation += 1
        self._clean(named)
        return Snapshot(self.generation, schema, named, next_id)

    def _writable(self) -> None:
        if self.readonly:
            raise ReadOnlyError(f"{self.path} was opened with readonly=True: it cannot change")
        if self._lock_fd is None:
            raise FolderError(f"{self.path} was closed")

    def _written(self, seg: Segment) -> Segment:
        name, dead_name = seg.name, seg.dead_name
        if name is not None and (seg.dead_tree is None or dead_name is not None):
            return seg  # written already: the same segment, so merges see it unchanged
        if name is None:
            name = self._new_file("seg")
            seg.tree.save(self._at(name))
        if seg.dead_tree is not None and dead_name is None:
            dead_name = self._new_file("dead")
            seg.dead_tree.save(self._at(dead_name))
        return dataclasses.replace(seg, name=name, dead_name=dead_name)

    def _new_file(self, kind: str, pending: bool = False) -> str:
        with self._names:
            name = f"{kind}-{self._next_file:08d}.boxwood"
            self._next_file += 1
            if pending:
                self._pending.add(name)
        return name

    def write_pending(self, seg: Segment) -> Segment:
        """Write a merged segment's file (synced) before its commit, from the merger's
        thread while other changes commit: cleaning keeps it, and its temporary file, until
        :meth:`settled` (a crash leaves it unnamed, and the next open deletes it)."""
        self._writable()
        name = self._new_file("seg", pending=True)
        try:
            seg.tree.save(self._at(name))
        except BaseException:
            self.settled(name, named=False)
            raise
        return dataclasses.replace(seg, name=name)

    def settled(self, name: str, *, named: bool) -> None:
        """A merge's file is committed (`named` by the manifest) or given up (deleted
        now): cleaning no longer keeps it for the merge."""
        with self._names:
            self._pending.discard(name)
        if not named:
            with contextlib.suppress(FileNotFoundError):
                os.remove(self._at(name))

    def _replace_manifest(self, manifest: dict[str, Any]) -> None:
        body = json.dumps(manifest, sort_keys=True).encode()
        head = f"{_MAGIC} {VERSION} {hashlib.sha256(body).hexdigest()}\n".encode()
        partial = self._at(f".{MANIFEST}.{os.getpid()}.partial")
        with open(partial, "wb") as f:
            f.write(head + body)
            f.flush()
            os.fsync(f.fileno())
        os.replace(partial, self._at(MANIFEST))
        _sync_folder(self.path)

    def _clean(self, live: tuple[Segment, ...]) -> None:
        """Delete the files no committed manifest names: segments merged away, and what an
        interrupted change left (unnamed segment files, temporary files)."""
        names = os.listdir(self.path)
        with self._names:  # after the listing: a listed merge's file was pending before it
            pending = set(self._pending)
        keep = {MANIFEST, LOCK, *pending}
        for s in live:
            keep.update(n for n in (s.name, s.dead_name) if n is not None)
        for name in names:
            leftover = _FILE.match(name) or name.endswith(".partial")
            if leftover and name not in keep and not _being_written(name, pending):
                with contextlib.suppress(FileNotFoundError):
                    os.remove(self._at(name))

    def _at(self, name: str) -> str:
        return os.path.join(self.path, name)


def _being_written(name: str, pending: set[str]) -> bool:
    """Whether `name` is the temporary file of a pending merge's segment file."""
    return name.endswith(".partial") and any(name.startswith(f".{p}.") for p in pending)


def _sync_folder(path: str) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


# ---------------------------------------------------------------- the manifest's fields


def _entry(seg: Segment) -> dict[str, Any]:
    return {
        "tree": seg.name,
        "dead": seg.dead_name,
        "rows": int(seg.ids.size),
        "deleted": int(seg.dead.size),
    }


def _check_manifest(m: Any) -> None:
    ints = ("generation", "next_id", "next_file")
    if not isinstance(m, dict) or any(type(m.get(k)) is not int or m[k] < 0 for k in ints):
        raise ValueError("its counters are missing or not non-negative integers")
    if not isinstance(m.get("segments"), list):
        raise ValueError("its segment list is missing")
    for e in m["segments"]:
        names_ok = isinstance(e.get("tree"), str) and _FILE.match(e["tree"])
        dead_ok = e.get("dead") is None or (isinstance(e["dead"], str) and _FILE.match(e["dead"]))
        counts_ok = all(type(e.get(k)) is int and e[k] >= 0 for k in ("rows", "deleted"))
        if not (names_ok and dead_ok and counts_ok):
            raise ValueError("a segment entry is malformed")


def _segment(
    tree: RangeTree, dead_tree: RangeTree | None, entry: dict[str, Any], where: str
) -> Segment:
    """A loaded segment, checked against its manifest entry."""
    ids = _ids_of(tree)
    dead = np.zeros(0, np.int64) if dead_tree is None else _ids_of(dead_tree)
    if ids.size != entry["rows"] or dead.size != entry["deleted"]:
        raise CorruptFolderError(
            f"{where}: segment {entry['tree']} holds {ids.size} rows ({dead.size} deleted) but "
            f"the manifest says {entry['rows']} ({entry['deleted']})"
        )
    if dead.size and not np.isin(dead, ids).all():
        raise CorruptFolderError(f"{where}: {entry['dead']} deletes rows {entry['tree']} lacks")
    return Segment(tree, ids, dead, dead_tree, entry["tree"], entry["dead"])


def _ids_of(tree: RangeTree) -> np.ndarray:
    rows = tree._parts.provenance.source_rows
    return np.arange(len(tree), dtype=np.int64) if rows is None else rows


def _schema_to_json(s: Schema) -> dict[str, Any]:
    return {
        "x": axis_to_json(s.x),
        "y": axis_to_json(s.y),
        "weights": s.weights,
        "key_names": None if s.key_names is None else list(s.key_names),
        "key_kinds": None if s.key_kinds is None else list(s.key_kinds),
        "layout": s.layout,
        "weights_name": s.weights_name,
    }


def _schema_from_json(d: Any, where: str) -> Schema:
    try:
        x = axis_from_json(d["x"], KIND_DOMAIN.get(d["x"]["kind"], "?"), where)
        y = axis_from_json(d["y"], KIND_DOMAIN.get(d["y"]["kind"], "?"), where)
        key_names, key_kinds = d["key_names"], d["key_kinds"]
        schema = Schema(
            x,
            y,
            d["weights"],
            None if key_names is None else tuple(str(k) for k in key_names),
            d["layout"],
            weights_name=str(d["weights_name"]),
            key_kinds=None if key_kinds is None else tuple(str(k) for k in key_kinds),
        )
    except (KeyError, TypeError, ValueError) as exc:
        raise CorruptFolderError(f"{where}: the schema cannot be read ({exc})") from None
    if schema.weights not in (None, "float64", "int64") or schema.layout not in ("fast", "compact"):
        raise CorruptFolderError(f"{where}: the schema names unknown weights or layout")
    return schema
