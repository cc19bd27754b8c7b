"""The optional-dependency helper: a skip locally, a failure under BOXWOOD_REQUIRE_ALL=1."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

import _optional

ROOT = Path(__file__).resolve().parent.parent
_ABSENT = "boxwood_tests_no_such_module"


def test_a_missing_module_is_a_skip_by_default(monkeypatch):
    monkeypatch.delenv(_optional.REQUIRE_ALL, raising=False)
    with pytest.raises(pytest.skip.Exception, match=_ABSENT):
        _optional.require(_ABSENT)


@pytest.mark.parametrize("value", ["1", "yes"])
def test_a_missing_module_fails_the_run_when_everything_is_required(monkeypatch, value):
    monkeypatch.setenv(_optional.REQUIRE_ALL, value)
    with pytest.raises(pytest.fail.Exception, match=f"{_ABSENT}.*BOXWOOD_REQUIRE_ALL=1"):
        _optional.require(_ABSENT)


def test_a_present_module_is_returned_whatever_the_setting(monkeypatch):
    monkeypatch.setenv(_optional.REQUIRE_ALL, "1")
    assert _optional.require("json").dumps([1]) == "[1]"


def test_ci_requires_every_optional_dependency():
    assert re.search(r"^export BOXWOOD_REQUIRE_ALL=1$", (ROOT / ".ci/run").read_text(), re.M)


def test_no_test_or_benchmark_skips_a_missing_module_silently():
    # pytest.importorskip skips whatever the setting: every optional import goes through
    # _optional.require instead.
    offenders = [
        str(path.relative_to(ROOT))
        for folder in ("tests", "benches")
        for path in (ROOT / folder).glob("*.py")
        if "importorskip(" in path.read_text(encoding="utf-8") and path.name != "test_optional.py"
    ]
    assert offenders == []
