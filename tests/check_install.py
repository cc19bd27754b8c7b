"""Run by ``make check-sdist`` in a temporary folder, with the venv that pip installed the sdist
into: boxwood comes from that venv, its engine has no debug sections (``_elf.py`` beside this
file), and a batch of counts agrees with numpy boolean masks (NumPy as the outside reference).
Not collected by pytest (no ``test_`` prefix): it runs outside the repository."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

import _elf
import boxwood


def main() -> None:
    package = Path(boxwood.__file__).resolve()
    assert package.is_relative_to(Path(sys.prefix).resolve()), package
    engine = Path(boxwood._boxwood.__file__).read_bytes()
    assert _elf.debug_sections(engine) == [], _elf.debug_sections(engine)

    rng = np.random.default_rng(2017)
    x, y = rng.normal(size=20_000), rng.integers(0, 1_000, 20_000)
    x_lo, y_lo = rng.normal(size=300), rng.integers(0, 900, 300)
    x_hi, y_hi = x_lo + rng.exponential(0.5, 300), y_lo + rng.integers(0, 200, 300)
    counts = boxwood.RangeTree(x, y).count(x_lo, x_hi, y_lo, y_hi)
    expected = [
        np.count_nonzero((x >= a) & (x <= b) & (y >= c) & (y <= d))
        for a, b, c, d in zip(x_lo, x_hi, y_lo, y_hi)
    ]
    assert counts.tolist() == expected
    print(
        f"boxwood {boxwood.__version__} installed from the sdist ({len(engine):,} byte engine, "
        f"no debug sections): {len(expected)} counts agree with numpy masks"
    )


if __name__ == "__main__":
    main()
