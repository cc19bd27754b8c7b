"""A tree handed to a join answers only for the columns it was built from.

``box_join``, ``box_join_chunks`` and the accessor's ``join`` take a ``tree`` to reuse; one
built from other columns, another frame or other dtypes would answer for the wrong points.
The reference for the right answer is the join that builds its own tree (``tree=None``).
"""

from __future__ import annotations

import numpy as np
import pytest

from _optional import require

pd = require("pandas")

import boxwood  # noqa: E402
from boxwood import _fingerprint  # noqa: E402


def _frames(n: int = 500):
    rng = np.random.default_rng(31)
    trips = pd.DataFrame(
        {
            "start": rng.integers(0, 100, n).astype(np.float64),
            "minutes": rng.integers(0, 60, n),
            "end": rng.integers(0, 100, n).astype(np.float64),
            "idle": rng.integers(0, 60, n),
        }
    )
    zones = pd.DataFrame(
        {"x_lo": [0, 20, 50], "x_hi": [30, 60, 99], "y_lo": [0, 10, 30], "y_hi": [20, 40, 59]}
    )
    return trips, zones


def test_a_tree_from_other_columns_of_the_same_frame_is_refused():
    trips, zones = _frames()
    tree = boxwood.RangeTree.from_frame(trips, "end", "idle")
    with pytest.raises(ValueError, match=r"built from columns x='end', y='idle', not x='start'"):
        boxwood.box_join(trips, zones, x="start", y="minutes", tree=tree)
    with pytest.raises(ValueError, match=r"built from columns x='end'"):
        boxwood.box_join_chunks(trips, zones, x="start", y="minutes", tree=tree, max_rows=10)
    with pytest.raises(ValueError, match=r"built from columns x='end'"):
        zones.boxwood.join(trips, x="start", y="minutes", tree=tree)


def test_a_tree_from_another_frame_of_as_many_rows_is_refused():
    trips, zones = _frames()
    other = trips.sample(frac=1.0, random_state=3).reset_index(drop=True)  # same rows, moved
    tree = boxwood.RangeTree.from_frame(other, "start", "minutes")
    with pytest.raises(ValueError, match="sampled rows differ"):
        boxwood.box_join(trips, zones, x="start", y="minutes", tree=tree)


def test_a_tree_from_columns_of_other_dtypes_is_refused():
    trips, zones = _frames()
    tree = boxwood.RangeTree.from_frame(trips.astype({"minutes": "int32"}), "start", "minutes")
    with pytest.raises(ValueError, match="dtypes float64, int32"):
        boxwood.box_join(trips, zones, x="start", y="minutes", tree=tree)


def test_the_right_tree_is_taken_and_answers_as_a_fresh_one():
    trips, zones = _frames()
    tree = boxwood.RangeTree.from_frame(trips, "start", "minutes")
    expected = boxwood.box_join(trips, zones, x="start", y="minutes")
    got = boxwood.box_join(trips, zones, x="start", y="minutes", tree=tree)
    pd.testing.assert_frame_equal(got, expected)
    assert len(expected) > 0
    chunks = boxwood.box_join_chunks(trips, zones, x="start", y="minutes", tree=tree, max_rows=600)
    pd.testing.assert_frame_equal(pd.concat(list(chunks)), expected)


def test_the_columns_survive_an_index_file_and_a_pickle(tmp_path):
    import pickle

    trips, zones = _frames()
    tree = boxwood.RangeTree.from_frame(trips, "end", "idle")
    path = tmp_path / "trips.boxwood"
    tree.save(path)
    for again in (boxwood.load(path), pickle.loads(pickle.dumps(tree))):
        with pytest.raises(ValueError, match=r"built from columns x='end', y='idle'"):
            boxwood.box_join(trips, zones, x="start", y="minutes", tree=again)
        joined = boxwood.box_join(trips, zones, x="end", y="idle", tree=again)
        pd.testing.assert_frame_equal(joined, boxwood.box_join(trips, zones, x="end", y="idle"))


def test_the_fingerprint_reads_a_fixed_sample_of_rows():
    at = _fingerprint.sample_positions(10**9)
    assert at.size == _fingerprint.SAMPLE_ROWS and at[0] == 0 and at[-1] == 10**9 - 1
    assert _fingerprint.sample_positions(3).tolist() == [0, 1, 2]
    assert _fingerprint.sample_positions(0).size == 0


def test_the_module_examples_run():
    import doctest

    result = doctest.testmod(_fingerprint)
    assert result.attempted > 0 and result.failed == 0
