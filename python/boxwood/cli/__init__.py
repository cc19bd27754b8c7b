"""The ``boxwood`` command: range trees from Parquet or CSV files, boxes answered to files.

::

    boxwood build trips.parquet --x start --y minutes --weights fare -o trips.boxwood
    boxwood count trips.boxwood boxes.csv -o counts.parquet
    boxwood sum trips.parquet boxes.csv --x start --y minutes --weights fare -o sums.csv
    boxwood join trips.boxwood boxes.parquet -o matches.parquet
    boxwood stats trips.boxwood boxes.csv --of y --quantiles 0.5,0.95,0.99 -o spread.csv
    boxwood grid trips.parquet --x start --y minutes --x-bins 24 --y-bins 12
    boxwood describe trips.boxwood
    boxwood append trips trips-tuesday.csv --x start --y minutes --weights fare
    boxwood expire trips --before 2025-06-01
    boxwood count trips boxes.csv
    boxwood demo --rows 100000

Every command that answers boxes takes an index file (``.boxwood``, from ``build``), a
growing tree's folder (from ``append``, opened as a reader) or a points file (Parquet or
CSV, with ``--x``/``--y`` naming its columns). Results are the
boxes' own columns with the answer beside them, written as Parquet or CSV by the output's
extension (CSV on stdout without ``-o``). User errors print one line on stderr and exit with
the codes in :mod:`boxwood.cli._exits`; see ``boxwood --help``.

The package's modules: ``_main`` (the entry point: a command's error becomes its exit code),
``_parser`` (the arguments), ``_sources`` (points from an index or a points file; boxes
files answered in batches), ``_folders`` (growing folders as sources; a source's axes and
keys), one module per command (``_build``, ``_answer`` for count and sum, ``_join``,
``_stats``, ``_grid``, ``_describe``, ``_verify``, ``_grow`` for append and expire;
``demo`` runs :mod:`boxwood.demo`),
``_tables`` (Parquet and CSV in and out), ``_exits`` (exit codes and their errors),
``_output`` (notes on stderr), ``_progress`` (progress bars), ``_bins`` (grid edges and the
grid as text) and ``_plot`` (heatmaps).
"""

from __future__ import annotations

from ._main import main

__all__ = ["main"]
