"""Packaging that every install shares: the CPU check at import, and the build settings it guards.

The CPU check (``boxwood._cpu``) is tested with made-up /proc/cpuinfo text and files, through
its function and through a real ``import boxwood`` in a fresh interpreter, where the compiled
engine must never be loaded. The feature list it checks is the x86-64 psABI's x86-64-v2
level (from memory: CMPXCHG16B, LAHF/SAHF, POPCNT, SSE3, SSE4.1, SSE4.2, SSSE3); this machine's
own /proc/cpuinfo must pass it, since the engine runs here.
"""

from __future__ import annotations

import platform
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

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
    assert check < engine and before == ["importlib.metadata", "._cpu"]
    # The check itself imports only the standard library, nothing of the package.
    cpu_source = (REPO / "python" / "boxwood" / "_cpu.py").read_text(encoding="utf-8")
    imported = re.findall(r"^(?:from|import) (\S+)", cpu_source, re.M)
    assert imported == ["__future__", "platform", "sys"]
