"""One grid point, run in a worker: the inline loop, a pool process or a Dask worker.

`compute_point` never raises for a failing point: the error is data, stored as a failed row. A
worker writes the sweep's data snapshot to a content-addressed local file before the point runs,
pins its simulator and BLAS threads, and (in a process pool) ends with the parent.
"""

from __future__ import annotations

import copy
import hashlib
import os
import signal
import sys
import tempfile
import threading
import time
import traceback
from pathlib import Path
from typing import Any, Mapping

from qgp.config import parse_config
from qgp.errors import QgpError
from qgp.sweeps.grid import _PATH_KEYS, _file_sha256
from qgp.sweeps.store import utc_now

__all__ = ["compute_point", "THREAD_ENV_VARS"]

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


def compute_point(task: Mapping[str, Any]) -> dict[str, Any]:
    """Run one grid point and return a JSON-ready result; never raises for a failing point.

    ``task``: grid_index, config (nested dicts, data paths absolute), threads (Aer threads or
    None), data (optional {path: bytes}: the sweep's snapshot of its data files, used instead of
    the files on disk, which may have changed since the sweep started or be on another machine).
    """
    from qgp.environment import versions
    from qgp.reports.run import summary_document, to_json
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
        result = infer(problem_from_config(cfg), cfg.circuit, cfg.readout, gate_noise=cfg.gate_noise, progress=None)
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
