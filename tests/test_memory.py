"""Memory: the estimate against what a built tree holds, and against the peak the kernel saw.

``estimate_bytes(...).peak_build_bytes`` is documented as an upper bound on what a build
adds to the process's resident memory; it is checked here as exactly that (no allowance).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest

import boxwood
from boxwood import _memory

LAYOUTS = ("fast", "compact")


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("weights", [None, "float64", "int64"])
def test_the_estimate_is_what_the_tree_holds(layout, weights):
    rng = np.random.default_rng(6)
    for n in (0, 1, 100, 4481, 20_000):
        w = None if weights is None else rng.integers(0, 9, n).astype(weights)
        tree = boxwood.RangeTree(rng.random(n), rng.random(n), weights=w, layout=layout)
        e = boxwood.estimate_bytes(n, layout=layout, weights=weights)
        assert e.index_bytes == tree.nbytes
        assert e.peak_build_bytes >= e.index_bytes


_PEAK_CHILD = textwrap.dedent(
    """
    import sys
    import numpy as np
    import boxwood

    def high_water_mark():
        # VmHWM belongs to this process's own address space, made new by exec; getrusage's
        # peak would start from the parent's, which is large late in a test run.
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
        raise SystemExit("no VmHWM in /proc/self/status")

    n, layout, weights = int(sys.argv[1]), sys.argv[2], sys.argv[3]
    weights = None if weights == "none" else weights
    x = np.random.default_rng(0).random(n); y = np.random.default_rng(1).random(n)
    w = None if weights is None else np.random.default_rng(2).random(n).astype(weights)
    before = high_water_mark()
    tree = boxwood.RangeTree(x, y, weights=w, layout=layout)
    after = high_water_mark()
    estimate = boxwood.estimate_bytes(n, layout=layout, weights=weights)
    print(after - before, estimate.peak_build_bytes)
    """
)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize(
    ("n", "weights"), [(100_000, "none"), (100_000, "float64"), (4_000_000, "none")]
)
def test_the_peak_estimate_bounds_the_peak_the_kernel_saw(layout, n, weights):
    """Reference: the kernel's peak resident set size (VmHWM) of a child process, which must
    never exceed the documented upper bound. The bound assumes the two presorts run side by
    side, which they do only when a second core is free; on a busy machine the peak is lower,
    hence the loose lower limit (which keeps the check from passing on a vacuous bound). At
    10^5 points the fixed cost of starting the build's threads dominates."""
    out = subprocess.run(
        [sys.executable, "-c", _PEAK_CHILD, str(n), layout, weights],
        capture_output=True,
        text=True,
        timeout=300,
        check=True,
    ).stdout.split()
    measured, estimated = int(out[0]), int(out[1])
    assert 0.4 * estimated <= measured <= estimated, (measured, estimated)


def test_a_build_that_cannot_fit_is_refused_before_it_allocates(monkeypatch):
    monkeypatch.setattr(_memory, "available_bytes", lambda: 10_000)
    calls = []
    monkeypatch.setattr(boxwood._parts, "_Tree", lambda *a: calls.append(a))
    with pytest.raises(boxwood.InsufficientMemoryError, match=r"needs about .* available"):
        boxwood.RangeTree(np.arange(100_000.0), np.arange(100_000.0))
    assert calls == []
    assert isinstance(boxwood.InsufficientMemoryError("x"), MemoryError)


def test_estimate_arguments_are_checked():
    with pytest.raises(ValueError, match="non-negative"):
        boxwood.estimate_bytes(-1)
    with pytest.raises(ValueError, match="layout"):
        boxwood.estimate_bytes(10, layout="tiny")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="weights"):
        boxwood.estimate_bytes(10, weights="float16")  # type: ignore[arg-type]


_Y_STATISTICS_CHILD = textwrap.dedent(
    """
    import sys
    import numpy as np
    import boxwood

    def status(field):
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
        raise SystemExit(f"no {field} in /proc/self/status")

    n = int(sys.argv[1])
    tree = boxwood.RangeTree(np.random.default_rng(0).random(n), np.random.default_rng(1).random(n))
    tree.min(0, 1, 0, 1, of="x")  # x statistics derive nothing
    # VmHWM is the peak since the process started (the build's, higher): writing 5 to
    # clear_refs resets it to the resident set now (Linux 4.0 on, proc(5)).
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")
    before = status("VmRSS")
    tree.min(0, 1, 0, 1, of="y")
    cascade = tree.nbytes_by_part["transposed cascade"]
    print(status("VmRSS") - before, status("VmHWM") - before, cascade)
    """
)


def test_the_first_y_statistic_grows_the_process_by_what_the_estimate_says():
    """Reference: the kernel's resident set (VmRSS) and its peak (VmHWM, reset just before)
    in a child process around the first y statistic, which derives the transposed count
    cascade: the process keeps at least the cascade's bytes, and at its peak holds no more
    than them plus the 16 bytes a point the derivation is documented to hold while it runs,
    and the 4 MiB the build's estimate allows for pages its threads touch first
    (``THREADS_FIXED_BYTES``)."""
    n = 4_000_000
    out = subprocess.run(
        [sys.executable, "-c", _Y_STATISTICS_CHILD, str(n)],
        capture_output=True,
        text=True,
        timeout=300,
        check=True,
    ).stdout.split()
    kept, peak, cascade = (int(v) for v in out)
    estimate = boxwood.estimate_bytes(n).y_statistics_bytes
    assert cascade == estimate > 0
    assert 0.9 * estimate <= kept <= peak <= estimate + 16 * n + (4 << 20), (kept, peak, estimate)
