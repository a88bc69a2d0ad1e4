"""Parameter sweeps: a grid of configs run in parallel into a resumable result store.

A sweep file is TOML (this layout is a contract; the sweep file reference in docs/ lists it)::

    base = "config.toml"            # a `qgp run` config, relative to this file; or an inline [base] table

    [axes]                          # dotted config keys in quotes → lists; the grid is their product
    "circuit.clock_qubits" = [3, 4, 5]
    "data.n_train" = [4, 8, 16]     # training-set size: a reproducible subsample (see [data] n_train)

    [paired]                        # equal-length lists varied together (one more axis, not crossed)
    "circuit.evolution" = ["exact", "walk", "walk"]
    "circuit.encoding" = [{}, "lcu", "dilation"]

An empty inline table ``{}`` as a value means "leave this key out at this point" (the base's value,
if any, is removed and the default applies); in the stored axes it shows as null. The grid order
is the product of the [axes] in file order, then the [paired] group, the last varying fastest;
``grid_index`` counts from 0 in that order. Relative [data] paths resolve against the folder of
the file that names them (the base config, or the sweep file for an inline base and for axis
values). Every point is validated before any runs.

Execution: the parent process owns the store and is its only writer (it holds the store's lock,
``STORE.lock``, for the whole run); points run inline (``workers=1``), in a local process pool, or
on a Dask cluster, and come back as JSON-ready dicts. The data files are read once, when the sweep
is loaded: their bytes (and SHA-256, recorded in the store) are the snapshot every point uses, in
every execution mode, so a file edited during a sweep is never mixed in.
"""

from __future__ import annotations

import copy
import csv
import difflib
import hashlib
import itertools
import json
import math
import os
import signal
import sys
import tempfile
import threading
import time
import tomllib
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator, Literal, Mapping

from qgp.config import _SECTIONS as _CONFIG_KEYS  # the config's key list is the one source of valid keys
from qgp.config import parse_config
from qgp.errors import QgpError
from qgp.files import atomic_open, check_output_file, same_file
from qgp.sweeps.store import (
    GridEntry,
    StoreStatus,
    bind_store,
    canonical_json,
    check_store_path,
    json_hash,
    lock_path,
    lock_store,
    open_store,
    utc_now,
)

__all__ = [
    "GridPoint",
    "Sweep",
    "SweepReport",
    "ExecutionMode",
    "valid_keys",
    "load_sweep",
    "parse_sweep",
    "run_sweep",
    "compute_point",
    "store_status",
    "format_status",
    "export_csv",
    "THREAD_ENV_VARS",
]

ExecutionMode = Literal["inline", "processes", "dask"]

#: Thread-count variables of the BLAS/OpenMP runtimes numpy, scipy and Aer may load. They are read
#: once when the library loads, so they must be in a worker's environment when it starts.
THREAD_ENV_VARS = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
)

_SWEEP_KEYS = ("base", "axes", "paired")
_PATH_KEYS = ("train", "test")
_CSV_SKIP = {
    "config",
    "versions",
    "note",
    "caveat",
    "prior_mean_note",
    "variance_kind",
    "config_file",
    "composition",
    "oracle_call",
    "stages",
    "increments",
}


def valid_keys() -> tuple[str, ...]:
    """Every dotted config key an axis may vary ("section.key")."""
    return tuple(f"{s}.{k}" for s, keys in _CONFIG_KEYS.items() for k in keys)


@dataclass(frozen=True)
class GridPoint:
    """One point of the grid: its axis values and its config (as parse_config takes it)."""

    grid_index: int
    axes: Mapping[str, Any]
    config: Mapping[str, Any]
    config_json: str
    config_hash: str

    def entry(self) -> GridEntry:
        return GridEntry(self.grid_index, dict(self.axes), self.config_json, self.config_hash)


@dataclass(frozen=True)
class Sweep:
    """A validated sweep file: axes, paired axes and the expanded grid."""

    source: Path | None
    text: str
    sha256: str
    axes: tuple[tuple[str, tuple[Any, ...]], ...]
    paired: tuple[tuple[str, tuple[Any, ...]], ...]
    points: tuple[GridPoint, ...]
    data_sha256: Mapping[str, str] = field(default_factory=dict)
    #: The data files' bytes as read when the sweep was loaded (``data_sha256`` is their hash):
    #: the snapshot every point of the run uses.
    data: Mapping[str, bytes] = field(default_factory=dict, repr=False, compare=False)

    @property
    def size(self) -> int:
        return len(self.points)

    @property
    def axis_keys(self) -> tuple[str, ...]:
        return tuple(k for k, _ in self.axes) + tuple(k for k, _ in self.paired)


@dataclass(frozen=True)
class SweepReport:
    """What one ``run_sweep`` call did, and the store's state afterwards."""

    store: Path
    grid_size: int
    skipped: int
    ran: int
    done: int
    failed: int
    store_done: int
    store_failed: int
    store_pending: int
    wall_seconds: float
    mode: ExecutionMode
    workers: int
    threads_per_worker: int
    #: Data files whose contents on disk differ from the snapshot the points used, at the end.
    data_changed: tuple[str, ...] = ()


# -- loading -------------------------------------------------------------------------------------


def load_sweep(path: str | Path) -> Sweep:
    """Read and validate a sweep file; every grid point's config is validated before returning."""
    path = Path(path)
    if path.is_dir():
        raise QgpError(f"sweep file {path} is a folder; name the sweep's TOML file, e.g. {path / 'sweep.toml'}")
    if not path.is_file():
        raise QgpError(f"sweep file {path} does not exist; check the path")
    try:
        text = path.read_text(encoding="utf-8")
        raw = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise QgpError(f"{path} is not valid TOML: {exc}; fix the syntax") from None
    return parse_sweep(raw, base_dir=path.parent, source=path, text=text)


def parse_sweep(raw: Mapping[str, Any], *, base_dir: Path, source: Path | None = None, text: str | None = None) -> Sweep:
    """Validate a sweep given as nested dicts (as TOML parses it) and expand its grid."""
    from qgp.reports.run import config_document

    where = str(source) if source else "sweep"
    base_dir = Path(base_dir).resolve()
    for key in raw:
        if key not in _SWEEP_KEYS:
            raise QgpError(f"{where}: unknown top-level key '{key}'; a sweep file has base, [axes] and [paired]")
    base = _load_base(raw, where, base_dir)
    axes = _axis_table(raw.get("axes", {}), "axes", where, base_dir)
    paired = _axis_table(raw.get("paired", {}), "paired", where, base_dir)
    both = sorted(set(axes) & set(paired))
    if both:
        raise QgpError(f"{where}: {', '.join(both)} appear in both [axes] and [paired]; keep each key in one table")
    if not axes and not paired:
        raise QgpError(
            f'{where}: no axes; add an [axes] table such as "circuit.clock_qubits" = [3, 4, 5] '
            "(for a single config use `qgp run`)"
        )
    if paired:
        lengths = {k: len(v) for k, v in paired.items()}
        if len(set(lengths.values())) > 1:
            shown = ", ".join(f"{k} has {n}" for k, n in lengths.items())
            raise QgpError(f"{where}: [paired] lists must have equal lengths ({shown}); they are varied together")

    # The grid: the product of the [axes] in file order, then the paired group as one more axis.
    dims: list[list[dict[str, Any]]] = [[{k: v} for v in vals] for k, vals in axes.items()]
    if paired:
        n = len(next(iter(paired.values())))
        dims.append([{k: vals[i] for k, vals in paired.items()} for i in range(n)])
    points = []
    for index, combo in enumerate(itertools.product(*dims)):
        setting: dict[str, Any] = {}
        for part in combo:
            setting.update(part)
        config = _apply(base, setting)
        label = {k: (None if _is_unset(v) else v) for k, v in setting.items()}
        try:
            cfg = parse_config(copy.deepcopy(config), base_dir=base_dir, source=None)
        except QgpError as exc:
            raise QgpError(f"{where}: grid point {index} ({_axes_text(label)}) is not a valid config: {exc}") from None
        cjson = canonical_json(config_document(cfg))
        points.append(GridPoint(index, label, config, cjson, json_hash(cjson)))

    data_files = sorted({p for pt in points for p in _data_paths(pt.config)})
    snapshot = {p: _read_data_file(p, where) for p in data_files}
    text = text if text is not None else canonical_json(dict(raw))
    return Sweep(
        source=None if source is None else Path(source).resolve(),
        text=text,
        sha256=json_hash(text),
        axes=tuple((k, tuple(v)) for k, v in axes.items()),
        paired=tuple((k, tuple(v)) for k, v in paired.items()),
        points=tuple(points),
        data_sha256={p: hashlib.sha256(blob).hexdigest() for p, blob in snapshot.items()},
        data=snapshot,
    )


def _load_base(raw: Mapping[str, Any], where: str, sweep_dir: Path) -> dict[str, Any]:
    if "base" not in raw:
        raise QgpError(f'{where}: no base config; add base = "config.toml" (relative to the sweep file) or a [base] table')
    base = raw["base"]
    if isinstance(base, str):
        path = (sweep_dir / base).resolve()
        if path.is_dir():
            raise QgpError(f"{where}: base config {path} is a folder; name the config's TOML file inside it")
        if not path.is_file():
            raise QgpError(f"{where}: base config {path} does not exist; base is relative to the sweep file")
        try:
            table = tomllib.loads(path.read_text(encoding="utf-8"))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise QgpError(f"{path} (the sweep's base config) is not valid TOML: {exc}; fix the syntax") from None
        folder = path.parent
    elif isinstance(base, Mapping):
        table, folder = copy.deepcopy(dict(base)), sweep_dir
    else:
        raise QgpError(f'{where}: base must be a file name (base = "config.toml") or a [base] table, got {base!r}')
    table = copy.deepcopy(dict(table))
    data = table.get("data")
    if isinstance(data, dict):
        for key in _PATH_KEYS:
            if isinstance(data.get(key), str):
                data[key] = str((folder / data[key]).resolve())
    return table


def _axis_table(table: Any, name: str, where: str, sweep_dir: Path) -> dict[str, list[Any]]:
    if not isinstance(table, Mapping):
        raise QgpError(f"{where}: [{name}] must be a table of \"section.key\" = [values], got {table!r}")
    flat: dict[str, Any] = {}
    for key, val in table.items():
        # Unquoted dotted keys (circuit.clock_qubits = [...]) parse as nested tables; accept both.
        if isinstance(val, Mapping):
            for sub, v in val.items():
                flat[f"{key}.{sub}"] = v
        else:
            flat[key] = val
    valid = valid_keys()
    out: dict[str, list[Any]] = {}
    for key, vals in flat.items():
        if key not in valid:
            close = difflib.get_close_matches(key, valid, n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise QgpError(
                f"{where}: unknown key '{key}' in [{name}]{hint}; keys are \"section.key\", valid ones: "
                + ", ".join(valid)
            )
        if not isinstance(vals, list):
            raise QgpError(f"{where}: [{name}] \"{key}\" must be a list of values, e.g. [3, 4, 5], got {vals!r}")
        if not vals:
            raise QgpError(f"{where}: [{name}] \"{key}\" is an empty list; give at least one value or remove the key")
        for v in vals:
            if isinstance(v, Mapping) and v:
                raise QgpError(
                    f"{where}: [{name}] \"{key}\" holds a table {v!r}; values are numbers, strings, booleans, "
                    "lists, or {} to leave the key out"
                )
        section, sub = key.split(".", 1)
        if section == "data" and sub in _PATH_KEYS:
            vals = [v if not isinstance(v, str) else str((sweep_dir / v).resolve()) for v in vals]
        out[key] = list(vals)
    return out


def _is_unset(value: Any) -> bool:
    return isinstance(value, Mapping) and not value


def _apply(base: Mapping[str, Any], setting: Mapping[str, Any]) -> dict[str, Any]:
    config = copy.deepcopy(dict(base))
    for key, value in setting.items():
        section, sub = key.split(".", 1)
        table = config.setdefault(section, {})
        if not isinstance(table, dict):
            table = config[section] = {}
        if _is_unset(value):
            table.pop(sub, None)
        else:
            table[sub] = copy.deepcopy(value)
    return config


def _axes_text(axes: Mapping[str, Any]) -> str:
    return ", ".join(f"{k}={json.dumps(v, ensure_ascii=False, default=str)}" for k, v in axes.items())


def _data_paths(config: Mapping[str, Any]) -> list[str]:
    data = config.get("data", {})
    return [data[k] for k in _PATH_KEYS if isinstance(data.get(k), str)]


def _read_data_file(path: str, where: str) -> bytes:
    """One read of a data file: the snapshot the whole sweep uses (and hashes)."""
    try:
        return Path(path).read_bytes()
    except OSError as exc:
        raise QgpError(f"{where}: cannot read data file {path} ({exc.strerror}); check the path and permissions") from None


def _file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# -- one point (runs in a worker) ----------------------------------------------------------------


def compute_point(task: Mapping[str, Any]) -> dict[str, Any]:
    """Run one grid point and return a JSON-ready result; never raises for a failing point.

    ``task``: grid_index, config (nested dicts, data paths absolute), threads (Aer threads or
    None), data (optional {path: bytes}: the sweep's snapshot of its data files, used instead of
    the files on disk, which may have changed since the sweep started or be on another machine).
    """
    from qgp.reports.run import summary_document, to_json, versions
    from qgp.readout.simulate import set_threads

    started = utc_now()
    t0 = time.perf_counter()
    out: dict[str, Any] = {"grid_index": int(task["grid_index"]), "started": started, "versions": versions()}
    local: dict[str, str] = {}
    try:
        threads = task.get("threads")
        if threads is None:
            threads = _dask_worker_threads()
        if threads is not None:
            set_threads(threads)
        config = copy.deepcopy(dict(task["config"]))
        if task.get("data"):
            local = _materialise_data(config, task["data"])
        from qgp.readout.inference import infer
        from qgp.classical.problem import problem_from_config

        cfg = parse_config(config, base_dir=Path.cwd(), source=None)
        result = infer(problem_from_config(cfg), cfg.circuit, cfg.readout, progress=None)
        summary = summary_document(result, cfg)
        table = summary.get("config", {}).get("data", {})
        for key in _PATH_KEYS:  # the user's file names, not the snapshot copies
            if table.get(key) in local:
                table[key] = local[table[key]]
        out.update(status="done", error=None, traceback=None, summary=summary, test_points=to_json(_test_rows(result)))
    except Exception as exc:  # a failing point is data, not a crash: record it and go on
        out.update(
            status="failed",
            error=_unmap(_error_text(exc), local),
            traceback=None if isinstance(exc, QgpError) else _unmap(traceback.format_exc(), local),
            summary=None,
            test_points=[],
        )
    out["finished"] = utc_now()
    out["elapsed_seconds"] = time.perf_counter() - t0
    return out


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, QgpError):
        return str(exc)
    return f"{type(exc).__name__}: {exc}" if str(exc) else type(exc).__name__


def _test_rows(result) -> list[dict[str, Any]]:
    p = result.problem
    rows = []
    se_m, se_v = result.mean_quantum_se, result.variance_quantum_se
    for t in range(p.X_test.shape[0]):
        rows.append(
            {
                "test_index": t,
                "inputs": {name: float(p.X_test[t, j]) for j, name in enumerate(p.inputs)},
                "target": None if p.y_test is None else float(p.y_test[t]),
                "mean_exact": result.mean_exact[t],
                "variance_exact": result.variance_exact[t],
                "mean_quantum": result.mean_quantum[t],
                "variance_quantum": result.variance_quantum[t],
                "mean_quantum_se": None if se_m is None else se_m[t],
                "variance_quantum_se": None if se_v is None else se_v[t],
                "mean_error": result.mean_quantum[t] - result.mean_exact[t],
                "variance_error": result.variance_quantum[t] - result.variance_exact[t],
                "success_probability": result.p0[t] + result.p1[t],
                "success_probability_variance": result.p_flag[t],
            }
        )
    return rows


_private_folder: Path | None = None


def _snapshot_folder() -> Path:
    """This user's folder of data snapshots (content-addressed, so shared by sweeps and workers)."""
    global _private_folder
    uid = getattr(os, "getuid", lambda: None)()
    folder = Path(tempfile.gettempdir()) / ("qgp-sweep-data" if uid is None else f"qgp-sweep-data-{uid}")
    folder.mkdir(mode=0o700, parents=True, exist_ok=True)
    if uid is not None and folder.stat().st_uid != uid:  # someone else's folder: use a private one
        if _private_folder is None:
            _private_folder = Path(tempfile.mkdtemp(prefix="qgp-sweep-data-"))
        return _private_folder
    return folder


#: Snapshot files this process has written or checked (path → sha256): checked once per process.
_checked_snapshots: dict[str, str] = {}


def _materialise_data(config: dict[str, Any], data: Mapping[str, bytes]) -> dict[str, str]:
    """Write the snapshot's data files (once per machine, named by their SHA-256) and point the
    config at them. Returns {snapshot path: original path}, to name the originals in errors."""
    table = config.get("data", {})
    local: dict[str, str] = {}
    for key in _PATH_KEYS:
        original = table.get(key)
        if not isinstance(original, str) or original not in data:
            continue
        blob = data[original]
        digest = hashlib.sha256(blob).hexdigest()
        target = _snapshot_folder() / f"{digest}{Path(original).suffix}"
        if _checked_snapshots.get(str(target)) != digest or not target.is_file():
            # An existing file of that name is used only if its contents are the snapshot's.
            if not (target.is_file() and _file_sha256(target) == digest):
                tmp = target.with_name(f"{target.name}.{os.getpid()}.{threading.get_ident()}.tmp")
                tmp.write_bytes(blob)
                os.replace(tmp, target)  # atomic: concurrent workers never read a half-written file
            _checked_snapshots[str(target)] = digest
        table[key] = str(target)
        local[str(target)] = original
    return local


def _unmap(text: str, local: Mapping[str, str]) -> str:
    """Name the user's data files, not their snapshot copies, in a failing point's message."""
    for copy_path, original in local.items():
        text = text.replace(copy_path, original)
    return text


def _dask_worker_threads() -> int | None:
    """Aer threads on a Dask worker: its machine's cores shared among the worker's task threads."""
    if "distributed" not in sys.modules:  # a Dask worker has it loaded; elsewhere don't import it
        return None
    try:
        from distributed import get_worker

        worker = get_worker()
    except (ImportError, ValueError):
        return None
    from qgp.readout.simulate import cpu_count

    nthreads = getattr(getattr(worker, "state", None), "nthreads", None) or getattr(worker, "nthreads", 1) or 1
    return max(1, cpu_count() // int(nthreads))


def _init_worker(threads: int, ready=None, parent_pid: int | None = None) -> None:
    """Process-pool initializer: exit with the parent; only the parent handles Ctrl-C; pin the
    simulator's threads.

    The BLAS/OpenMP variables are set in the parent's environment before the pool starts (a
    spawned worker imports numpy while unpickling, before any initializer could run); here
    threadpoolctl, when installed, caps any runtime that was loaded anyway.
    """
    if parent_pid is not None:
        _exit_with_parent(parent_pid)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    from qgp.readout.simulate import set_threads

    set_threads(threads)
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(threads)
    except ImportError:
        pass
    if ready is not None:  # tells the parent that workers can start at all
        with ready.get_lock():
            ready.value += 1


#: PR_SET_PDEATHSIG from <linux/prctl.h>: the signal a process gets when its parent dies.
_PR_SET_PDEATHSIG = 1


def _exit_with_parent(parent_pid: int) -> None:
    """Make this worker end when the sweep process that started it ends, however it ends.

    A worker blocked on the pool's queue never notices a killed parent (it holds both ends of the
    queue's pipe), so it would wait forever. On Linux the kernel sends SIGTERM when the parent
    dies (``prctl(PR_SET_PDEATHSIG)``); everywhere, a daemon thread watches the parent and calls
    ``os._exit`` when it is gone (on POSIX the worker is re-parented, so ``os.getppid()``
    changes; on Windows the parent's process handle is signalled) — checked once a second.
    """
    # Linux sends the signal when the *thread* that started the worker ends: the pool's workers are
    # started by submit() in run_sweep's thread, which lives until the pool is shut down.
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGTERM), 0, 0, 0)
        except (OSError, AttributeError):
            pass  # the watcher below still works
    if os.name == "posix" and os.getppid() != parent_pid:
        os._exit(1)  # the parent died before prctl took effect: nobody will send the signal

    import multiprocessing

    parent = multiprocessing.parent_process()
    if os.name != "posix" and parent is None:
        return  # not started by multiprocessing: nothing to watch

    def watch() -> None:
        while True:
            if os.name == "posix":  # a dead parent's children are re-parented: getppid changes
                time.sleep(1.0)
                if os.getppid() != parent_pid:
                    os._exit(1)
            else:  # Windows keeps the old ppid; the parent's process handle is signalled instead
                parent.join(1.0)
                if not parent.is_alive():
                    os._exit(1)

    threading.Thread(target=watch, name="qgp-parent-watch", daemon=True).start()


# -- running -------------------------------------------------------------------------------------


class _Progress:
    """A one-line progress bar on stderr: points done, failed, total and ETA."""

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total = total
        self.enabled = enabled and total > 0
        self.stream = stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.done = self.failed = 0
        self.t0 = time.monotonic()
        self._last = 0.0

    def say(self, msg: str, *, always: bool = False) -> None:
        """A message line; ``always`` prints it even without a progress bar (something to act on)."""
        if not (self.enabled or always):
            return
        drawn = self.enabled and self.tty and 0 < self.done + self.failed < self.total
        print(("\r\033[K" if drawn else "") + f"qgp: {msg}", file=self.stream, flush=True)
        if drawn:
            self._draw()

    def update(self, status: str) -> None:
        if status == "done":
            self.done += 1
        else:
            self.failed += 1
        self._draw(final=self.done + self.failed == self.total)

    def _line(self) -> str:
        n = self.done + self.failed
        elapsed = time.monotonic() - self.t0
        width = 24
        fill = int(width * n / self.total) if self.total else width
        eta = "—" if n == 0 else _duration(elapsed / n * (self.total - n))
        return (
            f"[{'#' * fill}{'.' * (width - fill)}] {n}/{self.total} points: {self.done} done, "
            f"{self.failed} failed, elapsed {_duration(elapsed)}, ETA {eta}"
        )

    def _draw(self, final: bool = False) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if self.tty:
            print("\r\033[K" + self._line(), end="\n" if final else "", file=self.stream, flush=True)
        elif final or now - self._last >= 10.0:  # a log file gets a line now and then, not a stream of them
            print(self._line(), file=self.stream, flush=True)
            self._last = now


def _duration(seconds: float) -> str:
    seconds = max(0.0, float(seconds))
    if seconds < 60:
        return f"{seconds:.0f}s"
    if seconds < 3600:
        return f"{int(seconds // 60)}m{int(seconds % 60):02d}s"
    return f"{int(seconds // 3600)}h{int(seconds % 3600 // 60):02d}m"


class _Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C so the workers are stopped too."""


def run_sweep(
    sweep: Sweep,
    store_path: str | Path,
    *,
    workers: int | None = None,
    cluster: str | None = None,
    retry_failed: bool = False,
    progress: bool = True,
    connect_timeout: float = 30.0,
) -> SweepReport:
    """Run every grid point not yet in the store (and failed ones with ``retry_failed``).

    ``workers``: processes (default: the cores); 1 runs inline in this process. ``cluster``: a
    Dask scheduler address, or "local" for a LocalCluster of ``workers`` processes
    (``connect_timeout`` seconds to reach a scheduler). Each point is committed when it returns,
    so an interrupted sweep resumes where it stopped.

    The store is locked for the whole run (``STORE.lock``): a second sweep on it is refused with
    the holder's pid. Every point uses the data snapshot taken when the sweep was loaded. A
    scheduler is reached before the store is created, so an unreachable one leaves no store.
    """
    from qgp import __version__
    from qgp.reports.run import versions
    from qgp.readout.simulate import cpu_count

    if workers is not None and workers < 1:
        raise QgpError(f"--workers must be ≥ 1, got {workers}")
    if cluster is not None:
        _require_dask()
    t0 = time.monotonic()
    data = _data_snapshot(sweep)
    store_path = check_store_path(store_path)
    with lock_store(store_path):
        client = _connect_dask(cluster, connect_timeout) if cluster not in (None, "local") else None
        try:
            store = bind_store(
                store_path,
                grid=[p.entry() for p in sweep.points],
                sweep_file=str(sweep.source) if sweep.source else "",
                sweep_text=sweep.text,
                sweep_sha256=sweep.sha256,
                data_sha256=sweep.data_sha256,
                qgp_version=__version__,
                versions=versions(),
            )
            with store:
                todo = store.to_run(retry_failed=retry_failed)
                cores = cpu_count()
                n_workers = max(1, min(workers or cores, len(todo) or 1))
                threads = max(1, cores // n_workers)
                mode: ExecutionMode = "dask" if cluster is not None else ("inline" if n_workers == 1 else "processes")
                bar = _Progress(len(todo), progress)
                skipped = sweep.size - len(todo)
                if mode == "dask":
                    where = (
                        f"a local Dask cluster of {n_workers} worker processes" if cluster == "local"
                        else f"the Dask cluster at {cluster}"
                    )
                elif mode == "inline":
                    where = "this process"
                else:
                    where = f"{n_workers} worker processes × {threads} thread(s)"
                bar.say(
                    f"sweep of {sweep.size} points: {skipped} already in {store.path}, {len(todo)} to run on {where}"
                )
                by_index = {p.grid_index: p for p in sweep.points}
                done = failed = 0

                def record(result: Mapping[str, Any]) -> None:
                    nonlocal done, failed
                    store.record(result)
                    if result["status"] == "done":
                        done += 1
                    else:
                        failed += 1
                    bar.update(result["status"])

                # Every task carries the snapshot of its data files, whatever runs it.
                tasks = []
                for i in todo:
                    config = by_index[i].config
                    task_data = {p: data[p] for p in _data_paths(config) if p in data}
                    tasks.append({"grid_index": i, "config": config, "data": task_data})
                previous = _install_sigterm()
                try:
                    if not tasks:
                        pass
                    elif mode == "inline":
                        for task in tasks:
                            record(compute_point({**task, "threads": None}))
                    elif mode == "processes":
                        _run_processes(tasks, n_workers, threads, record)
                    else:
                        _run_dask(tasks, client, cluster, n_workers, record, bar)
                except KeyboardInterrupt:
                    bar.say(
                        f"interrupted: {done + failed} point(s) stored this run; run the same command again to resume"
                    )
                    raise
                finally:
                    _restore_sigterm(previous)
                st = store.status()
        finally:
            if client is not None:
                client.close()
    changed = _changed_data_files(sweep)
    for path in changed:
        bar.say(
            f"data file {path} changed on disk during this sweep (sha256 {sweep.data_sha256[path][:12]}… at the "
            f"start, {_hash_or_missing(path)} now); every point used the copy read at the start, which the "
            "store records. Restore the file before resuming this store, or start a new --store for the new data",
            always=True,
        )
    return SweepReport(
        store=Path(store_path),
        grid_size=sweep.size,
        skipped=skipped,
        ran=done + failed,
        done=done,
        failed=failed,
        store_done=st.done,
        store_failed=st.failed,
        store_pending=st.pending,
        wall_seconds=time.monotonic() - t0,
        mode=mode,
        workers=n_workers,
        threads_per_worker=threads,
        data_changed=tuple(changed),
    )


def _data_snapshot(sweep: Sweep) -> dict[str, bytes]:
    """The bytes every point uses: those read when the sweep was loaded.

    A ``Sweep`` built without them (by hand) reads the files now, and refuses if they no longer
    match the hashes it carries.
    """
    data = dict(sweep.data)
    for path, digest in sweep.data_sha256.items():
        if path in data:
            continue
        blob = _read_data_file(path, "sweep")
        now = hashlib.sha256(blob).hexdigest()
        if now != digest:
            raise QgpError(
                f"data file {path} changed since the sweep was loaded (sha256 {digest} then, {now} now); "
                "load the sweep again"
            )
        data[path] = blob
    return data


def _hash_or_missing(path: str) -> str:
    try:
        return _file_sha256(Path(path))[:12] + "…"
    except OSError:
        return "missing or unreadable"


def _changed_data_files(sweep: Sweep) -> list[str]:
    """Data files whose bytes on disk are no longer the snapshot's (checked after the run)."""
    changed = []
    for path, digest in sorted(sweep.data_sha256.items()):
        try:
            now = _file_sha256(Path(path))
        except OSError:
            now = None
        if now != digest:
            changed.append(path)
    return changed


def _install_sigterm():
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum, frame):
        raise _Terminated()

    return signal.signal(signal.SIGTERM, handler)


def _restore_sigterm(previous) -> None:
    if previous is not None and threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, previous)


class _ThreadEnv:
    """Set the BLAS/OpenMP thread variables for processes started inside the block, then restore."""

    def __init__(self, threads: int):
        self.threads = threads
        self.saved: dict[str, str | None] = {}

    def __enter__(self):
        for var in THREAD_ENV_VARS:
            self.saved[var] = os.environ.get(var)
            os.environ[var] = str(self.threads)
        return self

    def __exit__(self, *exc):
        for var, val in self.saved.items():
            if val is None:
                os.environ.pop(var, None)
            else:
                os.environ[var] = val


def _run_processes(tasks: list[dict], n_workers: int, threads: int, record: Callable[[Mapping[str, Any]], None]) -> None:
    """A spawn-context process pool with at most ``n_workers`` points in flight.

    Keeping in flight only what runs means an interrupt loses only those, and when a worker dies
    (killed, out of memory) the points it may have held are known: they are stored as failed
    with that reason and the rest continue in a fresh pool.
    """
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    queue = list(reversed(tasks))
    ctx = multiprocessing.get_context("spawn")
    ready = ctx.Value("i", 0)
    with _ThreadEnv(threads):
        while queue:
            pool = ProcessPoolExecutor(
                n_workers, mp_context=ctx, initializer=_init_worker, initargs=(threads, ready, os.getpid())
            )
            inflight: dict[Any, dict] = {}
            broken = False
            try:
                while queue or inflight:
                    while queue and len(inflight) < n_workers and not broken:
                        task = queue.pop()
                        inflight[pool.submit(compute_point, {**task, "threads": threads})] = task
                    if not inflight:
                        break
                    finished, _ = wait(inflight, return_when=FIRST_COMPLETED)
                    for fut in finished:
                        task = inflight.pop(fut)
                        try:
                            result = fut.result()
                        except BrokenProcessPool:
                            if ready.value == 0:
                                raise _startup_failure() from None
                            broken = True
                            result = _lost(
                                task,
                                "the worker process died while this point was in flight (killed, or out of "
                                "memory); rerun with --retry-failed, perhaps with fewer --workers",
                            )
                        except Exception as exc:  # e.g. a result that could not be sent back
                            result = _lost(task, f"the worker could not return this point: {_error_text(exc)}")
                        record(result)
                    if broken and not inflight:
                        break
            except BaseException:
                _stop_pool(pool)
                raise
            pool.shutdown(wait=True)


def _startup_failure() -> QgpError:
    return QgpError(
        "the sweep's worker processes died while starting, before any point ran. They are started "
        "with 'spawn' and import the main script: if you call run_sweep from your own script, put "
        "the call under `if __name__ == \"__main__\":`; otherwise run with --workers 1 to see the error"
    )


def _lost(task: Mapping[str, Any], why: str) -> dict[str, Any]:
    now = utc_now()
    return {"grid_index": task["grid_index"], "status": "failed", "error": why, "started": now, "finished": now}


def _stop_pool(pool) -> None:
    """Stop a process pool now: its in-flight points are lost, committed ones are kept."""
    # ProcessPoolExecutor has no public terminate; its worker handles are the only way to stop
    # long-running points promptly instead of waiting for them.
    for proc in list(getattr(pool, "_processes", {}).values()):
        if proc.is_alive():
            proc.terminate()
    pool.shutdown(wait=True, cancel_futures=True)


def _require_dask():
    try:
        import dask.distributed  # noqa: F401
    except ImportError:
        raise QgpError(
            "--cluster needs Dask distributed, which is not installed; install it with "
            "pip install 'qgp[cluster]' (or pip install 'dask[distributed]')"
        ) from None


#: Seconds between checks for connected Dask workers while waiting for results.
_DASK_WAIT_SECONDS = 5.0


def _connect_dask(address: str, timeout: float):
    """A client of the Dask scheduler at ``address``; a one-line QgpError if it cannot be reached."""
    from dask.distributed import Client

    try:
        return Client(address, timeout=f"{max(timeout, 0.1)}s")
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        raise QgpError(
            f"cannot reach the Dask scheduler at {address!r} ({exc}); check the address "
            "(e.g. tcp://host:8786) and that the scheduler runs, or use --cluster local"
        ) from None


def _worker_count(client) -> int | None:
    try:
        return len(client.scheduler_info().get("workers", {}))
    except Exception:  # the scheduler is unreachable just now: no count to report
        return None


def _run_dask(
    tasks: list[dict],
    client,
    cluster: str,
    n_local: int,
    record: Callable[[Mapping[str, Any]], None],
    bar: _Progress,
) -> None:
    """Send points to a Dask cluster; results come back here, the store's only writer.

    ``client`` is connected already (a remote scheduler), or None for ``cluster == "local"``,
    which starts a LocalCluster of ``n_local`` processes here. The data snapshot travels with each
    task, so workers need not share this file system. While no worker is connected, a line says so
    every ``_DASK_WAIT_SECONDS`` instead of waiting in silence.
    """
    import asyncio
    import logging

    from dask.distributed import LocalCluster, wait

    from qgp.readout.simulate import cpu_count

    local = None
    own_client = None
    try:
        if client is None:
            from dask.distributed import Client

            local = LocalCluster(
                n_workers=n_local,
                threads_per_worker=1,
                processes=True,
                dashboard_address=None,
                silence_logs=logging.ERROR,
            )
            client = own_client = Client(local)
            threads: int | None = max(1, cpu_count() // n_local)
        else:
            threads = None  # each worker works out its own share of its machine
        address = cluster if local is None else "the local cluster"
        futures = {}
        for task in tasks:
            fut = client.submit(compute_point, {**task, "threads": threads}, pure=False)
            futures[fut] = task
        pending = set(futures)
        try:
            while pending:
                try:
                    finished, pending = wait(list(pending), timeout=_DASK_WAIT_SECONDS, return_when="FIRST_COMPLETED")
                except (TimeoutError, asyncio.TimeoutError):
                    if _worker_count(client) == 0:
                        hint = f"start some with `dask worker {cluster}`" if local is None else "the local workers did not start"
                        bar.say(
                            f"waiting for Dask workers at {address} (0 connected); {len(pending)} point(s) queued: "
                            f"{hint}, or stop with Ctrl-C (finished points are kept)",
                            always=True,
                        )
                    continue
                except Exception:  # futures the cluster cancelled: report them below as lost points
                    finished = {f for f in pending if f.cancelled()}
                    if not finished:
                        raise
                    pending = pending - finished
                pending = set(pending)
                for fut in finished:
                    task = futures[fut]
                    try:
                        result = fut.result()
                    except Exception as exc:  # the cluster lost the task (e.g. its worker died each time)
                        result = _lost(
                            task,
                            f"the Dask cluster could not run this point: {_error_text(exc)}; rerun with --retry-failed",
                        )
                    record(result)
        except BaseException:
            client.cancel(list(futures))
            raise
    finally:
        if own_client is not None:
            own_client.close()
        if local is not None:
            local.close()


# -- status and export ---------------------------------------------------------------------------


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


def _flatten(doc: Mapping[str, Any], prefix: str = "") -> Iterator[tuple[str, Any]]:
    for key, val in doc.items():
        if key in _CSV_SKIP:
            continue
        name = f"{prefix}{key}"
        if isinstance(val, Mapping):
            yield from _flatten(val, name + ".")
        elif isinstance(val, (int, float, str, bool)) or val is None:
            yield name, val


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
                flat = dict(_flatten(p.summary or {}))
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
