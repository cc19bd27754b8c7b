"""One convention everywhere: report order, join column order, the default layout, and the
memory check's override.

Reported rows are checked against numpy: ``np.flatnonzero`` of a boolean mask made with
numpy's comparison operators (the outside reference), which lists a box's rows ascending.
The Dask trees' defaults are checked in tests/test_dask.py, beside the cluster they need.
"""

from __future__ import annotations

import inspect

import numpy as np
import pandas as pd
import pytest

import boxwood

LAYOUTS = ("fast", "compact")


def _points(n: int = 4000, seed: int = 11) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    return rng.random(n), rng.random(n)


def _squares(m: int = 60, seed: int = 12) -> tuple[np.ndarray, ...]:
    rng = np.random.default_rng(seed)
    lo_x, lo_y = rng.random(m) * 0.8, rng.random(m) * 0.8
    return lo_x, lo_x + 0.2, lo_y, lo_y + 0.2


def _mask_rows(x, y, box) -> list[np.ndarray]:
    """Reference: numpy masks, one per box; flatnonzero lists each box's rows ascending."""
    x_lo, x_hi, y_lo, y_hi = box
    return [
        np.flatnonzero((x >= a) & (x <= b) & (y >= c) & (y <= d))
        for a, b, c, d in zip(x_lo, x_hi, y_lo, y_hi)
    ]


# ------------------------------------------------------------------------- report order


def test_every_report_call_defaults_to_ordered_rows():
    calls = [
        boxwood.RangeTree.report,
        boxwood.RangeTree.pairs,
        boxwood.RangeTree.report_boxes,
        pd.DataFrame({"x_lo": []}).boxwood.report,
    ]
    for call in calls:
        assert inspect.signature(call).parameters["ordered"].default is True, call


@pytest.mark.parametrize("layout", LAYOUTS)
def test_report_and_pairs_list_rows_ascending_by_default(layout):
    x, y = _points()
    box = _squares()
    tree = boxwood.RangeTree(x, y, layout=layout)
    want = _mask_rows(x, y, box)
    offsets, rows = tree.report(*box)
    got = [rows[offsets[i] : offsets[i + 1]] for i in range(len(want))]
    assert [g.tolist() for g in got] == [w.tolist() for w in want]
    boxes, pair_rows = tree.pairs(*box)
    assert pair_rows.tolist() == np.concatenate(want).tolist()
    assert boxes.tolist() == np.repeat(np.arange(len(want)), [w.size for w in want]).tolist()


def test_unordered_reports_hold_the_same_rows_in_the_trees_own_order():
    x, y = _points()
    box = _squares()
    tree = boxwood.RangeTree(x, y, layout="fast")
    want = _mask_rows(x, y, box)
    offsets, rows = tree.report(*box, ordered=False)
    got = [rows[offsets[i] : offsets[i + 1]] for i in range(len(want))]
    assert [sorted(g.tolist()) for g in got] == [w.tolist() for w in want]
    # Precondition: the tree's own order is not ascending here, so the default's sort is
    # what the test above sees (were it ascending anyway, that test could not fail).
    assert any(not np.all(np.diff(g) > 0) for g in got)


@pytest.mark.parametrize("layout", LAYOUTS)
def test_report_boxes_and_the_accessor_default_to_ordered_rows(layout):
    x, y = _points()
    x_lo, x_hi, y_lo, y_hi = _squares()
    tree = boxwood.RangeTree(x, y, layout=layout)
    boxes = pd.DataFrame(
        {"x_lo": x_lo, "x_hi": x_hi, "y_lo": y_lo, "y_hi": y_hi},
        index=pd.Index([f"b{i}" for i in range(x_lo.size)], name="zone"),
    )
    want = _mask_rows(x, y, (x_lo, x_hi, y_lo, y_hi))
    expected = pd.DataFrame(
        {
            "box": boxes.index.repeat([w.size for w in want]),
            "row": np.concatenate(want).astype(np.int64),
        }
    )
    pd.testing.assert_frame_equal(tree.report_boxes(boxes), expected)
    pd.testing.assert_frame_equal(boxes.boxwood.report(tree), expected)
