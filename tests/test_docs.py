"""The examples in the docstrings run and print what they say."""

from __future__ import annotations

import doctest

import pytest

import boxwood
import boxwood._memory
import boxwood._parts
import boxwood._persist
import boxwood._tree


# The from_frame example drops a row on purpose; its warning is part of the example.
@pytest.mark.filterwarnings("ignore::boxwood.MissingValuesDropped")
def test_docstring_examples():
    for module in (boxwood, boxwood._tree, boxwood._parts, boxwood._persist, boxwood._memory):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.attempted > 0, module.__name__
        assert result.failed == 0, module.__name__
