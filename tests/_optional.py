"""Optional dependencies of the tests: skipped locally when missing, a failure under CI.

``require("pyarrow.parquet")`` returns the module. When it cannot be imported the test (or,
at module level, the whole module) is skipped with the reason, unless ``BOXWOOD_REQUIRE_ALL=1``
is set (``.ci/run`` sets it, since the test extra installs every optional dependency): then
the run fails, so CI can never pass by skipping what it was meant to run.
"""

from __future__ import annotations

import importlib
import os
from types import ModuleType

import pytest

#: The environment variable that turns a missing optional dependency into a failure.
REQUIRE_ALL = "BOXWOOD_REQUIRE_ALL"


def required_all() -> bool:
    return os.environ.get(REQUIRE_ALL, "") not in ("", "0")


def missing(reason: str) -> None:
    """Skip (or, under ``BOXWOOD_REQUIRE_ALL=1``, fail) for a missing optional part."""
    if required_all():
        pytest.fail(f"{reason}, and {REQUIRE_ALL}=1 asks for every optional part", pytrace=False)
    pytest.skip(reason, allow_module_level=True)


def require(module: str, reason: str | None = None) -> ModuleType:
    """The module, or a skip (a failure under ``BOXWOOD_REQUIRE_ALL=1``) if it cannot be
    imported."""
    try:
        return importlib.import_module(module)
    except ImportError as exc:
        missing(f"{reason or f'{module} is not installed'} ({exc})")
        raise  # not reached: missing() always raises
