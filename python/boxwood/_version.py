"""The package's version: the installed distribution's, or in a source checkout used without
installing (``PYTHONPATH=python``, no package metadata) the Cargo workspace's, read from the
checkout's ``Cargo.toml`` (the one source of the version: pyproject.toml takes it from there).

>>> from pathlib import Path
>>> checkout_version(Path("/nonexistent"))
'0+unknown'

Only the standard library is imported, so the version is there before the engine loads.
"""

from __future__ import annotations

import re
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

#: The version of a package with neither metadata nor a checkout around it (PEP 440 local
#: version label, so that it sorts below every release).
UNKNOWN = "0+unknown"
#: The checkout's root, seen from python/boxwood/_version.py.
CHECKOUT = Path(__file__).resolve().parents[2]
_VERSION = re.compile(r'^version\s*=\s*"([^"]+)"\s*(#.*)?$')


def package_version() -> str:
    """The installed distribution's version, else the checkout's (:func:`checkout_version`)."""
    try:
        return version("boxwood")
    except PackageNotFoundError:
        return checkout_version(CHECKOUT)


def checkout_version(root: Path) -> str:
    """The ``[workspace.package]`` version of ``root/Cargo.toml``, or :data:`UNKNOWN`."""
    try:
        text = (root / "Cargo.toml").read_text(encoding="utf-8")
    except OSError:
        return UNKNOWN
    table = None
    for line in text.splitlines():
        if line.startswith("["):  # a table header: the table the lines below belong to
            table = line.split("#", 1)[0].strip()
            continue
        found = _VERSION.match(line.strip())
        if found and table == "[workspace.package]":
            return found.group(1)
    return UNKNOWN
