"""The sweep result store: one SQLite file (standard library), one row per grid point.

Layout (schema version 1):

- ``meta(key, value)``: ``format`` = "qgp-sweep-store", ``schema_version``, ``created``,
  ``qgp_version``, ``versions`` (JSON), ``sweep_file``, ``sweep_text``, ``sweep_sha256``,
  ``grid_size``, ``data_sha256`` (JSON: data file path → sha256 at creation).
- ``grid(grid_index, axes_json, config_json, config_hash)``: every point of the sweep, written
  once at creation; it binds the store to its sweep and makes ``--status`` show pending points.
- ``points``: one row per finished grid point (``status`` 'done' or 'failed'), with the error,
  the full summary document as JSON, the key summary scalars as columns, timestamps (ISO 8601,
  UTC), the worker's elapsed seconds and package versions.
- ``test_points``: per test point of each done grid point: inputs (JSON object), the exact and
  quantum mean and latent variance, their shot standard errors, and the errors quantum − exact.

The file carries SQLite's ``application_id`` and ``user_version`` header fields, so a foreign
or incompatible file is recognised from its first 100 bytes before SQLite writes anything. Each
point is committed on its own in WAL mode: a killed sweep loses at most the points in flight.
Only the process that runs the sweep writes; workers hand their results back to it.

One writer at a time: the lock on ``STORE.lock`` beside the store is qgp.sweeps.lock's; the
store's schema is unchanged by it.
"""

from __future__ import annotations

import json
import os
import sqlite3
import struct
import uuid
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Literal, Mapping, Sequence

from qgp.errors import QgpError
from qgp.readout.summary import store_columns

__all__ = [
    "FORMAT",
    "SCHEMA_VERSION",
    "APPLICATION_ID",
    "SUMMARY_COLUMNS",
    "TEST_POINT_COLUMNS",
    "PointStatus",
    "GridEntry",
    "StoredPoint",
    "StoreStatus",
    "ResultStore",
    "open_store",
    "bind_store",
    "check_store_path",
    "canonical_json",
    "json_hash",
    "utc_now",
]

FORMAT = "qgp-sweep-store"
SCHEMA_VERSION = 1
#: SQLite header field (offset 68) that marks a qgp store: the bytes "qgps".
APPLICATION_ID = 0x71677073

PointStatus = Literal["done", "failed"]

#: Summary scalars copied into columns of ``points``: (column, SQL type, path in summary.json), from
#: the summary schema's ``column`` entries (`qgp.readout.summary.SUMMARY_KEYS`).
SUMMARY_COLUMNS: tuple[tuple[str, str, tuple[str, ...]], ...] = store_columns()

#: Columns of ``test_points`` after (grid_index, test_index, inputs), in order.
TEST_POINT_COLUMNS: tuple[str, ...] = (
    "target",
    "mean_exact",
    "variance_exact",
    "mean_quantum",
    "variance_quantum",
    "mean_quantum_se",
    "variance_quantum_se",
    "mean_error",
    "variance_error",
    "success_probability",
    "success_probability_variance",
)

_POINT_COLUMNS = (
    "grid_index",
    "axes_json",
    "config_json",
    "config_hash",
    "status",
    "error",
    "traceback",
    "summary_json",
    *(c for c, _, _ in SUMMARY_COLUMNS),
    "started",
    "finished",
    "elapsed_seconds",
    "versions_json",
)

_SCHEMA = f"""
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE grid (
    grid_index INTEGER PRIMARY KEY,
    axes_json TEXT NOT NULL,
    config_json TEXT NOT NULL,
    config_hash TEXT NOT NULL
);
CREATE TABLE points (
    grid_index INTEGER PRIMARY KEY REFERENCES grid(grid_index),
    axes_json TEXT NOT NULL,
    config_json TEXT NOT NULL,
    config_hash TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('done', 'failed')),
    error TEXT,
    traceback TEXT,
    summary_json TEXT,
    {", ".join(f"{c} {t}" for c, t, _ in SUMMARY_COLUMNS)},
    started TEXT NOT NULL,
    finished TEXT NOT NULL,
    elapsed_seconds REAL,
    versions_json TEXT
);
CREATE TABLE test_points (
    grid_index INTEGER NOT NULL REFERENCES points(grid_index),
    test_index INTEGER NOT NULL,
    inputs TEXT NOT NULL,
    {", ".join(f"{c} REAL" for c in TEST_POINT_COLUMNS)},
    PRIMARY KEY (grid_index, test_index)
);
CREATE INDEX points_status ON points(status);
"""

_TABLES = {"meta", "grid", "points", "test_points"}


def utc_now() -> str:
    """Current UTC time, ISO 8601 with milliseconds (sorts as text)."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


def canonical_json(obj: Any) -> str:
    """One spelling per value: sorted keys, no spaces, no NaN (the input of ``json_hash``)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def json_hash(text: str) -> str:
    import hashlib

    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class GridEntry:
    """A grid point as the store keeps it: its axis values and canonical config."""

    grid_index: int
    axes: Mapping[str, Any]
    config_json: str
    config_hash: str


@dataclass(frozen=True)
class StoredPoint:
    """One finished grid point (``summary`` is the summary.json document; None when failed)."""

    grid_index: int
    axes: dict[str, Any]
    config: dict
    config_hash: str
    status: str
    error: str | None
    summary: dict | None
    started: str
    finished: str


@dataclass(frozen=True)
class StoreStatus:
    """What ``qgp sweep --status`` prints: counts per the grid, failures and the time span."""

    path: Path
    grid_size: int
    done: int
    failed: int
    pending: int
    first_started: str | None
    last_finished: str | None
    compute_seconds: float
    failures: tuple[tuple[int, dict[str, Any], str], ...]
    meta: Mapping[str, Any]


def _refuse(path: Path, what: str) -> QgpError:
    return QgpError(
        f"{path} {what}; it was left untouched. Give --store a new file name (or the store an earlier "
        "`qgp sweep` made)"
    )


def _check_header(path: Path) -> None:
    """Recognise a qgp store from its SQLite header alone, without letting SQLite touch it."""
    if path.is_dir():
        raise QgpError(f"{path} is a directory, not a qgp result store; give a file name such as results.sqlite")
    with open(path, "rb") as fh:
        head = fh.read(100)
    if len(head) == 0:
        raise _refuse(path, "is an empty file, not a qgp result store")
    if len(head) < 100 or not head.startswith(b"SQLite format 3\x00"):
        raise _refuse(path, "is not an SQLite file, so not a qgp result store")
    (user_version,) = struct.unpack(">i", head[60:64])
    (app_id,) = struct.unpack(">i", head[68:72])
    if app_id != APPLICATION_ID:
        raise _refuse(path, "is an SQLite database but not a qgp result store (no qgp marker)")
    if user_version != SCHEMA_VERSION:
        raise _refuse(
            path,
            f"is a qgp result store of schema version {user_version}, but this qgp reads version "
            f"{SCHEMA_VERSION}; use the qgp version that wrote it",
        )


def _connect_ro(path: Path) -> sqlite3.Connection:
    return sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, isolation_level=None)


def _connect_rw(path: Path) -> sqlite3.Connection:
    con = sqlite3.connect(str(path), isolation_level=None, timeout=30.0)
    con.execute("PRAGMA journal_mode=WAL")
    # FULL: each committed point survives power loss too; one fsync per point is cheap beside a simulation.
    con.execute("PRAGMA synchronous=FULL")
    con.execute("PRAGMA foreign_keys=ON")
    return con


def _read_meta(con: sqlite3.Connection, path: Path) -> dict[str, Any]:
    try:
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if not _TABLES <= tables:
            raise _refuse(path, f"carries the qgp marker but lacks the tables {sorted(_TABLES - tables)}: it is damaged")
        raw = dict(con.execute("SELECT key, value FROM meta").fetchall())
    except sqlite3.DatabaseError as exc:
        raise _refuse(path, f"cannot be read as a qgp result store ({exc}): it is damaged") from None
    if raw.get("format") != FORMAT or raw.get("schema_version") != str(SCHEMA_VERSION):
        raise _refuse(path, "carries the qgp marker but its meta table does not say it is a qgp result store")
    meta: dict[str, Any] = dict(raw)
    meta["schema_version"] = int(raw["schema_version"])
    meta["grid_size"] = int(raw.get("grid_size", "0"))
    for key in ("versions", "data_sha256"):
        if key in raw:
            meta[key] = json.loads(raw[key])
    return meta


def _verify(path: Path) -> dict[str, Any]:
    """Full check through a read-only connection; returns the meta table."""
    _check_header(path)
    try:
        con = _connect_ro(path)
    except sqlite3.Error as exc:
        raise _refuse(path, f"cannot be opened ({exc})") from None
    try:
        meta = _read_meta(con, path)
        check = con.execute("PRAGMA quick_check").fetchone()
        if not check or check[0] != "ok":
            raise _refuse(path, f"fails SQLite's integrity check ({check[0] if check else 'no answer'}): it is damaged")
    except sqlite3.DatabaseError as exc:
        raise _refuse(path, f"cannot be read as a qgp result store ({exc}): it is damaged") from None
    finally:
        con.close()
    return meta


def _get(doc: Mapping | None, path: tuple[str, ...]) -> Any:
    cur: Any = doc
    for key in path:
        if not isinstance(cur, Mapping) or key not in cur:
            return None
        cur = cur[key]
    return cur if isinstance(cur, (int, float, str)) or cur is None else None


class ResultStore:
    """A qgp result store (use ``open_store`` to read, ``bind_store`` to run a sweep into it)."""

    def __init__(self, path: Path, con: sqlite3.Connection, meta: dict[str, Any], writable: bool):
        self.path = path
        self._con = con
        self._meta = meta
        self.writable = writable

    # -- reading --------------------------------------------------------------------------------

    @property
    def meta(self) -> dict:
        """The meta table (``schema_version``/``grid_size`` as ints, ``versions``/``data_sha256`` parsed)."""
        return dict(self._meta)

    def grid(self) -> list[GridEntry]:
        """Every grid point of the sweep, in grid order."""
        rows = self._con.execute("SELECT grid_index, axes_json, config_json, config_hash FROM grid ORDER BY grid_index")
        return [GridEntry(i, json.loads(a), c, h) for i, a, c, h in rows]

    def points(self, status: str | None = "done") -> list[StoredPoint]:
        """Finished points in grid order: 'done' (default), 'failed', or None for both."""
        if status not in (None, "done", "failed"):
            raise QgpError(f"status must be 'done', 'failed' or None, got {status!r}")
        sql = (
            "SELECT grid_index, axes_json, config_json, config_hash, status, error, summary_json, started, finished "
            "FROM points"
        )
        args: tuple = ()
        if status is not None:
            sql += " WHERE status = ?"
            args = (status,)
        out = []
        for gi, axes, cfg, h, st, err, summ, started, finished in self._con.execute(sql + " ORDER BY grid_index", args):
            out.append(
                StoredPoint(
                    grid_index=gi,
                    axes=json.loads(axes),
                    config=json.loads(cfg),
                    config_hash=h,
                    status=st,
                    error=err,
                    summary=None if summ is None else json.loads(summ),
                    started=started,
                    finished=finished,
                )
            )
        return out

    def test_points(self, grid_index: int) -> list[dict]:
        """Per-test-point rows of one grid point (``inputs`` parsed into a dict), in test-file order."""
        cols = ("grid_index", "test_index", "inputs", *TEST_POINT_COLUMNS)
        rows = self._con.execute(
            f"SELECT {', '.join(cols)} FROM test_points WHERE grid_index = ? ORDER BY test_index", (int(grid_index),)
        )
        out = []
        for row in rows:
            d = dict(zip(cols, row))
            d["inputs"] = json.loads(d["inputs"])
            out.append(d)
        return out

    def point_rows(self) -> list[dict]:
        """Raw ``points`` rows as dicts (every column), in grid order."""
        cur = self._con.execute("SELECT * FROM points ORDER BY grid_index")
        names = [d[0] for d in cur.description]
        return [dict(zip(names, r)) for r in cur]

    def status(self) -> StoreStatus:
        counts = dict(self._con.execute("SELECT status, COUNT(*) FROM points GROUP BY status").fetchall())
        size = self._con.execute("SELECT COUNT(*) FROM grid").fetchone()[0]
        first, last, compute = self._con.execute(
            "SELECT MIN(started), MAX(finished), COALESCE(SUM(elapsed_seconds), 0) FROM points"
        ).fetchone()
        failures = tuple(
            (gi, json.loads(axes), err or "")
            for gi, axes, err in self._con.execute(
                "SELECT grid_index, axes_json, error FROM points WHERE status = 'failed' ORDER BY grid_index"
            )
        )
        done, failed = counts.get("done", 0), counts.get("failed", 0)
        return StoreStatus(
            path=self.path,
            grid_size=size,
            done=done,
            failed=failed,
            pending=size - done - failed,
            first_started=first,
            last_finished=last,
            compute_seconds=float(compute),
            failures=failures,
            meta=self.meta,
        )

    # -- writing (the sweep's parent process only) ---------------------------------------------

    def to_run(self, *, retry_failed: bool = False) -> list[int]:
        """Grid indices still to compute: those without a row, plus failed ones when retrying."""
        sql = (
            "SELECT g.grid_index FROM grid g LEFT JOIN points p ON p.grid_index = g.grid_index "
            "WHERE p.grid_index IS NULL"
        )
        if retry_failed:
            sql += " OR p.status = 'failed'"
        return [r[0] for r in self._con.execute(sql + " ORDER BY g.grid_index")]

    def record(self, result: Mapping[str, Any]) -> bool:
        """Commit one point (a worker's result dict) in its own transaction.

        A 'done' row is never replaced (a second writer on the same store cannot alter finished
        points); returns False when the row was kept as it was.
        """
        if not self.writable:
            raise QgpError(f"{self.path} was opened read-only; it cannot record points")
        gi = int(result["grid_index"])
        grid = self._con.execute(
            "SELECT axes_json, config_json, config_hash FROM grid WHERE grid_index = ?", (gi,)
        ).fetchone()
        if grid is None:
            raise QgpError(f"{self.path}: grid point {gi} is not part of this store's sweep")
        axes_json, config_json, config_hash = grid
        summary = result.get("summary")
        if summary is not None:
            # The stored config is the parent's canonical one (a worker may have read its data elsewhere).
            summary = dict(summary)
            summary["config"] = json.loads(config_json)
        values: dict[str, Any] = {
            "grid_index": gi,
            "axes_json": axes_json,
            "config_json": config_json,
            "config_hash": config_hash,
            "status": result["status"],
            "error": result.get("error"),
            "traceback": result.get("traceback"),
            "summary_json": None if summary is None else json.dumps(summary, allow_nan=False, ensure_ascii=False),
            **{c: _get(summary, path) for c, _, path in SUMMARY_COLUMNS},
            "started": result["started"],
            "finished": result["finished"],
            "elapsed_seconds": result.get("elapsed_seconds"),
            "versions_json": None if result.get("versions") is None else canonical_json(result["versions"]),
        }
        cols = list(_POINT_COLUMNS)
        con = self._con
        con.execute("BEGIN IMMEDIATE")
        try:
            cur = con.execute(
                f"INSERT INTO points ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))}) "
                f"ON CONFLICT(grid_index) DO UPDATE SET "
                + ", ".join(f"{c} = excluded.{c}" for c in cols[1:])
                + " WHERE points.status != 'done'",
                [values[c] for c in cols],
            )
            changed = cur.rowcount > 0
            if changed:
                con.execute("DELETE FROM test_points WHERE grid_index = ?", (gi,))
                rows = result.get("test_points") or []
                tcols = ("grid_index", "test_index", "inputs", *TEST_POINT_COLUMNS)
                con.executemany(
                    f"INSERT INTO test_points ({', '.join(tcols)}) VALUES ({', '.join('?' * len(tcols))})",
                    [
                        (gi, int(r["test_index"]), canonical_json(r["inputs"]), *(r.get(c) for c in TEST_POINT_COLUMNS))
                        for r in rows
                    ],
                )
            con.execute("COMMIT")
        except BaseException:
            # A SIGTERM (raised as an exception by the sweep's handler) can land just after the
            # COMMIT went through: then there is nothing to roll back, and trying would replace
            # the interrupt with an OperationalError.
            if con.in_transaction:
                con.execute("ROLLBACK")
            raise
        return changed

    # -- lifetime -------------------------------------------------------------------------------

    def close(self) -> None:
        self._con.close()

    def __enter__(self) -> "ResultStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_store(path: str | Path, *, writable: bool = False) -> ResultStore:
    """Open an existing qgp result store (read-only unless ``writable``).

    A missing file, a foreign or damaged SQLite file, or another schema version is a QgpError,
    and the file is left byte for byte as it was.
    """
    path = Path(path)
    if not path.exists():
        raise QgpError(f"no result store at {path}; run `qgp sweep SWEEP.toml --store {path}` first")
    meta = _verify(path)
    con = _connect_rw(path) if writable else _connect_ro(path)
    return ResultStore(path, con, meta, writable)


def _create(path: Path, grid: Sequence[GridEntry], meta: Mapping[str, str]) -> None:
    """Build the store in a temporary file beside ``path``, then link it into place.

    Linking fails if ``path`` appeared meanwhile, so an existing file is never overwritten, and a
    crash during creation leaves no half-made store under the real name.
    """
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")
    con = sqlite3.connect(str(tmp), isolation_level=None)
    try:
        con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        con.execute("BEGIN")
        for statement in _SCHEMA.split(";"):
            if statement.strip():
                con.execute(statement)
        con.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", list(meta.items()))
        con.executemany(
            "INSERT INTO grid (grid_index, axes_json, config_json, config_hash) VALUES (?, ?, ?, ?)",
            [(g.grid_index, json.dumps(dict(g.axes), ensure_ascii=False), g.config_json, g.config_hash) for g in grid],
        )
        con.execute("COMMIT")
        con.execute("PRAGMA journal_mode=WAL")
        con.close()
        try:
            os.link(tmp, path)
        except FileExistsError:
            raise
        except OSError:  # file systems without hard links: a rename, after a last existence check
            if path.exists():
                raise FileExistsError(str(path)) from None
            os.replace(tmp, path)
    finally:
        con.close()
        for suffix in ("", "-wal", "-shm", "-journal"):
            p = Path(str(tmp) + suffix)
            if p.exists():
                p.unlink()


def _grid_mismatch(path: Path, stored: list[GridEntry], grid: Sequence[GridEntry]) -> str | None:
    if len(stored) != len(grid):
        return f"its sweep has {len(stored)} grid points, this one {len(grid)}"
    for old, new in zip(stored, grid):
        if old.grid_index != new.grid_index or old.config_hash != new.config_hash:
            return (
                f"grid point {new.grid_index} differs (stored {_axes_text(old.axes)}, "
                f"now {_axes_text(new.axes)}, or another base config or data path)"
            )
    return None


def _axes_text(axes: Mapping[str, Any]) -> str:
    return ", ".join(f"{k}={json.dumps(v, ensure_ascii=False, default=str)}" for k, v in axes.items()) or "no axes"


def bind_store(
    path: str | Path,
    *,
    grid: Sequence[GridEntry],
    sweep_file: str,
    sweep_text: str,
    sweep_sha256: str,
    data_sha256: Mapping[str, str],
    qgp_version: str,
    versions: Mapping[str, str],
) -> ResultStore:
    """Open ``path`` for writing a sweep: create it, or check it belongs to this sweep.

    A store made by another sweep (another grid, configs or data contents) is refused: results
    of two different sweeps, or of two versions of a data file, must not mix in one store.
    """
    path = Path(path)
    if not path.exists():
        if not path.parent.is_dir():
            raise QgpError(f"folder {path.parent} of --store {path} does not exist; create it first")
        meta = {
            "format": FORMAT,
            "schema_version": str(SCHEMA_VERSION),
            "created": utc_now(),
            "qgp_version": qgp_version,
            "versions": canonical_json(dict(versions)),
            "sweep_file": sweep_file,
            "sweep_text": sweep_text,
            "sweep_sha256": sweep_sha256,
            "grid_size": str(len(grid)),
            "data_sha256": canonical_json(dict(data_sha256)),
        }
        try:
            _create(path, grid, meta)
        except FileExistsError:
            pass  # someone made it meanwhile: check it like any existing file below
    store = open_store(path, writable=True)
    try:
        why = _grid_mismatch(path, store.grid(), grid)
        if why is not None:
            raise QgpError(
                f"{path} holds results of a different sweep ({store.meta.get('sweep_file')}): {why}; "
                "run this sweep into a new --store file, or use the sweep file and data that made this store"
            )
        old = store.meta.get("data_sha256", {})
        changed = sorted(p for p in set(old) | set(data_sha256) if old.get(p) != data_sha256.get(p))
        if changed:
            shown = "; ".join(
                f"{p}: sha256 {old.get(p) or '(none)'} when the store was made, {data_sha256.get(p) or '(none)'} now"
                for p in changed
            )
            raise QgpError(
                f"{path} holds results of a different sweep: the data file(s) changed since the store was made "
                f"({shown}). Mixing the two versions in one store would corrupt its results silently: restore "
                "the file as it was to resume, or run the sweep into a new --store file"
            )
    except BaseException:
        store.close()
        raise
    return store


# -- the --store path (its lock: qgp.sweeps.lock) ------------------------------------------------


def check_store_path(path: str | Path) -> Path:
    """Cheap checks of ``--store`` before any work: its folder exists, it is not a folder, and an
    existing file is a qgp store by its header (SQLite is not let near a foreign file)."""
    path = Path(path)
    if path.is_dir():
        raise QgpError(f"--store {path} is a folder, not a qgp result store; give a file name such as {path / 'results.sqlite'}")
    if not path.parent.is_dir():
        what = "is a file, not a folder" if path.parent.exists() else "does not exist"
        raise QgpError(f"folder {path.parent} of --store {path} {what}; create it first or name another path")
    if path.exists():
        _check_header(path)
    return path
