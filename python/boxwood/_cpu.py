"""The CPU check run by ``import boxwood`` before the compiled engine is loaded.

The Linux x86-64 engine is compiled for x86-64-v2 (``.cargo/config.toml``): it uses POPCNT and
SSE4.2 everywhere, so on an older CPU the first such instruction would kill the process with
SIGILL, with no word of why. Reading the kernel's CPU flags first turns that into an
ImportError that says what is missing and how to build for that CPU. The check is pure Python
on purpose: any compiled code of the package would itself be built for x86-64-v2.

>>> missing_flags("flags\\t\\t: fpu sse2 pni ssse3 sse4_1 sse4_2 popcnt cx16 lahf_lm")
()
>>> missing_flags("flags\\t\\t: fpu sse2 pni ssse3")
('cx16', 'lahf_lm', 'popcnt', 'sse4_1', 'sse4_2')
"""

from __future__ import annotations

import platform
import sys

#: The level the engine is compiled for on Linux x86-64 (``.cargo/config.toml``).
BASELINE = "x86-64-v2"
#: The Linux /proc/cpuinfo names of the features that level adds to x86-64, as the x86-64
#: psABI lists them (CMPXCHG16B, LAHF/SAHF, POPCNT, SSE3, SSE4.1, SSE4.2, SSSE3); SSE3 is
#: called "pni" there.
BASELINE_FLAGS = ("cx16", "lahf_lm", "popcnt", "pni", "sse4_1", "sse4_2", "ssse3")
#: Where the kernel lists the CPU's flags.
CPUINFO = "/proc/cpuinfo"


class UnsupportedCPUError(ImportError):
    """The CPU lacks an instruction set extension the compiled engine was built to use."""


def missing_flags(cpuinfo: str) -> tuple[str, ...]:
    """The baseline flags absent from the first ``flags`` line of ``cpuinfo``'s text."""
    for line in cpuinfo.splitlines():
        name, sep, value = line.partition(":")
        if sep and name.strip() == "flags":
            present = set(value.split())
            return tuple(flag for flag in BASELINE_FLAGS if flag not in present)
    return ()  # no flags line (an unusual kernel or sandbox): nothing to go on, so no verdict


def check(path: str | None = None) -> None:
    """Raise :class:`UnsupportedCPUError` if this Linux x86-64 CPU is below the baseline.

    ``path`` is :data:`CPUINFO` unless given. Other systems are not checked: the baseline is
    set only for the Linux x86-64 build. An unreadable file is no verdict either; the check
    must never stop a CPU that is fine.
    """
    path = CPUINFO if path is None else path
    if not (sys.platform.startswith("linux") and platform.machine() in ("x86_64", "AMD64")):
        return
    try:
        with open(path, encoding="utf-8", errors="replace") as handle:
            text = handle.read()
    except OSError:
        return
    missing = missing_flags(text)
    if missing:
        raise UnsupportedCPUError(
            f"boxwood's compiled engine needs an {BASELINE} CPU (SSE4.2 and POPCNT: Intel "
            f"since 2008, AMD since 2011), and this one lacks {', '.join(missing)} "
            f"(from {path}). Build it from source for this CPU: "
            "RUSTFLAGS='-C target-cpu=native' pip install --no-binary boxwood boxwood"
        )
