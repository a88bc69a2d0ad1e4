"""Memory arithmetic shared by every stage: statevector sizes, the memory left, the cap, the guard.

A statevector of q qubits takes 16·2^q bytes (complex128); `require_memory` refuses a run that
cannot fit under the cap (default: half of the available memory — the least of MemAvailable, the
cgroup's limit and ``ulimit -v``) before anything is allocated. Shared (no stage of its own) so the
circuits stage (the LCU decomposition's guard) and the read-out stage use one definition.
"""

from __future__ import annotations

import os
import time

from qgp.errors import QgpError

__all__ = ["statevector_bytes", "available_memory_bytes", "default_memory_cap", "require_memory"]


def statevector_bytes(total_qubits: int) -> int:
    """Memory of a complex128 statevector: 16·2^q bytes."""
    return 16 * (1 << int(total_qubits))


def available_memory_bytes() -> int:
    """Memory this process can still allocate: the least of MemAvailable (/proc/meminfo, Linux;
    else total physical memory), the room left under its cgroup's memory limit (v2 ``memory.max``
    or v1 ``memory.limit_in_bytes``, less current usage) and under its address-space limit
    (``ulimit -v``, less the current virtual size). A container's or ``ulimit``'s limit is
    invisible in /proc/meminfo, and the guards must refuse before it is hit."""
    room = [_meminfo_available()]
    for limit_file, usage_file in _cgroup_memory_files():
        limit, usage = _read_int(limit_file), _read_int(usage_file)
        if limit is not None and usage is not None and limit < _UNLIMITED:
            # Usage counts page cache the kernel reclaims under pressure: subtract the inactive
            # file pages, as container tools do for the "working set".
            usage -= _inactive_file_bytes(os.path.join(os.path.dirname(limit_file), "memory.stat"))
            room.append(max(0, limit - usage))
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY and soft < _UNLIMITED:
            room.append(max(0, soft - _status_bytes("VmSize:")))
    except (ImportError, OSError, ValueError):
        pass
    return min(room)


# Limits at or above this are "no limit" (cgroup v1 writes 2^63 rounded down to a page).
_UNLIMITED = 1 << 60


def _meminfo_available() -> int:
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def _read_int(path: str) -> int | None:
    try:
        with open(path) as fh:
            text = fh.read().strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None  # "max" (cgroup v2, no limit) → None


def _inactive_file_bytes(stat_file: str) -> int:
    """Inactive file pages of a cgroup (v1: ``total_inactive_file``, hierarchical like its usage)."""
    found: dict[str, int] = {}
    try:
        with open(stat_file) as fh:
            for line in fh:
                key, _, value = line.partition(" ")
                if key in ("inactive_file", "total_inactive_file"):
                    found[key] = int(value)
    except (OSError, ValueError):
        pass
    return found.get("total_inactive_file", found.get("inactive_file", 0))


def _status_bytes(key: str) -> int:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _cgroup_memory_files() -> list[tuple[str, str]]:
    """(limit, usage) files of this process's memory cgroup, v2 and v1 layouts."""
    out = []
    try:
        with open("/proc/self/cgroup") as fh:
            lines = fh.read().splitlines()
    except OSError:
        return out
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        _, controllers, path = parts
        path = path.rstrip("/")
        if controllers == "":  # v2 unified hierarchy
            out.append((f"/sys/fs/cgroup{path}/memory.max", f"/sys/fs/cgroup{path}/memory.current"))
        elif "memory" in controllers.split(","):
            for base in ("/sys/fs/cgroup/memory", f"/sys/fs/cgroup/memory{path}"):
                out.append((f"{base}/memory.limit_in_bytes", f"{base}/memory.usage_in_bytes"))
    return out


#: (time.monotonic(), cap, the functions that read it) of the last default-cap reading, for needs
#: far below it (`require_memory`, `default_memory_cap(max_age=…)`).
_LAST_CAP: tuple = (-1.0, 0, None)


def default_memory_cap(*, max_age: float = 0.0) -> int:
    """Half of the memory available now: room for the simulator's own copies. ``max_age`` > 0: a
    reading taken under that many seconds ago by the same functions is returned instead (reading
    /proc and the cgroup files measured 0.1–0.3 ms, as much as simulating a small circuit); for
    needs far below the cap only — callers with large runs read again."""
    global _LAST_CAP
    seen = _recent_cap(max_age) if max_age > 0 else None
    if seen is not None:
        return seen
    cap = available_memory_bytes() // 2
    _LAST_CAP = (time.monotonic(), cap, _readers())
    return cap


def _readers() -> tuple:
    """The functions a default-cap reading came from (a reading by replaced ones is never reused)."""
    return (default_memory_cap, available_memory_bytes)


def _recent_cap(max_age: float) -> int | None:
    """The last default-cap reading when it is under ``max_age`` seconds old and by the same functions."""
    seen_at, seen, seen_readers = _LAST_CAP
    return seen if seen_readers == _readers() and time.monotonic() - seen_at < max_age else None


def require_memory(n_bytes: int, what: str, cap: int | None = None) -> None:
    """Raise before allocating when ``n_bytes`` exceeds the cap. A need below 1/64 of a default cap
    read under a second ago (by the same functions) is checked against that reading: reading /proc
    and the cgroup files costs ~0.1 ms, as much as simulating a small circuit. Larger needs read
    the memory again."""
    if cap is None:
        seen = _recent_cap(1.0)
        if seen is not None and 64 * n_bytes <= seen:
            return
        cap = default_memory_cap()
    cap = int(cap)
    if n_bytes > cap:
        raise QgpError(
            f"{what} needs {n_bytes / 2**30:.3g} GiB, above the memory cap of {cap / 2**30:.3g} GiB; "
            "use fewer clock qubits or training points, or raise [readout] memory_cap_gib if the machine has room"
        )


_THREADS: int | None = None
