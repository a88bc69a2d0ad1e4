"""What a result store holds, for people and tables: `qgp sweep --status STORE` and `qgp results STORE --csv`."""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path
from typing import Any

from qgp.errors import QgpError
from qgp.files import atomic_open, check_output_file, same_file
from qgp.readout.summary import table_leaves
from qgp.sweeps.execute import _duration
from qgp.sweeps.grid import _axes_text
from qgp.sweeps.lock import lock_path
from qgp.sweeps.store import StoreStatus, open_store

__all__ = ["store_status", "format_status", "export_csv"]

def store_status(store_path: str | Path) -> StoreStatus:
    """Counts per the grid (done, failed, pending), failures and time span of a store."""
    with open_store(store_path) as store:
        return store.status()


def format_status(st: StoreStatus, *, max_failures: int = 20) -> str:
    """The text ``qgp sweep --status`` prints."""
    meta = st.meta
    lines = [
        f"store     {st.path}",
        f"sweep     {meta.get('sweep_file') or '(inline)'} (sha256 {str(meta.get('sweep_sha256', ''))[:12]}…)",
        f"created   {meta.get('created')} with qgp {meta.get('qgp_version')}",
        f"grid      {st.grid_size} points: {st.done} done, {st.failed} failed, {st.pending} pending",
    ]
    if st.first_started:
        lines.append(
            f"time      {st.first_started} → {st.last_finished} (points' compute time {_duration(st.compute_seconds)})"
        )
    if st.failures:
        lines.append("failed points (rerun them with --retry-failed):")
        for gi, axes, err in st.failures[:max_failures]:
            first = err.splitlines()[0] if err else ""
            lines.append(f"  {gi:>5}  {_axes_text(axes)}: {first}")
        if len(st.failures) > max_failures:
            lines.append(f"  … and {len(st.failures) - max_failures} more")
    if st.pending:
        lines.append("pending points run when the same `qgp sweep SWEEP.toml --store …` command runs again")
    return "\n".join(lines)


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    if isinstance(value, (list, dict)):
        return json.dumps(value, ensure_ascii=False)
    return str(value)


def export_csv(store_path: str | Path, out: str | Path, *, test_points: bool = False, force: bool = False) -> int:
    """Write a tidy CSV: one row per done point (axes columns, then summary scalars), or with
    ``test_points`` one row per test point of each done point. Returns the number of rows.

    An existing ``out`` is replaced only with ``force``; the store itself (and its ``-wal``,
    ``-shm`` and lock files) never, and the CSV is written to a temporary name and renamed into
    place, so a killed export leaves the old file or the new one.
    """
    store_path = Path(store_path)
    out = Path(out)
    # SQLite's and qgp's companion files of the store: refused whether or not they exist now (a
    # CSV named STORE-wal would be taken for the store's journal when it is next opened).
    companions = [store_path.with_name(store_path.name + s) for s in ("-wal", "-shm", "-journal")]
    companions.append(lock_path(store_path))
    for companion in companions:
        if out.absolute() == companion.absolute() or same_file(out, companion):
            raise QgpError(f"--csv {out} is a file of the store {store_path}; name a different output file")
    out = check_output_file(out, force=force, option="--csv", inputs=[store_path])
    with open_store(store_path) as store:
        axis_keys: list[str] = []
        for entry in store.grid():
            for k in entry.axes:
                if k not in axis_keys:
                    axis_keys.append(k)
        points = store.points("done")
        if test_points:
            header: list[str] = ["grid_index", *axis_keys, "test_index"]
            rows: list[dict[str, Any]] = []
            inputs: list[str] = []
            from qgp.sweeps.store import TEST_POINT_COLUMNS

            for p in points:
                for tp in store.test_points(p.grid_index):
                    for name in tp["inputs"]:
                        if name not in inputs:
                            inputs.append(name)
                    rows.append(
                        {
                            "grid_index": p.grid_index,
                            **p.axes,
                            "test_index": tp["test_index"],
                            **tp["inputs"],
                            **{c: tp[c] for c in TEST_POINT_COLUMNS},
                        }
                    )
            header += inputs + list(TEST_POINT_COLUMNS)
        else:
            header = ["grid_index", *axis_keys]
            rows = []
            scalar_names: list[str] = []
            for p in points:
                flat = dict(table_leaves(p.summary or {}))
                for name in flat:
                    if name not in scalar_names:
                        scalar_names.append(name)
                rows.append({"grid_index": p.grid_index, **p.axes, **flat, "started": p.started, "finished": p.finished})
            header += scalar_names + ["started", "finished"]
    with atomic_open(out, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for row in rows:
            w.writerow([_cell(row.get(c)) for c in header])
    return len(rows)
