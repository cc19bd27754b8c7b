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
from _optional import require

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


# ------------------------------------------------------------------------- default layout


def test_compact_is_the_default_layout_of_every_build():
    x, y = _points(500)
    frame = pd.DataFrame({"x": x, "y": y})
    assert boxwood.RangeTree(x, y).layout == "compact"
    assert boxwood.RangeTree.from_frame(frame, "x", "y").layout == "compact"
    assert frame.boxwood.tree("x", "y").layout == "compact"
    parameter = inspect.signature(boxwood.estimate_bytes).parameters["layout"]
    assert parameter.default == "compact"  # the estimate describes the default build
    # The default tree holds what the compact one holds (no row ids on the levels).
    assert boxwood.RangeTree(x, y).nbytes_by_part["level rows"] == 0
    assert boxwood.RangeTree(x, y, layout="fast").nbytes_by_part["level rows"] > 0


def test_the_class_help_says_when_the_fast_layout_is_worth_its_memory():
    doc = boxwood.RangeTree.__doc__ or ""
    assert '``"compact"`` (the default)' in doc
    assert "reports of many rows" in doc and "benches/bench_layout.py" in doc


# ------------------------------------------------------------------------- memory check


@pytest.fixture
def no_room(monkeypatch):
    """A machine with 10 kB free: every build here is refused unless told otherwise."""
    from boxwood import _memory

    monkeypatch.setattr(_memory, "available_bytes", lambda: 10_000)


def test_a_refused_build_says_how_to_build_anyway(no_room):
    x, y = _points(20_000)
    with pytest.raises(boxwood.InsufficientMemoryError, match=r"check_memory=False") as info:
        boxwood.RangeTree(x, y)
    message = str(info.value)
    assert "upper bound" in message
    # 10,000 bytes free reads as such, not rounded away to "0.0 GiB".
    assert "9.8 KiB is available" in message and "0.0" not in message


def test_check_memory_false_builds_past_the_estimate_everywhere(no_room):
    x, y = _points(20_000)
    frame = pd.DataFrame({"x": x, "y": y})
    boxes = pd.DataFrame({"x_lo": [0.1], "x_hi": [0.3], "y_lo": [0.2], "y_hi": [0.6]})
    # Reference: a numpy mask.
    want = int(np.count_nonzero((x >= 0.1) & (x <= 0.3) & (y >= 0.2) & (y <= 0.6)))
    builds = {
        "RangeTree": lambda **kw: boxwood.RangeTree(x, y, **kw),
        "from_frame": lambda **kw: boxwood.RangeTree.from_frame(frame, "x", "y", **kw),
        "accessor": lambda **kw: frame.boxwood.tree("x", "y", **kw),
    }
    for name, build in builds.items():
        with pytest.raises(boxwood.InsufficientMemoryError):
            build()
        tree = build(check_memory=False)
        assert tree.count(0.1, 0.3, 0.2, 0.6) == want, name
    with pytest.raises(boxwood.InsufficientMemoryError):
        boxwood.box_join(frame, boxes, x="x", y="y")
    assert len(boxwood.box_join(frame, boxes, x="x", y="y", check_memory=False)) == want
    chunks = boxwood.box_join_chunks(frame, boxes, x="x", y="y", check_memory=False)
    assert sum(len(c) for c in chunks) == want


def test_a_join_that_builds_its_own_tree_builds_it_fast(monkeypatch):
    # Joins are reports of many rows: benches/bench_layout.py measured them about three
    # times as fast on a fast tree, which a join builds for itself and then drops.
    from boxwood import _join

    layouts = []
    for side in (_join.PandasJoinSide, _join.ArrowJoinSide):  # every frame kind's build
        real = side.parts

        def recording(*args, real=real, **kwargs):
            layouts.append(kwargs["layout"])
            return real(*args, **kwargs)

        monkeypatch.setattr(side, "parts", staticmethod(recording))
    x, y = _points(300)
    frame = pd.DataFrame({"x": x, "y": y})
    boxes = pd.DataFrame({"x_lo": [0.0], "x_hi": [0.5], "y_lo": [0.0], "y_hi": [0.5]})
    joined = boxwood.box_join(frame, boxes, x="x", y="y")
    list(boxwood.box_join_chunks(frame, boxes, x="x", y="y"))
    pa = require("pyarrow")
    boxwood.box_join(pa.table(frame), pa.table(boxes), x="x", y="y")
    assert layouts == ["fast", "fast", "fast"]
    # Reference: a numpy mask.
    assert len(joined) == int(np.count_nonzero((x <= 0.5) & (y <= 0.5)))
