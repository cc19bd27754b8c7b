"""Memory before a build: what a tree will take, and a clear refusal when it cannot fit.

>>> import boxwood
>>> e = boxwood.estimate_bytes(10_000_000, layout="compact")
>>> e.index_bytes < e.peak_build_bytes
True
"""

from __future__ import annotations

from typing import Literal, NamedTuple

from ._boxwood import estimate_bytes as _estimate

WeightsKind = Literal["float64", "int64", "int128"]


class MemoryEstimate(NamedTuple):
    #: Bytes the finished tree holds (exactly its ``nbytes``).
    index_bytes: int
    #: The most the build holds at once, on top of the input columns (an upper bound: the
    #: two presorts run side by side only when a second core is free), with 4 MiB plus
    #: 64 KiB a worker thread for starting the build's threads (stacks, allocator arenas).
    peak_build_bytes: int
    #: What the first ``min``/``max``/``quantile``/``extreme_rows`` of ``of="y"`` adds to the
    #: tree (and to its ``nbytes``): the transposed count cascade, derived then; the
    #: derivation holds about 16 bytes a point more while it runs.
    y_statistics_bytes: int


class InsufficientMemoryError(MemoryError):
    """A build that would need more memory than the machine has available."""


#: How a caller builds past the estimate; the command line words it as its own option.
OVERRIDE = "check_memory=False"


def estimate_bytes(
    n: int,
    *,
    layout: Literal["fast", "compact"] = "compact",
    weights: WeightsKind | None = None,
    keys: int | None = None,
) -> MemoryEstimate:
    """Memory of a tree of `n` rows, before building it.

    `weights` is the weights' storage: ``None``, ``"float64"``, ``"int64"``, or ``"int128"``
    (integer weights whose absolute values add up to 2**63 or more). `keys` is the number
    of distinct keys of a tree built with ``by=`` (None: without keys).
    """
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise ValueError(f"n must be a non-negative integer, got {n!r}")
    if keys is not None and (isinstance(keys, bool) or not isinstance(keys, int) or keys < 0):
        raise ValueError(f"keys must be None or a non-negative integer, got {keys!r}")
    return MemoryEstimate(*_estimate(n, layout, weights, keys))


def available_bytes() -> int | None:
    """Memory this process may still take: the kernel's MemAvailable plus free swap, capped
    by the cgroup limit when one is set; None where that cannot be read."""
    try:
        with open("/proc/meminfo") as f:
            fields = {k: v for k, _, v in (line.partition(":") for line in f)}
        kib = int(fields["MemAvailable"].split()[0]) + int(fields["SwapFree"].split()[0])
    except (OSError, KeyError, ValueError, IndexError):
        return None
    available = kib * 1024
    limit = _cgroup_room()
    return available if limit is None else min(available, limit)


def _cgroup_room() -> int | None:
    try:
        with open("/sys/fs/cgroup/memory.max") as f:
            limit = f.read().strip()
        with open("/sys/fs/cgroup/memory.current") as f:
            used = int(f.read().strip())
    except (OSError, ValueError):
        return None
    return None if limit == "max" else max(int(limit) - used, 0)


def check_fits(
    n: int,
    layout: Literal["fast", "compact"],
    weights: WeightsKind | None,
    keys: int | None = None,
) -> None:
    """Refuse a build that cannot fit, before it allocates anything."""
    need = estimate_bytes(n, layout=layout, weights=weights, keys=keys).peak_build_bytes
    room = available_bytes()
    if room is not None and need > room:
        hint = " (layout='compact' needs less)" if layout == "fast" else ""
        raise InsufficientMemoryError(
            f"building a {layout}-layout tree of {n:,} rows needs about "
            f"{_readable_bytes(need)} at its peak, but only {_readable_bytes(room)} is "
            f"available{hint}; the estimate is an upper bound: pass {OVERRIDE} to build anyway"
        )


def _readable_bytes(b: int) -> str:
    # The largest unit that keeps a figure at 1 or more: a small build never reads "0.0 GiB".
    for unit, size in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if b >= size:
            return f"{b / size:.1f} {unit}"
    return f"{b} bytes"
