"""The wheel as a user gets it: its tags, its glibc floor, no debug info, one version, entry points.

``make test`` builds the wheel (``make wheel``), installs it into a fresh venv with no Rust
toolchain on PATH and runs the whole suite there with ``BOXWOOD_WHEEL`` naming the wheel file;
the tests here that need it skip without it (the in-tree ``make test-python``) and fail under
``BOXWOOD_REQUIRE_ALL=1`` (CI). The wheel's files are read with the standard library's zipfile
and the ELF reader in ``_elf.py`` (System V ABI layouts), never through boxwood itself.
"""

from __future__ import annotations

import os
import re
import shutil
import struct
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import numpy as np
import pytest

import _elf
import boxwood
from _optional import missing, require

REPO = Path(__file__).resolve().parent.parent
#: The glibc floor chosen for the Linux wheels (Makefile WHEEL_COMPAT): manylinux2014, which
#: PEP 599 defines as glibc 2.17 and PEP 600 also spells manylinux_2_17.
GLIBC_FLOOR = (2, 17)
#: The oldest CPython the abi3 wheel is for (pyproject.toml requires-python, pyo3 abi3-py39).
ABI3_FLOOR = "cp39"


@pytest.fixture(scope="module")
def wheel() -> Path:
    path = os.environ.get("BOXWOOD_WHEEL")
    if not path:
        missing("BOXWOOD_WHEEL is not set: run under `make test`, which builds the wheel")
    return Path(path)


def wheel_text(wheel: Path, name: str) -> str:
    with zipfile.ZipFile(wheel) as archive:
        (info,) = [n for n in archive.namelist() if n.endswith(f".dist-info/{name}")]
        return archive.read(info).decode("utf-8")


def wheel_module(wheel: Path) -> tuple[str, bytes]:
    with zipfile.ZipFile(wheel) as archive:
        (name,) = [n for n in archive.namelist() if re.fullmatch(r"boxwood/_boxwood\..*so", n)]
        return name, archive.read(name)


def metadata_field(text: str, field: str) -> list[str]:
    """The values of one field of an email-header style file (WHEEL, METADATA)."""
    header = text.split("\n\n", 1)[0]
    return [
        line.split(":", 1)[1].strip()
        for line in header.splitlines()
        if line.startswith(f"{field}:")
    ]


# --------------------------------------------------------------------------------------------
# The ELF reader itself, on a file made here with known sections
# --------------------------------------------------------------------------------------------


def make_elf(named: list[tuple[str, int, bytes, int, int]]) -> bytes:
    """A minimal ELF-64 LE file: (name, type, payload, link, info) sections after a null one
    and before the section name table, laid out by the System V ABI's ELF-64 header."""
    names = b"\0" + b"".join(n.encode() + b"\0" for n, *_ in named) + b".shstrtab\0"
    body, headers, name_at, at = b"", [(0, 0, 0, 0, 0, 0)], 1, 64
    for name, kind, payload, link, info in named:
        headers.append((name_at, kind, at, len(payload), link, info))
        body, at, name_at = body + payload, at + len(payload), name_at + len(name) + 1
    headers.append((name_at, 3, at, len(names), 0, 0))  # SHT_STRTAB
    body += names
    shoff = 64 + len(body)
    ident = b"\x7fELF" + bytes([2, 1, 1]) + bytes(9)
    head = ident + struct.pack(
        "<HHIQQQIHHHHHH", 3, 62, 1, 0, 0, shoff, 0, 64, 0, 0, 64, len(headers), len(headers) - 1
    )
    table = b"".join(
        struct.pack("<IIQQQQIIQQ", n, t, 0, 0, off, size, link, info, 1, 0)
        for n, t, off, size, link, info in headers
    )
    return head + body + table


def test_elf_reader_finds_debug_sections_and_glibc_versions_in_a_made_file():
    strings = b"\0libc.so.6\0GLIBC_2.2.5\0GLIBC_2.14\0"
    lib, v225, v214 = 1, strings.index(b"GLIBC_2.2.5"), strings.index(b"GLIBC_2.14")
    # One Verneed (version 1, 2 entries, file "libc.so.6", aux at +16, last) and its two
    # Vernaux entries (hash, flags, other, name, next).
    verneed = struct.pack("<HHIII", 1, 2, lib, 16, 0)
    verneed += struct.pack("<IHHII", 0, 0, 2, v225, 16) + struct.pack("<IHHII", 0, 0, 3, v214, 0)
    data = make_elf(
        [
            (".dynstr", 3, strings, 0, 0),
            (".gnu.version_r", _elf.SHT_GNU_VERNEED, verneed, 1, 1),
            (".text", 1, b"\xc3", 0, 0),
            (".debug_info", 1, b"\0" * 8, 0, 0),
        ]
    )
    assert [s.name for s in _elf.sections(data)] == [
        "",
        ".dynstr",
        ".gnu.version_r",
        ".text",
        ".debug_info",
        ".shstrtab",
    ]
    assert _elf.debug_sections(data) == [".debug_info"]
    assert _elf.needed_versions(data) == {"libc.so.6": ["GLIBC_2.2.5", "GLIBC_2.14"]}
    assert _elf.glibc_floor(data) == (2, 14)  # numeric, not text order: 2.14 > 2.2.5
    with pytest.raises(_elf.NotElf64Error):
        _elf.sections(b"#!/bin/sh\n" + bytes(64))


# --------------------------------------------------------------------------------------------
# The installed package is the wheel, and nothing of the source tree or the toolchain
# --------------------------------------------------------------------------------------------


def test_boxwood_is_the_installed_wheel_in_a_venv_without_rust(wheel):
    site = Path(sysconfig.get_path("platlib")).resolve()
    package = Path(boxwood.__file__).resolve().parent
    assert sys.prefix != sys.base_prefix, "not a venv"
    assert package.parent == site, boxwood.__file__
    on_path = {Path(p).resolve() for p in sys.path if p}
    assert REPO / "python" not in on_path and REPO not in on_path
    assert shutil.which("cargo") is None and shutil.which("rustc") is None
    # The compiled module loaded is byte for byte the wheel's.
    name, data = wheel_module(wheel)
    assert Path(boxwood._boxwood.__file__).resolve() == site / name
    assert (site / name).read_bytes() == data


# --------------------------------------------------------------------------------------------
# The wheel file
# --------------------------------------------------------------------------------------------


def test_wheel_tags_are_abi3_and_manylinux_at_the_chosen_floor(wheel):
    text = wheel_text(wheel, "WHEEL")
    tags = metadata_field(text, "Tag")
    arch = {"x86_64": "x86_64", "AMD64": "x86_64", "aarch64": "aarch64"}[os.uname().machine]
    major, minor = GLIBC_FLOOR
    assert sorted(tags) == sorted(
        [
            f"{ABI3_FLOOR}-abi3-manylinux2014_{arch}",
            f"{ABI3_FLOOR}-abi3-manylinux_{major}_{minor}_{arch}",
        ]
    )
    assert metadata_field(text, "Root-Is-Purelib") == ["false"]
    # The file name carries the same tags (PEP 427: platform tags joined by dots).
    _, _, python, abi, platforms = wheel.name[: -len(".whl")].split("-")
    assert {f"{python}-{abi}-{p}" for p in platforms.split(".")} == set(tags)


def test_compiled_module_needs_no_glibc_newer_than_the_floor(wheel):
    _, data = wheel_module(wheel)
    needed = _elf.needed_versions(data)
    assert "libc.so.6" in needed  # so the floor below is read, not vacuous
    assert _elf.glibc_floor(data) <= GLIBC_FLOOR, needed
    # The compiled module needs nothing but glibc's own libraries (no libpython: an abi3
    # extension): the C runtime libraries PEP 599 allows, and glibc's dynamic loader, which
    # provides the thread-local storage lookup (from memory: __tls_get_addr, GLIBC_2.3).
    allowed = {"libc.so.6", "libm.so.6", "libgcc_s.so.1", "libpthread.so.0", "libdl.so.2"}
    allowed |= {"ld-linux-x86-64.so.2", "ld-linux-aarch64.so.1"}
    assert set(needed) <= allowed, needed


def test_compiled_module_has_no_debug_sections(wheel):
    name, data = wheel_module(wheel)
    names = [s.name for s in _elf.sections(data)]
    assert ".text" in names and ".dynsym" in names  # the reader sees the real table
    assert _elf.debug_sections(data) == [], name
    # A stripped engine of this size is a few MB; with debug info it was over 10 MB.
    assert len(data) < 6 * 2**20, len(data)


def test_versions_agree_wheel_metadata_package_and_command_line(wheel):
    cargo = (REPO / "Cargo.toml").read_text(encoding="utf-8")
    workspace = re.search(r'^\[workspace\.package\]\nversion = "([^"]+)"', cargo, re.M)
    assert workspace is not None
    version = workspace.group(1)
    assert metadata_field(wheel_text(wheel, "METADATA"), "Version") == [version]
    assert wheel.name.split("-")[1] == version
    assert boxwood.__version__ == version
    script = Path(sys.prefix) / "bin" / "boxwood"
    for argv in ([str(script), "--version"], [sys.executable, "-m", "boxwood", "--version"]):
        done = subprocess.run(argv, capture_output=True, text=True, check=True)
        assert done.stdout.strip() == f"boxwood {version}", argv


def test_python_m_boxwood_counts_boxes_from_the_installed_wheel(wheel, tmp_path):
    pacsv = require("pyarrow.csv")
    pa = require("pyarrow")
    rng = np.random.default_rng(15)
    x, y = rng.integers(0, 100, 500).astype(float), rng.integers(0, 100, 500)
    x_lo, y_lo = rng.integers(0, 90, 40), rng.integers(0, 90, 40)
    x_hi, y_hi = x_lo + rng.integers(0, 30, 40), y_lo + rng.integers(0, 30, 40)
    pacsv.write_csv(pa.table({"x": x, "y": y}), tmp_path / "points.csv")
    boxes = {"x_lo": x_lo, "x_hi": x_hi, "y_lo": y_lo, "y_hi": y_hi}
    pacsv.write_csv(pa.table(boxes), tmp_path / "boxes.csv")
    argv = [sys.executable, "-m", "boxwood", "count", "points.csv", "boxes.csv"]
    argv += ["--x", "x", "--y", "y", "-q", "-o", "counts.csv"]
    subprocess.run(argv, cwd=tmp_path, check=True, capture_output=True, text=True)
    counts = pacsv.read_csv(tmp_path / "counts.csv").column("count").to_numpy()
    # NumPy as the outside reference: inclusive boxes as boolean masks over the same points.
    expected = [
        np.count_nonzero((x >= a) & (x <= b) & (y >= c) & (y <= d))
        for a, b, c, d in zip(x_lo, x_hi, y_lo, y_hi)
    ]
    assert counts.tolist() == expected
