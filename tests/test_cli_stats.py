"""``boxwood stats`` against numpy over each box of the files (read back with pandas)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from _optional import require
from boxwood import cli


def _files(tmp_path: Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(9)
    n = 500
    calls = pd.DataFrame(
        {
            "minute": rng.integers(0, 240, n),
            "hold": rng.integers(0, 900, n),
            "fee": rng.integers(1, 50, n),
            "desk": rng.choice(np.array(["east", "west"]), n),
        }
    )
    windows = pd.DataFrame(
        {
            "x_lo": [0, 60, 120, 300],
            "x_hi": [59, 119, 239, 400],
            "y_lo": [0, 100, 0, 0],
            "y_hi": [900, 500, 900, 900],
            "desk": ["east", "west", "east", "west"],
        }
    )
    calls.to_csv(tmp_path / "calls.csv", index=False)
    windows.to_csv(tmp_path / "windows.csv", index=False)
    return calls, windows


@pytest.mark.parametrize("keyed", [False, True])
def test_stats_is_numpy_over_each_box(
    tmp_path: Path, capsys: pytest.CaptureFixture, keyed: bool
) -> None:
    require("pyarrow")
    calls, windows = _files(tmp_path)
    out = tmp_path / "spread.parquet"
    argv = [
        "stats",
        str(tmp_path / "calls.csv"),
        str(tmp_path / "windows.csv"),
        "--x",
        "minute",
        "--y",
        "hold",
        "--weights",
        "fee",
        "--quantiles",
        "0.5,0.9",
        "-o",
        str(out),
        "-q",
    ]
    if keyed:
        argv += ["--by", "desk"]
    assert cli.main(argv) == 0
    got = pd.read_parquet(out)
    assert list(got.columns) == [
        *windows.columns,
        "count",
        "sum",
        "mean",
        "min",
        "max",
        "q0.5",
        "q0.9",
    ]
    for i, box in windows.iterrows():
        mask = calls.minute.between(box.x_lo, box.x_hi) & calls.hold.between(box.y_lo, box.y_hi)
        if keyed:
            mask &= calls.desk == box.desk
        inside = calls[mask]
        row = got.iloc[i]
        assert row["count"] == len(inside)
        if inside.empty:
            assert row[["min", "max", "q0.5", "q0.9"]].isna().all()
            continue
        # numpy over the box's rows (outside reference).
        assert row["sum"] == inside.fee.sum() and row["mean"] == pytest.approx(inside.fee.mean())
        assert (row["min"], row["max"]) == (inside.hold.min(), inside.hold.max())
        assert row["q0.5"] == np.quantile(inside.hold, 0.5)
        assert row["q0.9"] == np.quantile(inside.hold, 0.9)


def test_stats_of_x_by_another_method_on_stdout(
    tmp_path: Path, capsys: pytest.CaptureFixture
) -> None:
    calls, windows = _files(tmp_path)
    argv = [
        "stats",
        str(tmp_path / "calls.csv"),
        str(tmp_path / "windows.csv"),
        "--x",
        "minute",
        "--y",
        "hold",
        "--of",
        "x",
        "--quantiles",
        "0.25",
        "--method",
        "lower",
        "-q",
    ]
    assert cli.main(argv) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].endswith('"count","min","max","q0.25"')
    for i, box in windows.iterrows():
        mask = calls.minute.between(box.x_lo, box.x_hi) & calls.hold.between(box.y_lo, box.y_hi)
        want = np.quantile(calls.minute[mask], 0.25, method="lower") if mask.any() else ""
        assert lines[1 + i].rsplit(",", 1)[1] == str(want)


@pytest.mark.parametrize("quantiles", ["0.5,2", "half"])
def test_bad_quantiles_are_a_usage_error(
    tmp_path: Path, capsys: pytest.CaptureFixture, quantiles: str
) -> None:
    _files(tmp_path)
    argv = [
        "stats",
        str(tmp_path / "calls.csv"),
        str(tmp_path / "windows.csv"),
        "--x",
        "minute",
        "--y",
        "hold",
        "--quantiles",
        quantiles,
    ]
    assert cli.main(argv) == 2
    assert "--quantiles" in capsys.readouterr().err
