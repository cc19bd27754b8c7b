"""Heatmaps of grid counts as PNG files, through matplotlib (the ``plot`` extra).

>>> import os, tempfile, numpy as np
>>> from boxwood.cli._plot import write_heatmap
>>> path = os.path.join(tempfile.mkdtemp(), "grid.png")
>>> counts = np.array([[1, 2], [3, 4]])
>>> write_heatmap(path, counts, np.array([0.0, 1.0, 2.0]), np.array([0, 10, 20]),
...               title="four cells", x_label="x", y_label="y")
>>> open(path, "rb").read(8) == b"\\x89PNG\\r\\n\\x1a\\n"
True

Drawing uses matplotlib's Agg canvas directly, so no display and no global backend switch are
needed. ``counts[i, j]`` is the cell of x bin ``i`` and y bin ``j``, as ``numpy.histogram2d``
returns it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ._exits import extra_missing

#: Duration axes are drawn in one of these units, the largest that keeps the span above 2.
_DURATION_UNITS = (("d", 86_400), ("h", 3_600), ("min", 60), ("s", 1))


def write_heatmap(
    path: str,
    counts: np.ndarray,
    x_edges: np.ndarray,
    y_edges: np.ndarray,
    *,
    title: str,
    x_label: str,
    y_label: str,
    value_label: str = "points per cell",
    date_format: str | None = None,
) -> None:
    """Draw ``counts`` over the cells the edges bound and save the figure as a PNG.

    ``date_format`` (strftime) labels a time x axis, e.g. ``"%a %d %b"``; by default
    matplotlib's concise date labels.
    """
    try:
        from matplotlib import dates
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise extra_missing("matplotlib", "plot", "drawing a heatmap") from None
    xs, x_label = _plottable(np.asarray(x_edges), x_label)
    ys, y_label = _plottable(np.asarray(y_edges), y_label)
    figure = Figure(figsize=(10, 5.5), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.add_subplot()
    # pcolormesh takes values as (rows = y, columns = x): the transpose of histogram2d's layout.
    mesh = axes.pcolormesh(xs, ys, np.asarray(counts).T, cmap="viridis", shading="flat")
    figure.colorbar(mesh, ax=axes, label=value_label)
    axes.set_title(title)
    axes.set_xlabel(x_label)
    axes.set_ylabel(y_label)
    if np.asarray(x_edges).dtype.kind == "M":
        locator = dates.AutoDateLocator()
        axes.xaxis.set_major_locator(locator)
        if date_format is None:
            axes.xaxis.set_major_formatter(dates.ConciseDateFormatter(locator))
        else:
            axes.xaxis.set_major_formatter(dates.DateFormatter(date_format))
    figure.savefig(path, dpi=110)


def _plottable(edges: np.ndarray, label: str) -> tuple[Any, str]:
    """Edges matplotlib can place: datetimes as they are, durations as floats in a unit."""
    if edges.dtype.kind != "m":
        return edges, label
    seconds = edges / np.timedelta64(1, "s")
    span = float(seconds[-1] - seconds[0]) if seconds.size else 0.0
    for unit, size in _DURATION_UNITS:
        if span >= 2 * size or unit == "s":
            return seconds / size, f"{label} ({unit})"
    raise AssertionError("unreachable: the last unit always matches")
