"""What users read: messages that say what is wrong, counts in the singular for one, and a
demo that names no real currency."""

from __future__ import annotations

import numpy as np
import pytest

from _optional import require

pd = require("pandas")

import boxwood  # noqa: E402


@pytest.mark.parametrize("bound", [5, 2.5, np.int64(7), np.float64(1e18)])
@pytest.mark.parametrize("tz", [None, "Europe/Berlin"])
def test_a_number_bound_on_a_time_axis_is_refused_as_a_number(bound, tz):
    x = pd.Series(pd.date_range("2025-01-01", periods=4, freq="h", tz=tz))
    tree = boxwood.RangeTree(x, np.arange(4.0))
    with pytest.raises(TypeError) as caught:
        tree.count(bound, x.iloc[-1], 0, 9)
    message = str(caught.value)
    assert "x_lo must be datetime64 values" in message and type(bound).__name__ in message
    assert "naive" not in message


def test_infinite_bounds_still_leave_a_time_axis_open():
    x = pd.Series(pd.date_range("2025-01-01", periods=4, freq="h", tz="Europe/Berlin"))
    tree = boxwood.RangeTree(x, np.arange(4.0))
    assert tree.count(-np.inf, np.inf, 0, 9) == 4 == int(x.notna().sum())


def test_the_demo_names_no_real_currency(capsys):
    from boxwood import demo

    demo.main(["--rows", "3000", "--boxes", "200", "--no-plot"])
    out = capsys.readouterr().out
    assert "Larkhaven dollars" in out
    assert "$" not in out
