"""A tour of boxwood on an invented data set: one year of Larkhaven bike-share trips.

Run it with ``python -m boxwood.demo`` or ``boxwood demo`` (``--rows N`` to change the size,
default 3,000,000; ``--out PNG`` for the heatmap, default
``demo_out/larkhaven-week-heatmap.png``).

Larkhaven is a made-up city. Every trip has a start time (``datetime64[ns]`` over 2025, with a
daily and weekly rhythm: commute peaks on weekdays, a broad afternoon hump at weekends, more
riding in summer), a length in minutes (``float64``, lognormal, clipped to [1, 180]) and a fare
in cents (``int64``: a base fee plus a price per started minute). The data comes from numpy's
``default_rng`` with a fixed seed, so every run prints the same answers.

The demo builds one weighted ``RangeTree`` (start time on x, minutes on y, fare as weight),
answers a large batch of one-hour x trip-length boxes with ``count`` and ``sum``, spot-checks a
sample of them against a plain numpy sort-and-scan, answers a few named questions (each a batch
of boxes, one per matching day) next to the same count from a numpy boolean mask, and lists the
rows of the five longest trips in one box with ``report``. Last, it counts one June week's
trips on an hour x trip-length grid, checks the grid against ``numpy.histogram2d`` and draws
it as a heatmap PNG (with matplotlib, the ``plot`` extra; skipped with a note without it).
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

import boxwood

SEED = 20250101
DAYS = 365
HOUR_NS = 3_600 * 10**9
DAY_NS = 24 * HOUR_NS
YEAR_START = np.datetime64("2025-01-01T00:00:00", "ns")
FIRST_WEEKDAY = 2  # 2025-01-01 is a Wednesday (Monday = 0)
WEEKDAY_NAMES = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
BASE_FARE_CENTS = 150
CENTS_PER_MINUTE = 18
SPOT_CHECKS = 1_000


# --------------------------------------------------------------------------------------------
# The invented trips
# --------------------------------------------------------------------------------------------


def _bump(hours: np.ndarray, centre: float, width: float, height: float) -> np.ndarray:
    return height * np.exp(-0.5 * ((hours - centre) / width) ** 2)


def hourly_weights() -> np.ndarray:
    """Relative number of trips in each of the 365 * 24 hours of 2025 (sums to 1)."""
    hours = np.arange(24) + 0.5
    weekday = (
        0.15
        + _bump(hours, 8.0, 1.0, 6.0)  # morning commute
        + _bump(hours, 12.5, 1.5, 1.5)  # lunch
        + _bump(hours, 17.5, 1.3, 5.0)  # evening commute
        + _bump(hours, 21.0, 2.0, 0.8)  # evening out
    )
    weekend = 0.15 + _bump(hours, 14.5, 3.0, 4.0) + _bump(hours, 22.5, 1.5, 0.6)
    days = np.arange(DAYS)
    is_weekend = (days + FIRST_WEEKDAY) % 7 >= 5
    season = 1.0 + 0.45 * np.cos(2.0 * np.pi * (days - 196) / DAYS)  # busiest mid-July
    per_day = np.where(is_weekend[:, None], 0.9 * weekend[None, :], weekday[None, :])
    weights = (season[:, None] * per_day).ravel()
    return weights / weights.sum()


def make_trips(rows: int, seed: int = SEED) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Start times (datetime64[ns]), minutes (float64) and fares in cents (int64)."""
    rng = np.random.default_rng(seed)
    hour_index = rng.choice(DAYS * 24, size=rows, p=hourly_weights())
    offset_ns = hour_index * HOUR_NS + rng.integers(0, HOUR_NS, size=rows)
    start = YEAR_START + offset_ns.astype("timedelta64[ns]")
    weekend = ((hour_index // 24) + FIRST_WEEKDAY) % 7 >= 5
    minutes = rng.lognormal(mean=np.log(11.0), sigma=0.75, size=rows)
    minutes = np.where(weekend, 1.35 * minutes, minutes)  # weekend rides run longer
    minutes = np.clip(minutes, 1.0, 180.0)
    fare = BASE_FARE_CENTS + CENTS_PER_MINUTE * np.ceil(minutes).astype(np.int64)
    return start, minutes, fare


# --------------------------------------------------------------------------------------------
# Plain numpy answers, for the check columns
# --------------------------------------------------------------------------------------------


def calendar_of(start: np.ndarray) -> dict[str, np.ndarray]:
    """Day of year, weekday and hour of every trip, computed from the timestamps alone."""
    day = start.astype("datetime64[D]")
    day_of_year = (day - np.datetime64("2025-01-01", "D")).astype(np.int64)
    weekday = (day.astype(np.int64) + 3) % 7  # 1970-01-01 was a Thursday
    hour = ((start - day) // np.timedelta64(1, "h")).astype(np.int64)
    return {"day_of_year": day_of_year, "weekday": weekday, "hour": hour}


def spot_check(start, minutes, fare, x_lo, x_hi, y_lo, y_hi, counts, sums) -> int:
    """Boxes (half-open on both axes) whose numpy sort-and-scan answer differs from the tree's."""
    order = np.argsort(start, kind="stable")
    s_start, s_minutes, s_fare = start[order], minutes[order], fare[order]
    first = np.searchsorted(s_start, x_lo, side="left")
    last = np.searchsorted(s_start, x_hi, side="left")
    wrong = 0
    for i in range(len(x_lo)):
        m = s_minutes[first[i] : last[i]]
        inside = (m >= y_lo[i]) & (m < y_hi[i])
        count = int(np.count_nonzero(inside))
        total = int(s_fare[first[i] : last[i]][inside].sum())
        wrong += count != int(counts[i]) or total != int(sums[i])
    return wrong


# --------------------------------------------------------------------------------------------
# Named questions
# --------------------------------------------------------------------------------------------


def _days(
    weekdays: tuple[int, ...] = tuple(range(7)),
    months: tuple[int, ...] = tuple(range(1, 13)),
    only: str | None = None,
) -> np.ndarray:
    """Days of 2025 (as day-of-year numbers) with the given weekdays and months."""
    days = np.arange(DAYS)
    dates = np.datetime64("2025-01-01", "D") + days
    month = dates.astype("datetime64[M]").astype(np.int64) % 12 + 1
    keep = np.isin((days + FIRST_WEEKDAY) % 7, list(weekdays)) & np.isin(month, list(months))
    if only is not None:
        keep = dates == np.datetime64(only, "D")
    return days[keep]


# label, days, [hour_lo, hour_hi), [minutes_lo, minutes_hi)
QUESTIONS = [
    (
        "weekday morning commute 07-09, short trips < 10 min",
        _days((0, 1, 2, 3, 4)),
        7,
        9,
        0.0,
        10.0,
    ),
    ("weekday evening commute 16-19, 10-30 min", _days((0, 1, 2, 3, 4)), 16, 19, 10.0, 30.0),
    ("weekend afternoons 12-18, long rides >= 45 min", _days((5, 6)), 12, 18, 45.0, np.inf),
    ("small hours 01-05, every day, any length", _days(), 1, 5, -np.inf, np.inf),
    ("summer Saturdays (Jun-Aug) 10-16, 20-60 min", _days((5,), (6, 7, 8)), 10, 16, 20.0, 60.0),
    ("Fri 2025-05-16, 17-18, any length", _days(only="2025-05-16"), 17, 18, -np.inf, np.inf),
]


def question_boxes(days: np.ndarray, hour_lo: int, hour_hi: int):
    """One time window per day: [day + hour_lo, day + hour_hi), as datetime64[ns] arrays."""
    day_start = YEAR_START + (days.astype(np.int64) * DAY_NS).astype("timedelta64[ns]")
    return (
        day_start + np.timedelta64(hour_lo * HOUR_NS, "ns"),
        day_start + np.timedelta64(hour_hi * HOUR_NS, "ns"),
    )


# --------------------------------------------------------------------------------------------
# Grid counts for the heatmap
# --------------------------------------------------------------------------------------------

WEEK_START = np.datetime64("2025-06-09T00:00:00", "ns")  # a Monday
HEATMAP_BAND_MINUTES = 2.0
HEATMAP_MAX_MINUTES = 60.0
DEFAULT_HEATMAP = "demo_out/larkhaven-week-heatmap.png"


def heatmap_edges() -> tuple[np.ndarray, np.ndarray]:
    """Hourly edges over one week (datetime64[ns]) and trip-length edges in minutes."""
    hours = np.arange(7 * 24 + 1, dtype=np.int64)
    x_edges = WEEK_START + (hours * HOUR_NS).astype("timedelta64[ns]")
    bands = int(HEATMAP_MAX_MINUTES / HEATMAP_BAND_MINUTES)
    y_edges = np.arange(bands + 1) * HEATMAP_BAND_MINUTES
    return x_edges, y_edges


def grid_counts(tree: boxwood.RangeTree, x_edges: np.ndarray, y_edges: np.ndarray) -> np.ndarray:
    """Trips per cell, from the tree: O(cells * log n), not a pass over the trips."""
    return tree.grid(x_edges, y_edges)


def histogram_reference(
    start: np.ndarray, minutes: np.ndarray, x_edges: np.ndarray, y_edges: np.ndarray
) -> np.ndarray:
    """The same cells from numpy.histogram2d, with time as float hours since the week began.

    Offsets within a week are below 2**53 ns, so they convert to float exactly, and dividing
    by the hour (an exact float) keeps every point on the correct side of every hour edge.
    """
    hours = (start - WEEK_START).astype(np.int64).astype(np.float64) / HOUR_NS
    x_hours = (x_edges - WEEK_START).astype(np.int64).astype(np.float64) / HOUR_NS
    counts, _, _ = np.histogram2d(hours, minutes, bins=[x_hours, y_edges])
    return counts.astype(np.int64)


def write_heatmap(path: str, grid: np.ndarray, x_edges: np.ndarray, y_edges: np.ndarray) -> str:
    """Draw the grid to ``path`` (creating its folder); says where, or why it did not."""
    try:
        from .cli._plot import write_heatmap as draw
    except ImportError:  # pragma: no cover - _plot itself imports matplotlib lazily
        return "skipped"
    from .cli._exits import ExtraMissing

    folder = os.path.dirname(os.path.abspath(path))
    os.makedirs(folder, exist_ok=True)
    try:
        draw(
            path,
            grid,
            x_edges,
            y_edges,
            title=(
                f"Larkhaven bike-share (invented data): trips per hour and "
                f"{HEATMAP_BAND_MINUTES:g}-minute band, week of Mon "
                f"{WEEK_START.astype('datetime64[D]')}"
            ),
            x_label="trip start",
            y_label="trip length (minutes)",
            value_label="trips per cell",
            date_format="%a %d %b",
        )
    except ExtraMissing as exc:
        return f"skipped ({exc})"
    return f"wrote {os.path.abspath(path)}"


# --------------------------------------------------------------------------------------------
# Output helpers
# --------------------------------------------------------------------------------------------


def _money(cents: int) -> str:
    return f"{cents // 100:,}.{cents % 100:02d}"


def _when(t: np.datetime64) -> str:
    return str(t.astype("datetime64[s]")).replace("T", " ")


def _table(header: list[str], rows: list[list[str]], right: set[int]) -> str:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]

    def line(cells: list[str]) -> str:
        return "  ".join(
            c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(cells, widths))
        ).rstrip()

    rule = "  ".join("-" * w for w in widths)
    return "\n".join([line(header), rule, *(line(r) for r in rows)])


class _Clock:
    def __init__(self) -> None:
        self.laps: list[tuple[str, float]] = []

    def lap(self, label: str, t0: float) -> float:
        seconds = time.perf_counter() - t0
        self.laps.append((label, seconds))
        return seconds


# --------------------------------------------------------------------------------------------
# The demo
# --------------------------------------------------------------------------------------------


def main(argv: list[str] | None = None, prog: str = "python -m boxwood.demo") -> int:
    """Run the demo; `prog` is how its usage line names it (``boxwood demo`` from the CLI)."""
    parser = argparse.ArgumentParser(
        prog=prog,
        description="Box queries over one invented year of Larkhaven bike-share trips.",
    )
    parser.add_argument("--rows", type=int, default=3_000_000, help="number of trips")
    parser.add_argument("--boxes", type=int, default=200_000, help="boxes in the big batch")
    parser.add_argument(
        "--out",
        default=DEFAULT_HEATMAP,
        metavar="PNG",
        help=f"where to write the heatmap (default: {DEFAULT_HEATMAP})",
    )
    parser.add_argument("--no-plot", action="store_true", help="skip the heatmap")
    args = parser.parse_args(argv)
    if args.rows < 1 or args.boxes < 1:
        parser.error("--rows and --boxes must be positive")

    clock = _Clock()
    run_start = time.perf_counter()
    print("Larkhaven bike-share, 2025 (invented data)")
    print("=" * 42)

    t0 = time.perf_counter()
    start, minutes, fare = make_trips(args.rows)
    clock.lap("generate trips (numpy)", t0)
    print(
        f"{args.rows:,} trips: start time datetime64[ns] x trip minutes float64, "
        f"fare in cents int64 ({BASE_FARE_CENTS} + {CENTS_PER_MINUTE} per started minute)"
    )
    print(
        f"minutes: median {np.median(minutes):.1f}, 99th percentile "
        f"{np.percentile(minutes, 99):.1f}, max {minutes.max():.1f}; "
        f"fare total {_money(int(fare.sum()))} Larkhaven dollars (stored as int64 cents)"
    )

    # Build ---------------------------------------------------------------------------------
    t0 = time.perf_counter()
    tree = boxwood.RangeTree(start, minutes, weights=fare)
    build_s = clock.lap("build RangeTree", t0)
    print()
    print(f"built {tree!r}")
    print(
        f"  in {build_s:.2f} s; {tree.nbytes / 2**20:,.0f} MiB "
        f"({tree.nbytes / len(tree):.0f} bytes per trip, {tree.height} levels)"
    )

    # A big batch ---------------------------------------------------------------------------
    rng = np.random.default_rng(SEED + 1)
    q = args.boxes
    x_lo = YEAR_START + rng.integers(0, DAYS * DAY_NS - HOUR_NS, size=q).astype("timedelta64[ns]")
    x_hi = x_lo + np.timedelta64(HOUR_NS, "ns")
    y_lo = rng.uniform(1.0, 40.0, size=q)
    y_hi = y_lo + rng.uniform(5.0, 30.0, size=q)

    t0 = time.perf_counter()
    counts = tree.count(x_lo, x_hi, y_lo, y_hi, inclusive="left")
    count_s = clock.lap(f"count {q:,} boxes", t0)
    t0 = time.perf_counter()
    sums = tree.sum(x_lo, x_hi, y_lo, y_hi, inclusive="left")
    sum_s = clock.lap(f"sum {q:,} boxes", t0)

    print()
    print(f"Batch: {q:,} boxes = random one-hour windows x random trip-length bands [lo, hi)")
    print(f"  count: {count_s:.3f} s = {q / count_s:,.0f} boxes/s")
    print(f"  sum:   {sum_s:.3f} s = {q / sum_s:,.0f} boxes/s")
    print(
        f"  trips per box: mean {counts.mean():.1f}, max {counts.max():,}; "
        f"fare per box: mean {_money(int(round(sums.mean())))} Larkhaven dollars"
    )

    t0 = time.perf_counter()
    k = min(SPOT_CHECKS, q)
    wrong = spot_check(
        start, minutes, fare, x_lo[:k], x_hi[:k], y_lo[:k], y_hi[:k], counts[:k], sums[:k]
    )
    clock.lap(f"numpy sort-and-scan check of {k:,} boxes", t0)
    print(f"  spot check: {k - wrong:,} of {k:,} boxes agree with a numpy sort-and-scan")
    if wrong:
        print(f"  ERROR: {wrong} boxes disagree")
        return 1

    # Named questions -----------------------------------------------------------------------
    t0 = time.perf_counter()
    cal = calendar_of(start)
    rows = []
    mismatches = 0
    for label, days, h_lo, h_hi, m_lo, m_hi in QUESTIONS:
        lo, hi = question_boxes(days, h_lo, h_hi)
        n_trips = int(tree.count(lo, hi, m_lo, m_hi, inclusive="left").sum())
        total = int(tree.sum(lo, hi, m_lo, m_hi, inclusive="left").sum())
        mask = (
            np.isin(cal["day_of_year"], days)
            & (cal["hour"] >= h_lo)
            & (cal["hour"] < h_hi)
            & (minutes >= m_lo)
            & (minutes < m_hi)
        )
        check = int(np.count_nonzero(mask))
        same = check == n_trips and int(fare[mask].sum()) == total
        mismatches += not same
        rows.append(
            [
                label,
                f"{len(days):,}",
                f"{n_trips:,}",
                _money(total),
                f"{check:,}",
                "yes" if same else "NO",
            ]
        )
    clock.lap("named questions (tree + numpy masks)", t0)
    print()
    print("Named questions (one box per matching day; time windows and bands are [lo, hi))")
    header = [
        "question",
        "boxes",
        "trips",
        "total fare (Larkhaven dollars)",
        "mask count",
        "agrees with mask",
    ]
    print(_table(header, rows, right={1, 2, 3, 4}))
    if mismatches:
        print(f"ERROR: {mismatches} questions disagree with the numpy mask")
        return 1

    # report() ------------------------------------------------------------------------------
    day = np.datetime64("2025-06-14T00:00:00", "ns")
    lo = day + np.timedelta64(12 * HOUR_NS, "ns")
    hi = day + np.timedelta64(18 * HOUR_NS, "ns")
    t0 = time.perf_counter()
    offsets, found = tree.report(lo, hi, -np.inf, np.inf, inclusive="left", ordered=True)
    report_s = clock.lap("report one box", t0)
    longest = found[np.argsort(-minutes[found], kind="stable")[:5]]
    mask_count = int(np.count_nonzero((start >= lo) & (start < hi)))
    day_name = WEEKDAY_NAMES[(int(day.astype("datetime64[D]").astype(np.int64)) + 3) % 7]
    print()
    print(f"report(): {day_name} 2025-06-14, 12:00-18:00, any length")
    print(
        f"  {offsets[-1]:,} rows in {report_s * 1e3:.1f} ms "
        f"(numpy mask: {mask_count:,}); the 5 longest trips:"
    )
    table = [
        [f"{r:,}", _when(start[r]), f"{minutes[r]:.1f}", _money(int(fare[r]))] for r in longest
    ]
    print(_table(["row", "start", "minutes", "fare (Larkhaven dollars)"], table, right={0, 2, 3}))
    if int(offsets[-1]) != mask_count:
        print("ERROR: report() and the numpy mask disagree")
        return 1

    # Grid counts and a heatmap --------------------------------------------------------------
    t0 = time.perf_counter()
    x_edges, y_edges = heatmap_edges()
    grid = grid_counts(tree, x_edges, y_edges)
    grid_s = clock.lap(f"grid of {grid.size:,} cells", t0)
    reference = histogram_reference(start, minutes, x_edges, y_edges)
    print()
    print(
        f"Grid: week of Mon {WEEK_START.astype('datetime64[D]')}, {grid.shape[0]} hours x "
        f"{grid.shape[1]} bands of {HEATMAP_BAND_MINUTES:g} minutes up to "
        f"{HEATMAP_MAX_MINUTES:g} (bins [lo, hi), the last closed, as numpy.histogram2d)"
    )
    agrees = bool(np.array_equal(grid, reference))
    print(
        f"  {int(grid.sum()):,} trips in {grid_s * 1e3:.1f} ms; busiest cell "
        f"{int(grid.max()):,} trips; agrees with numpy.histogram2d: {'yes' if agrees else 'NO'}"
    )
    if not agrees:
        print("ERROR: the grid and numpy.histogram2d disagree")
        return 1
    if args.no_plot:
        print("  heatmap: skipped (--no-plot)")
    else:
        t0 = time.perf_counter()
        print(f"  heatmap: {write_heatmap(args.out, grid, x_edges, y_edges)}")
        clock.lap("heatmap PNG (matplotlib)", t0)

    # Timings -------------------------------------------------------------------------------
    print()
    print("Timings")
    for label, seconds in clock.laps:
        print(f"  {label:<42} {seconds:8.3f} s")
    print(f"  {'total':<42} {time.perf_counter() - run_start:8.3f} s")
    return 0


if __name__ == "__main__":
    try:
        raise SystemExit(main())
    except BrokenPipeError:  # `python -m boxwood.demo | head`: the reader has seen enough
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        raise SystemExit(0) from None
