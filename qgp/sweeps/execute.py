"""Running a sweep: every grid point not yet stored, inline, in a process pool or on Dask.

The parent process owns the store and is its only writer (it holds the store's lock,
``STORE.lock``, for the whole run); points run inline (``workers=1``), in a local process pool, or
on a Dask cluster (qgp.sweeps.worker's `compute_point`), and come back as JSON-ready dicts. Every
point uses the data snapshot read when the sweep was loaded (qgp.sweeps.grid), in every execution
mode.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Literal, Mapping

from qgp.errors import QgpError
from qgp.progress import LOGGER, Bar, write
from qgp.sweeps.grid import Sweep, _changed_data_files, _data_paths, _data_snapshot, _hash_or_missing
from qgp.sweeps.lock import lock_store
from qgp.sweeps.store import bind_store, check_store_path, utc_now
from qgp.sweeps.worker import _ThreadEnv, _error_text, _init_worker, compute_point

__all__ = ["SweepReport", "ExecutionMode", "run_sweep"]

ExecutionMode = Literal["inline", "processes", "dask"]


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


# -- running -------------------------------------------------------------------------------------


class _Progress:
    """The sweep's progress: a bar of points (`qgp.progress.Bar`: tqdm where it can be drawn) and
    messages on the ``"qgp"`` logger; ``always`` messages (something to act on) reach stderr regardless."""

    def __init__(self, total: int, enabled: bool):
        self.enabled = enabled
        self._bar = Bar(total, "sweep", unit="point") if enabled else None
        self.failed = 0

    def say(self, msg: str, *, always: bool = False) -> None:
        if always:
            write(f"qgp: {msg}")
        elif self.enabled:
            LOGGER.info(msg)

    def update(self, status: str) -> None:
        if status != "done":
            self.failed += 1
        if self._bar is not None:
            self._bar.update(1, failed=self.failed)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()


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
    from qgp.environment import versions
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
                    bar.close()
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


def _install_sigterm():
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum, frame):
        raise _Terminated()

    return signal.signal(signal.SIGTERM, handler)


def _restore_sigterm(previous) -> None:
    if previous is not None and threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, previous)


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
