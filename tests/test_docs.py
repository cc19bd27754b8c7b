"""The examples in the docstrings run and print what they say."""

from __future__ import annotations

import doctest
from pathlib import Path

import pytest

import boxwood
import boxwood._growing._input
import boxwood._growing._tree
import boxwood._growing._verify
import boxwood._memory
import boxwood._parts
import boxwood._persist
import boxwood._sets
import boxwood._stats
import boxwood._tree
import boxwood._version
from _optional import require


# The from_frame example drops a row on purpose; its warning is part of the example.
@pytest.mark.filterwarnings("ignore::boxwood.MissingValuesDropped")
def test_docstring_examples():
    modules = (boxwood, boxwood._tree, boxwood._parts, boxwood._persist, boxwood._memory)
    modules = (*modules, boxwood._stats, boxwood._growing, boxwood._growing._tree)
    modules = (*modules, boxwood._growing._input, boxwood._growing._verify, boxwood._sets)
    for module in (*modules, boxwood._version):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.attempted > 0, module.__name__
        assert result.failed == 0, module.__name__


def test_arrow_module_examples():
    require("pyarrow")
    import boxwood._arrow
    import boxwood._arrow_frames
    import boxwood._frame_kinds

    for module in (boxwood._arrow, boxwood._arrow_frames, boxwood._frame_kinds):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.attempted > 0 and result.failed == 0, module.__name__


def test_readme_arrow_example_runs_as_written(capsys):
    import numpy as np

    require("pyarrow")
    namespace: dict = {}
    code = _readme_block("## Arrow", "## polars")
    exec(compile(code, "README.md", "exec"), namespace)
    parcels, asks, waiting = namespace["parcels"], namespace["asks"], namespace["waiting"]
    x, y = parcels["dropped"].to_numpy(), parcels["waited"].to_numpy()
    bank = np.asarray(parcels["bank"].cast("string").to_pylist())
    # Reference: NumPy boolean masks over the same parcels, each box's bank compared too.
    want = _counts_by_key(x, y, bank, asks.to_pylist(), "bank")
    assert asks["parcels"].to_pylist() == want and waiting.num_rows == sum(want)
    printed = capsys.readouterr().out.strip()
    names = ["dropped", "waited", "bank", "x_lo", "x_hi", "y_lo", "y_hi", "parcels"]
    assert printed == f"{want} {sum(want)} {names}"


def _counts_by_key(x, y, keys, boxes, key: str) -> list[int]:
    """NumPy reference: each box's points (edges closed) of the box's own key."""
    return [
        int(
            (
                (b["x_lo"] <= x)
                & (x <= b["x_hi"])
                & (b["y_lo"] <= y)
                & (y <= b["y_hi"])
                & (keys == b[key])
            ).sum()
        )
        for b in boxes
    ]


def test_polars_module_examples():
    require("polars")
    import boxwood._polars
    import boxwood._polars_frames

    for module in (boxwood._polars, boxwood._polars_frames):
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.attempted > 0 and result.failed == 0, module.__name__


def test_readme_polars_example_runs_as_written(capsys):
    import numpy as np

    require("polars")
    namespace: dict = {}
    code = _readme_block("## polars", "## Keys: boxes per sensor")
    exec(compile(code, "README.md", "exec"), namespace)
    arrivals, sailings = namespace["arrivals"], namespace["sailings"]
    boarded = namespace["boarded"]
    x, y = arrivals["reached"].to_numpy(), arrivals["queued"].to_numpy()
    lane = np.asarray(arrivals["lane"].cast(str).to_list())
    # Reference: NumPy boolean masks over the same arrivals, each box's lane compared too.
    want = _counts_by_key(x, y, lane, sailings.to_dicts(), "lane")
    assert sailings["count"].to_list() == want and boarded.height == sum(want)
    printed = capsys.readouterr().out.strip()
    names = ["reached", "queued", "lane", "x_lo", "x_hi", "y_lo", "y_hi", "count"]
    assert printed == f"{want} {sum(want)} {names} True"


def _readme_block(heading: str, end: str) -> str:
    import re
    from pathlib import Path

    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    start = text.index(heading)
    section = text[start : text.index(end, start)]
    return "\n".join(re.findall(r"```python\n(.*?)```", section, flags=re.S))


def test_readme_keyed_dask_example_runs_as_written(capsys):
    require("distributed", reason="Dask distributed is not installed (boxwood[dask])")
    namespace: dict = {"__name__": "readme"}
    code = _readme_block("### Keys on a sharded tree", "## How it works")
    exec(compile(code, "README.md", "exec"), namespace)
    crossings, asks, counts = namespace["crossings"], namespace["asks"], namespace["counts"]
    busy = namespace["busy"]
    # Reference: pandas boolean masks, each box's vessel compared too.
    want = [
        int(
            (
                (crossings.vessel == a.vessel)
                & crossings.minute.between(a["from"], a["until"])
                & (crossings.aboard >= a["over"])
            ).sum()
        )
        for _, a in asks.iterrows()
    ]
    assert counts.tolist() == want and want[-1] == 0 and min(want[:-1]) > 0
    assert len(busy) == sum(want) and list(busy.columns).count("vessel") == 1
    assert busy["vessel"].astype(str).tolist() == [
        v for v, k in zip(asks.vessel, want) for _ in range(k)
    ]
    printed = capsys.readouterr().out.strip().splitlines()
    assert printed == [
        "['Heron', 'Kestrel', 'Osprey', 'Tern']",
        "['vessel', 'minute', 'aboard', 'from', 'until', 'over']",
        "True",
    ]


def test_readme_growing_example_runs_as_written() -> None:
    import numpy as np

    code = _readme_block("## Data that grows", "\n## ")
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    ferry = namespace["ferry"]
    # What the comments say, against plain masks over the rows that are still live.
    minute = np.array([3, 9, 14, 20, 181, 185, 190])
    fare = np.array([250, 400, 250, 900, 400, 400, 250])
    live = (minute >= 60) & (np.arange(7) != 1)
    assert namespace["noon"].tolist() == [4, 5, 6]
    mask = live & (fare >= 300)
    assert ferry.count(0, 200, 300, 1000) == mask.sum()
    assert ferry.sum(0, 200, 300, 1000) == fare[mask].sum()
    assert ferry.report(0, 200, 0, 1000)[1].tolist() == np.flatnonzero(live).tolist()
    assert namespace["reader"].count(0, 10, 0, 1000) == 2
    frozen, shipped = namespace["frozen"], namespace["shipped"]
    assert isinstance(frozen, boxwood.GrowingSnapshot) and isinstance(shipped, type(frozen))
    assert frozen.count(0, 200, 0, 1000) == live.sum() == 3
    assert shipped.count(0, 10, 0, 1000) == 2 and shipped.folder is None


def _shell_walkthrough(heading: str, end: str, tmp_path, monkeypatch, capsys) -> tuple[str, str]:
    """A README section's shell block run line by line in `tmp_path` (its files written,
    each boxwood line through the entry point, which must succeed): what it printed, and
    the text block shown below it."""
    import re
    import shlex

    from boxwood import cli

    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    start = text.index(heading)
    section = text[start : text.index(end, start)]
    (shell,) = re.findall(r"```sh\n(.*?)```", section, flags=re.S)
    (shown,) = re.findall(r"```text\n(.*?)```", section, flags=re.S)
    monkeypatch.chdir(tmp_path)
    for name, body in re.findall(r"cat > (\S+) <<'EOF'\n(.*?)\nEOF\n", shell, flags=re.S):
        (tmp_path / name).write_text(body + "\n", encoding="utf-8")
    commands = [line for line in shell.splitlines() if line.startswith("boxwood ")]
    capsys.readouterr()
    for line in commands:
        assert cli.main(shlex.split(line)[1:]) == 0, line
    return capsys.readouterr().out, shown


def test_readme_growing_command_line_example_runs_as_written(tmp_path, monkeypatch, capsys):
    """The walkthrough prints the text block below it; its sums and counts checked against
    the csv module's reading of the files and plain comparisons (outside the project)."""
    import csv
    import datetime as dt

    require("pyarrow")
    printed, shown = _shell_walkthrough(
        "### Growing data on the command line", "## Command line", tmp_path, monkeypatch, capsys
    )
    assert printed == shown
    rows = []
    for name in ("morning.csv", "midday.csv"):
        with open(tmp_path / name, newline="") as f:
            rows += list(csv.DictReader(f))
    with open(tmp_path / "windows.csv", newline="") as f:
        windows = list(csv.DictReader(f))

    def inside(r, w):
        when = dt.datetime.fromisoformat(r["boarded"])
        lo, hi = (dt.datetime.fromisoformat(w[k]) for k in ("x_lo", "x_hi"))
        return lo <= when <= hi and float(w["y_lo"]) <= float(r["km"]) <= float(w["y_hi"])

    cut = dt.datetime(2026, 3, 2, 7, 0)
    kept = [r for r in rows if dt.datetime.fromisoformat(r["boarded"]) >= cut]
    sums = [sum(int(r["pence"]) for r in rows if inside(r, w)) for w in windows]
    counts = [sum(inside(r, w) for r in kept) for w in windows]
    lines = shown.splitlines()
    assert [int(line.rsplit(",", 1)[1]) for line in lines[3:5]] == sums
    assert [int(line.rsplit(",", 1)[1]) for line in lines[7:9]] == counts
    assert lines[5] == f"expired {len(rows) - len(kept)} rows; {len(kept)} live rows remain"


def test_readme_keyed_command_line_example_runs_as_written(tmp_path, monkeypatch, capsys):
    """The shell block run line by line (its files written, each boxwood line through the
    entry point) prints the text block below it; the counts checked against the csv
    module's reading of the files and plain comparisons (outside the project)."""
    import csv

    require("pyarrow")
    printed, shown = _shell_walkthrough(
        "### Keys on the command line",
        "### Parquet datasets on the command line",
        tmp_path,
        monkeypatch,
        capsys,
    )
    assert printed == shown
    with open(tmp_path / "readings.csv", newline="") as f:
        readings = list(csv.DictReader(f))
    with open(tmp_path / "alerts.csv", newline="") as f:
        alerts = list(csv.DictReader(f))
    want = [
        sum(
            r["house"] == a["house"]
            and r["bench"] == a["bench"]
            and float(a["x_lo"]) <= float(r["minute"]) <= float(a["x_hi"])
            and float(a["y_lo"]) <= float(r["celsius"]) <= float(a["y_hi"])
            for r in readings
        )
        for a in alerts
    ]
    shown_counts = [int(line.rsplit(",", 1)[1]) for line in shown.splitlines()[1:5]]
    assert shown_counts == want and want[-1] == 0


def test_readme_dataset_command_line_example_runs_as_written(tmp_path, monkeypatch, capsys):
    """The Python lines write the dataset, the shell block's lines run as written and print the
    text block below it; the counts checked against plain comparisons over the rows as the
    Python lines give them (outside the project)."""
    import csv
    import re

    require("pyarrow")
    text = (Path(__file__).parent.parent / "README.md").read_text(encoding="utf-8")
    start = text.index("### Parquet datasets on the command line")
    section = text[start : text.index("## Many machines: Dask", start)]
    (writer,) = re.findall(r"python - <<'EOF'\n(.*?)\nEOF\n", section, flags=re.S)
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile(writer, "README.md", "exec"), namespace)
    printed, shown = _shell_walkthrough(
        "### Parquet datasets on the command line",
        "## Many machines: Dask",
        tmp_path,
        monkeypatch,
        capsys,
    )
    assert printed == shown
    rows = [
        (int(path.split("day=")[1].split("/")[0]), m, level, gate)
        for path, columns in namespace["parts"].items()
        for m, level, gate in zip(*columns)
    ]
    with open(tmp_path / "asks.csv", newline="") as f:
        asks = list(csv.DictReader(f))

    def inside(r, a):
        return float(a["x_lo"]) <= r[1] <= float(a["x_hi"]) and (
            float(a["y_lo"]) <= r[2] <= float(a["y_hi"])
        )

    by_gate = [sum(inside(r, a) and r[3] == a["gate"] for r in rows) for a in asks]
    by_day = [
        sum(inside(r, a) and r[3] == a["gate"] and r[0] == int(a["day"]) for r in rows)
        for a in asks
    ]
    lines = shown.splitlines()
    assert [int(line.rsplit(",", 1)[1]) for line in lines[1:4]] == by_gate
    assert [int(line.rsplit(",", 1)[1]) for line in lines[5:8]] == by_day


def test_readme_spread_example_runs_as_written() -> None:
    """Each `calls.` line of the block gives what its comment (or the comment lines under it)
    shows, and that is numpy's answer over a mask of the same calls (outside the project)."""
    import re

    import numpy as np

    code = _readme_block("## How a box is spread", "\n## ")
    namespace: dict = {}
    lines = code.splitlines()
    exec(compile("\n".join(lines), "README.md", "exec"), namespace)
    shown = {}
    for i, line in enumerate(lines):
        if line.startswith("calls."):
            call, _, comment = line.partition("  #")
            follow = []
            for later in lines[i + 1 :]:
                if not later.startswith("# "):
                    break
                follow.append(later[2:])
            shown[call.strip()] = (eval(call, namespace), comment.strip(), follow)
    minute, hold = namespace["minute"], namespace["hold"]
    windows = [(0, 29), (30, 59), (60, 89)]
    inside = [hold[(minute >= a) & (minute <= b)] for a, b in windows]
    got, _, follow = shown["calls.quantile(start, end, 0, np.inf, [0.5, 0.95])"]
    want = np.array([np.quantile(v, [0.5, 0.95]) for v in inside])  # numpy.quantile
    assert np.array_equal(got, want) and repr(got) == "\n".join(follow)
    got, comment, _ = shown["calls.max(start, end, 0, np.inf)"]
    assert got.tolist() == [v.max() for v in inside] and comment.startswith(str(got.tolist()))
    got, comment, _ = shown['calls.quantile(30, 59, 0, np.inf, 0.5, method="lower")']
    assert got == np.quantile(inside[1], 0.5, method="lower") and comment.startswith(repr(got))
    got, _, follow = shown["calls.extreme_rows(30, 59, 0, np.inf, 2)"]
    window = np.flatnonzero((minute >= 30) & (minute <= 59))
    longest = window[np.argsort(-hold[window], kind="stable")[:2]]
    assert got[1].tolist() == sorted(longest.tolist()) and repr(got) == follow[0]
    got, comment, _ = shown['calls.min(30, 59, 60, np.inf, of="x")']
    assert got == minute[(minute >= 30) & (minute <= 59) & (hold >= 60)].min()
    assert comment.startswith(repr(got))
    counts, comment, _ = shown["calls.count(start, end, 0, np.inf)"]
    assert counts.tolist() == [v.size for v in inside] and comment == repr(counts)
    assert re.search(r"rows 6 and 9", code)


def test_readme_keys_example_runs_as_written() -> None:
    """Each `tree.` line of the keys section shows in its comment what it gives, and that is
    what NumPy masks over the same readings give (outside the project); the pandas block's
    counts and join are checked against pandas' own cross join filtered by the boxes."""
    import numpy as np

    pd = require("pandas")
    code = _readme_block("## Keys: boxes per sensor", "\n## ")
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)
    shown = {}
    for line in code.splitlines():
        if line.startswith("tree."):
            call, _, comment = line.partition("#")
            shown[call.strip()] = (eval(call, namespace), comment.strip())
    sensor, minute, celsius = namespace["sensor"], namespace["minute"], namespace["celsius"]

    def mask(key, lo=0, hi=45, c_lo=22, c_hi=30):
        return (
            (sensor == key)
            & (minute >= lo)
            & (minute <= hi)
            & (celsius >= c_lo)
            & (celsius <= c_hi)
        )

    keys, comment = shown["tree.keys"]
    assert keys.tolist() == sorted(set(sensor)) and comment == repr(keys)
    per_key, comment = shown["tree.count_by_key()"]
    assert per_key == {k: int((sensor == k).sum()) for k in keys} and comment == repr(per_key)
    one, comment = shown['tree.count(0, 45, 22, 30, by="bench-1")']
    assert one == int(mask("bench-1").sum()) and comment.startswith(f"{one}:")
    assert minute[mask("bench-1")].tolist() == [12, 44]  # the minutes the comment names
    three, comment = shown['tree.count(0, 45, 22, 30, by=["bench-1", "bench-2", "bench-9"])']
    assert three.tolist() == [int(mask(k).sum()) for k in ("bench-1", "bench-2", "bench-9")]
    assert comment == repr(three)
    offsets, rows = shown['tree.report(0, 45, 22, 30, by="bench-2")'][0]
    assert rows.tolist() == np.flatnonzero(mask("bench-2")).tolist() == [4]
    assert offsets.tolist() == [0, 1]
    shape, comment = shown["tree.grid([0, 30, 60], [15, 22, 30], by=tree.keys).shape"]
    assert shape == (3, 2, 2) and comment.startswith(repr(shape))

    readings, alerts = namespace["readings"], namespace["alerts"]
    # pandas reference: every (reading, alert) pair of the same sensor, filtered by the box.
    cross = readings.merge(alerts, left_on="sensor", right_on="bench")
    inside = cross[
        (cross.minute >= cross["from"])
        & (cross.minute <= cross.until)
        & (cross.celsius >= cross.above)
    ]
    want = inside.groupby("bench").size().reindex(alerts.bench, fill_value=0).tolist()
    counts = namespace["by_sensor"].count_boxes(alerts, **namespace["window"], by="bench")
    assert counts.tolist() == want == [1, 1]  # the block's comment: 1 and 1
    hot = namespace["hot"]
    assert len(hot) == len(inside) == 2 and "bench" not in hot.columns
    assert sorted(hot["minute"].tolist()) == sorted(inside["minute"].tolist())
    assert isinstance(hot, pd.DataFrame)
