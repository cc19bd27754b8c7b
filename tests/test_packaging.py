"""Packaging that every install shares: the CPU check at import, and the build settings it guards.

The CPU check (``boxwood._cpu``) is tested with made-up /proc/cpuinfo text and files, through
its function and through a real ``import boxwood`` in a fresh interpreter, where the compiled
engine must never be loaded. The feature list it checks is the x86-64 psABI's x86-64-v2
level (from memory: CMPXCHG16B, LAHF/SAHF, POPCNT, SSE3, SSE4.1, SSE4.2, SSSE3); this machine's
own /proc/cpuinfo must pass it, since the engine runs here.
"""

from __future__ import annotations

import os
import platform
import re
import shutil
import subprocess
import sys
import textwrap
from collections import Counter
from pathlib import Path

import pytest

from _optional import missing, require
from boxwood import _cpu

REPO = Path(__file__).resolve().parent.parent
LINUX_X86_64 = sys.platform.startswith("linux") and platform.machine() in ("x86_64", "AMD64")

#: A cpuinfo of a CPU with every x86-64-v2 flag, and one from before it (a Core 2 class CPU:
#: SSSE3 but no SSE4.2, POPCNT or LAHF in 64-bit mode); two processors each, as the kernel
#: writes one block per logical CPU.
V2_FLAGS = "fpu tsc cx8 sse sse2 pni ssse3 cx16 sse4_1 sse4_2 popcnt lahf_lm"
OLD_FLAGS = "fpu tsc cx8 sse sse2 pni ssse3 cx16"


def cpuinfo(flags: str, processors: int = 2) -> str:
    block = "processor\t: {i}\nmodel name\t: Made-up CPU\nflags\t\t: {flags}\n\n"
    return "".join(block.format(i=i, flags=flags) for i in range(processors))


def test_missing_flags_reads_the_flags_line():
    assert _cpu.missing_flags(cpuinfo(V2_FLAGS)) == ()
    assert _cpu.missing_flags(cpuinfo(OLD_FLAGS)) == ("lahf_lm", "popcnt", "sse4_1", "sse4_2")
    # A flag name that merely contains a needed one does not count for it.
    assert _cpu.missing_flags(cpuinfo(V2_FLAGS.replace(" popcnt", " xpopcnt"))) == ("popcnt",)
    assert _cpu.missing_flags("processor\t: 0\n") == ()  # no flags line: no verdict


@pytest.mark.skipif(not LINUX_X86_64, reason="the check applies to Linux x86-64 only")
def test_check_raises_a_clear_import_error_on_an_old_cpu(tmp_path):
    fake = tmp_path / "cpuinfo"
    fake.write_text(cpuinfo(OLD_FLAGS))
    with pytest.raises(_cpu.UnsupportedCPUError) as caught:
        _cpu.check(str(fake))
    message = str(caught.value)
    assert isinstance(caught.value, ImportError)
    assert "x86-64-v2" in message and "lahf_lm, popcnt, sse4_1, sse4_2" in message
    assert "RUSTFLAGS='-C target-cpu=native' pip install --no-binary boxwood boxwood" in message
    fake.write_text(cpuinfo(V2_FLAGS))
    _cpu.check(str(fake))
    _cpu.check(str(tmp_path / "absent"))  # unreadable: no verdict, no error


@pytest.mark.skipif(not LINUX_X86_64, reason="the check applies to Linux x86-64 only")
def test_this_machines_cpu_passes_the_check():
    assert _cpu.missing_flags(Path(_cpu.CPUINFO).read_text()) == ()
    _cpu.check()


@pytest.mark.skipif(not LINUX_X86_64, reason="the check applies to Linux x86-64 only")
def test_import_on_an_old_cpu_fails_before_the_engine_loads(tmp_path):
    """A fresh interpreter whose boxwood._cpu reads a made-up old CPU's flags: ``import
    boxwood`` raises the check's error, and the compiled module was never loaded."""
    fake = tmp_path / "cpuinfo"
    fake.write_text(cpuinfo(OLD_FLAGS))
    program = textwrap.dedent(
        f"""
        import importlib.util, os, sys
        # Load the installed boxwood/_cpu.py on its own (finding a package runs nothing),
        # point it at the made-up file, then import boxwood as usual.
        package = importlib.util.find_spec("boxwood").submodule_search_locations[0]
        spec = importlib.util.spec_from_file_location(
            "boxwood._cpu", os.path.join(package, "_cpu.py")
        )
        cpu = importlib.util.module_from_spec(spec)
        sys.modules["boxwood._cpu"] = cpu
        spec.loader.exec_module(cpu)
        cpu.CPUINFO = {str(fake)!r}
        try:
            import boxwood
        except ImportError as exc:
            print(type(exc).__name__, "boxwood._boxwood" in sys.modules)
            print(exc)
        else:
            print("imported")
        """
    )
    done = subprocess.run([sys.executable, "-c", program], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    first, message = done.stdout.split("\n", 1)
    assert first == "UnsupportedCPUError False"
    assert "needs an x86-64-v2 CPU" in message and "lacks lahf_lm, popcnt, sse4_1" in message


def test_the_checked_level_is_the_level_the_engine_is_built_for():
    config = (REPO / ".cargo" / "config.toml").read_text(encoding="utf-8")
    section = re.search(
        r"^\[target\.x86_64-unknown-linux-gnu\]\n(.*?)(?=^\[|\Z)", config, re.M | re.S
    )
    assert section is not None
    levels = re.findall(r"target-cpu=([\w-]+)", section.group(1))
    assert levels == [_cpu.BASELINE]


def test_the_import_check_runs_before_the_compiled_module_is_imported():
    source = (REPO / "python" / "boxwood" / "__init__.py").read_text(encoding="utf-8")
    check, engine = source.index("_check_cpu()"), source.index("from ._boxwood import")
    # Nothing imported before the check may pull in the engine either.
    before = re.findall(r"^from (\S+) import", source[:check], re.M)
    assert check < engine and before == ["._cpu"]
    # The check itself imports only the standard library, nothing of the package.
    cpu_source = (REPO / "python" / "boxwood" / "_cpu.py").read_text(encoding="utf-8")
    imported = re.findall(r"^(?:from|import) (\S+)", cpu_source, re.M)
    assert imported == ["__future__", "platform", "sys"]


# --------------------------------------------------------------------------------------------
# The version without package metadata (a checkout used in place)
# --------------------------------------------------------------------------------------------


def test_a_checkouts_version_is_its_cargo_workspaces():
    from boxwood import _version

    tomllib = require("tomllib", reason="tomllib is in the standard library from Python 3.11")
    # Reference: Python's own TOML parser reading the same file.
    cargo = tomllib.loads((REPO / "Cargo.toml").read_text(encoding="utf-8"))
    assert _version.checkout_version(REPO) == cargo["workspace"]["package"]["version"]


def test_the_version_reader_takes_the_workspace_tables_version_only(tmp_path):
    from boxwood import _version

    (tmp_path / "Cargo.toml").write_text(
        '[package]\nversion = "9.9.9"\n\n[workspace.package]\nauthors = ["[a] b"]\n'
        'version = "1.2.3"  # the one\n\n[dependencies]\nversion = "0.0.1"\n',
        encoding="utf-8",
    )
    assert _version.checkout_version(tmp_path) == "1.2.3"
    (tmp_path / "Cargo.toml").write_text('[package]\nversion = "9.9.9"\n', encoding="utf-8")
    assert _version.checkout_version(tmp_path) == _version.UNKNOWN
    assert _version.checkout_version(tmp_path / "absent") == _version.UNKNOWN


def test_import_without_package_metadata_falls_back_to_the_checkouts_version():
    import boxwood

    # The metadata lookup made to fail as it does for a package that was never installed.
    code = textwrap.dedent(
        """
        import importlib.metadata as metadata
        def absent(name):
            raise metadata.PackageNotFoundError(name)
        metadata.version = absent
        import boxwood
        print(boxwood.__version__)
        """
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    root = Path(boxwood.__file__).resolve().parents[2]
    # In a checkout (make build-dev) the checkout's Cargo.toml; in an installed wheel there is
    # none above the package, and the version says it is unknown.
    expected = boxwood._version.checkout_version(root)
    assert done.stdout.strip() == expected
    if (root / "Cargo.toml").exists():
        assert expected == boxwood.__version__ != boxwood._version.UNKNOWN
    else:
        assert expected == boxwood._version.UNKNOWN


# --------------------------------------------------------------------------------------------
# The compiled module is built for x86-64-v2, and for nothing beyond it
# --------------------------------------------------------------------------------------------

#: Mnemonics of instructions of levels above x86-64-v2 (x86-64 psABI, from memory: v3 adds
#: AVX, AVX2, BMI1, BMI2, F16C, FMA, LZCNT, MOVBE, XSAVE) that are not VEX-encoded, so do not
#: start with "v". TZCNT is not among them: its encoding (F3 0F BC) runs as BSF on a CPU
#: without BMI1, the same answer for a non-zero input, and LLVM emits it as such for x86-64
#: targets (from memory: objdump shows `rep bsf` as tzcnt).
ABOVE_V2 = {"andn", "bextr", "blsi", "blsmsk", "blsr", "bzhi", "lzcnt", "movbe", "mulx"}
ABOVE_V2 |= {"pdep", "pext", "rorx", "sarx", "shlx", "shrx", "xsaveopt"}


def test_the_wheel_build_keeps_the_configs_target_cpu():
    # Cargo takes extra compiler flags from the first of CARGO_ENCODED_RUSTFLAGS, RUSTFLAGS,
    # target.<triple>.rustflags and build.rustflags (Cargo reference, build.rustflags), so a
    # RUSTFLAGS in the build's environment would drop the config's target-cpu.
    makefile = (REPO / "Makefile").read_text(encoding="utf-8")
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert "RUSTFLAGS" not in makefile and "RUSTFLAGS" not in ci
    target = re.search(r"^WHEEL_TARGET\s*\?=\s*(\S+)$", makefile, re.M)
    config = (REPO / ".cargo" / "config.toml").read_text(encoding="utf-8")
    assert target is not None and f"[target.{target.group(1)}]" in config
    for name in ("RUSTFLAGS", "CARGO_ENCODED_RUSTFLAGS"):
        assert name not in os.environ, f"{name} is set: it would replace the config's flags"


def test_the_compiled_module_uses_x86_64_v2_and_no_instruction_beyond_it():
    from boxwood import _boxwood

    if not LINUX_X86_64:
        pytest.skip("the x86-64-v2 setting is for the Linux x86-64 build only")
    objdump = shutil.which("objdump")
    if objdump is None:
        missing("objdump (GNU binutils) is not installed")
    # The module this test imported: the installed wheel's under make test (test_wheel.py
    # checks that boxwood comes from there), the in-tree build's under make test-python.
    module = Path(_boxwood.__file__)
    listing = subprocess.run(
        [objdump, "-d", "--no-show-raw-insn", str(module)],
        capture_output=True,
        text=True,
        check=True,
    ).stdout
    mnemonics: Counter[str] = Counter()
    wide_registers = 0
    for line in listing.splitlines():
        fields = line.split("\t")
        if len(fields) < 2 or not fields[0].strip().endswith(":"):
            continue
        words = fields[1].split()
        if not words:
            continue
        mnemonics[words[0]] += 1
        wide_registers += "%ymm" in fields[1] or "%zmm" in fields[1]
    assert sum(mnemonics.values()) > 10_000  # the listing was read
    # POPCNT is x86-64-v2's: without it count_ones is a sequence of shifts and masks.
    assert mnemonics["popcnt"] > 0
    vex = sorted(m for m in mnemonics if m.startswith("v") and m not in ("verr", "verw"))
    assert vex == [] and wide_registers == 0  # AVX and above: x86-64-v3 and v4
    assert sorted(set(mnemonics) & ABOVE_V2) == []
