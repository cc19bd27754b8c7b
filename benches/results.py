"""Each benchmark writes its own section of benches/RESULTS.md, stamped with where it ran.

    from results import env_size, write_section

    n = env_size("BENCH_ROWS", 10**7)          # BENCH_ROWS=1e5 overrides it
    ...
    write_section("sums", "| layout | ... |\\n|---|---|", title="Weighted sums")

A section is the text between ``<!-- section: NAME -->`` and ``<!-- end: NAME -->``; writing
one replaces that text and leaves every other section as it was (a new name is appended at
the end). Every section opens with its own stamp: the commit (``git rev-parse --short HEAD``,
and whether the tree held changes other than the harness's own blocks), the machine (CPU
model, cores, RAM, kernel), the software, the UTC time the run started and ended, the load
average at the start, and the exact command. So RESULTS.md never says one commit for
sections that ran at another.

``BENCH_RESULTS_FILE=/tmp/x.md`` sends the sections elsewhere (for trial runs at small n that
must not land in the committed file).
"""

from __future__ import annotations

import datetime as _dt
import os
import platform
import re
import shlex
import subprocess
import sys
from collections.abc import Iterable
from pathlib import Path

BENCHES = Path(__file__).resolve().parent
REPO = BENCHES.parent
RESULTS = BENCHES / "RESULTS.md"
README = REPO / "README.md"

# Files whose marked blocks the harness rewrites: changes inside those blocks do not make the
# tree "dirty" (an earlier section of the same `make bench` run would otherwise do so).
_HARNESS_FILES = ("benches/RESULTS.md", "README.md")
_SOURCE_SUFFIXES = (".py", ".rs", ".toml", ".pyi", "/")

_STARTED = _dt.datetime.now(_dt.timezone.utc)
_LOAD_AT_START = os.getloadavg() if hasattr(os, "getloadavg") else None


# --------------------------------------------------------------------------------------------
# Sizes from the environment
# --------------------------------------------------------------------------------------------


def env_size(name: str, default: int) -> int:
    """An int from environment variable `name` ("1e6", "100_000", "250000"), else `default`."""
    raw = os.environ.get(name, "").strip()
    if not raw:
        return default
    try:
        value = float(raw.replace("_", ""))
    except ValueError:
        raise SystemExit(f"{name}={raw!r} is not a number") from None
    if value != int(value) or value < 1:
        raise SystemExit(f"{name}={raw!r} must be a positive whole number")
    return int(value)


def env_sizes(name: str, default: Iterable[int]) -> list[int]:
    """A comma-separated list of ints from `name` ("1e6,1e7"), else `default`."""
    raw = os.environ.get(name, "").strip()
    if not raw:
        return list(default)
    out = []
    for part in raw.split(","):
        try:
            out.append(int(float(part.strip().replace("_", ""))))
        except ValueError:
            raise SystemExit(f"{name}={raw!r}: {part!r} is not a number") from None
    return out


# --------------------------------------------------------------------------------------------
# Stamps
# --------------------------------------------------------------------------------------------


def _git(*args: str) -> str | None:
    try:
        done = subprocess.run(
            ["git", *args], cwd=REPO, capture_output=True, text=True, check=True, timeout=30
        )
    except (OSError, subprocess.SubprocessError):
        return None
    return done.stdout


_BLOCK = re.compile(r"(<!-- section: ([\w.-]+) -->\n).*?(<!-- end: \2 -->)", re.S)


def _without_blocks(text: str) -> str:
    return _BLOCK.sub(r"\1\3", text)


def commit_stamp() -> str:
    """ "`abc1234`" or "`abc1234` plus uncommitted changes to a.py, b.rs" or "unknown"."""
    head = _git("rev-parse", "--short", "HEAD")
    if head is None:
        return "unknown (not a git checkout)"
    status = _git("status", "--porcelain") or ""
    changed = []
    for line in status.splitlines():
        path = line[3:].split(" -> ")[-1]
        if line.startswith("??") and not path.endswith(_SOURCE_SUFFIXES):
            continue  # an untracked output file (an index file, a plot) changes no figure
        if path in _HARNESS_FILES:
            committed = _git("show", f"HEAD:{path}")
            current = (REPO / path).read_text() if (REPO / path).exists() else ""
            if committed is not None and _without_blocks(committed) == _without_blocks(current):
                continue
        changed.append(path)
    stamp = f"`{head.strip()}`"
    if changed:
        shown = ", ".join(changed[:6]) + (
            f" and {len(changed) - 6} more" if len(changed) > 6 else ""
        )
        stamp += f" plus uncommitted changes to {shown}"
    return stamp


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _physical_cores() -> int | None:
    try:
        text = Path("/proc/cpuinfo").read_text()
    except OSError:
        return None
    cores = set()
    for block in text.strip().split("\n\n"):
        fields = dict(
            (k.strip(), v.strip()) for k, _, v in (ln.partition(":") for ln in block.splitlines())
        )
        if "core id" in fields:
            cores.add((fields.get("physical id", "0"), fields["core id"]))
    return len(cores) or None


def _ram_gib() -> str:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                return f"{int(line.split()[1]) / 2**20:.1f} GiB RAM"
    except OSError:
        pass
    return "RAM unknown"


def machine_stamp() -> str:
    """CPU model, logical (physical) cores, RAM, OS and kernel."""
    logical = os.cpu_count()
    physical = _physical_cores()
    cores = f"{logical} logical CPUs" + (f" ({physical} cores)" if physical else "")
    return f"{_cpu_model()}, {cores}, {_ram_gib()}, {platform.system()} {platform.release()}"


def software_stamp(modules: Iterable[str] = ()) -> str:
    """Python and numpy versions, plus those of `modules` that import."""
    parts = [f"Python {platform.python_version()}"]
    for name in ("numpy", *modules):
        try:
            module = __import__(name)
        except ImportError:
            continue
        parts.append(f"{name} {getattr(module, '__version__', '?')}")
    return ", ".join(parts)


def command_line(argv: list[str] | None = None) -> str:
    """The command that ran this process, with the BENCH_* variables that were set."""
    argv = list(sys.argv if argv is None else argv)
    script = Path(argv[0]).resolve() if argv and argv[0] else None
    if script is not None and script.exists():
        try:
            argv[0] = str(script.relative_to(REPO))
        except ValueError:
            argv[0] = str(script)
    env = [
        f"{k}={shlex.quote(v)}"
        for k, v in sorted(os.environ.items())
        if k.startswith("BENCH_") and k not in ("BENCH_RESULTS_FILE", "BENCH_README_FILE")
    ]
    return (
        shlex.join([".venv/bin/python", *argv])
        if not env
        else " ".join([*env, shlex.join([".venv/bin/python", *argv])])
    )


def _utc(t: _dt.datetime) -> str:
    return t.strftime("%Y-%m-%d %H:%M UTC")


def stamp(command: str | None = None, modules: Iterable[str] = ()) -> str:
    """The markdown lines that open a section: commit, machine, software, time, command."""
    ended = _dt.datetime.now(_dt.timezone.utc)
    load = "n/a" if _LOAD_AT_START is None else " ".join(f"{v:.2f}" for v in _LOAD_AT_START)
    return "\n".join(
        [
            f"- Commit: {commit_stamp()}",
            f"- Machine: {machine_stamp()}",
            f"- Software: {software_stamp(modules)}",
            f"- Ran: {_utc(_STARTED)} to {ended.strftime('%H:%M')} UTC "
            f"({(ended - _STARTED).total_seconds():.0f} s), load average at start {load}",
            f"- Command: `{command or command_line()}`",
        ]
    )


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def results_path() -> Path:
    """benches/RESULTS.md, or the file named by BENCH_RESULTS_FILE."""
    override = os.environ.get("BENCH_RESULTS_FILE", "").strip()
    return Path(override) if override else RESULTS


def replace_block(text: str, name: str, block: str) -> str:
    """`text` with the block `name` replaced by `block` (appended if there is none)."""
    if not re.fullmatch(r"[\w.-]+", name):
        raise ValueError(f"section name {name!r}: use letters, digits, '_', '.', '-'")
    begin, end = f"<!-- section: {name} -->", f"<!-- end: {name} -->"
    pattern = re.compile(r"^([ \t]*)" + re.escape(begin) + r".*?" + re.escape(end), re.S | re.M)

    def whole(indent: str) -> str:
        # A block inside a list item keeps the item's indentation on every line.
        lines = [begin, *block.strip().splitlines(), end]
        return "\n".join(indent + line if line else line for line in lines)

    if pattern.search(text):
        return pattern.sub(lambda m: whole(m.group(1)), text, count=1)
    return text.rstrip("\n") + "\n\n" + whole("") + "\n"


def _write_atomic(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


def write_section(
    name: str,
    body_markdown: str,
    command: str | None = None,
    *,
    title: str | None = None,
    modules: Iterable[str] = (),
    path: Path | None = None,
) -> Path:
    """Replace section `name` of RESULTS.md with a heading, the stamp and `body_markdown`.

    `command` defaults to the command line of this process (with the BENCH_* variables set);
    `modules` names extra packages whose versions go into the stamp (numpy always does).
    Returns the file written.
    """
    target = path or results_path()
    heading = f"## {title}\n\n" if title else ""
    block = f"{heading}{stamp(command, modules)}\n\n{body_markdown.strip()}"
    text = target.read_text() if target.exists() else "# Benchmark results\n"
    _write_atomic(target, replace_block(text, name, block))
    print(f"wrote section {name!r} of {target}", file=sys.stderr)
    return target


def write_readme_block(name: str, body_markdown: str, path: Path | None = None) -> Path:
    """Replace the marked block `name` of README.md (it must exist: the README decides where
    its figures go). The block should name the RESULTS.md section its figures come from."""
    override = os.environ.get("BENCH_README_FILE", "").strip()
    if path is None and not override and os.environ.get("BENCH_RESULTS_FILE", "").strip():
        # A trial run (results sent elsewhere) must not rewrite the committed README either.
        print(f"BENCH_RESULTS_FILE is set: README block {name!r} not written", file=sys.stderr)
        return README
    target = path or (Path(override) if override else README)
    text = target.read_text()
    if f"<!-- section: {name} -->" not in text:
        raise KeyError(f"{target} has no block <!-- section: {name} -->")
    _write_atomic(target, replace_block(text, name, body_markdown))
    print(f"wrote block {name!r} of {target}", file=sys.stderr)
    return target


def fenced(text: str) -> str:
    """`text` as a fenced block (for a script's printed output)."""
    return f"```\n{text.rstrip()}\n```"
