"""The CSV written beside every figure: exactly the plotted numbers, one line per row.

Columns (`CSV_COLUMNS`): panel, series, x_name, x, y_name, y, y_std, y_min, y_max, n, source,
grid_indices. Floats are written with ``repr`` (exact round trip); `read_figure_csv` reads a
file back.
"""

from __future__ import annotations

import csv
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from qgp.files import atomic_open
from qgp.sweeps.figures.data import _Row

__all__ = ["CSV_COLUMNS", "read_figure_csv"]

CSV_COLUMNS = ("panel", "series", "x_name", "x", "y_name", "y", "y_std", "y_min", "y_max", "n", "source", "grid_indices")


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return repr(float(v))
    return str(v)


def _write_csv(rows: Sequence[_Row], labels: Mapping[tuple, str], path: Path) -> None:
    """One line per row; ``labels`` maps (series parts, source) to the series label."""
    with atomic_open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for r in rows:
            w.writerow(
                [
                    r.panel,
                    labels[(r.series, r.source)],
                    r.x_name,
                    _cell(r.x),
                    r.y_name,
                    _cell(r.y),
                    _cell(r.y_std),
                    _cell(r.y_min),
                    _cell(r.y_max),
                    str(r.n),
                    r.source,
                    " ".join(str(i) for i in r.grid_indices),
                ]
            )


def read_figure_csv(path: str | Path) -> list[dict[str, Any]]:
    """A figure CSV back as dicts: numbers as float (x None when empty), grid_indices as a list of int."""
    out = []
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            d: dict[str, Any] = dict(row)
            for k in ("x", "y", "y_std", "y_min", "y_max"):
                d[k] = None if row[k] == "" else float(row[k])
            d["n"] = int(row["n"])
            d["grid_indices"] = [int(i) for i in row["grid_indices"].split()]
            out.append(d)
    return out
