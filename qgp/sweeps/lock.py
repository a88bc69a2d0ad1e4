"""One writer at a time: the lock beside a result store.

:func:`lock_store` takes an exclusive lock on ``STORE.lock`` beside the store (``fcntl.flock``;
``msvcrt.locking`` on Windows), which the operating system releases when the holder dies, so a
killed sweep never leaves a stale lock. The file holds the owner's pid, host and start time for
the refusal message, and is removed when the lock is released. The store's schema
(qgp.sweeps.store) is unchanged by the lock.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import socket
from pathlib import Path

from qgp.errors import QgpError
from qgp.sweeps.store import utc_now

__all__ = ["lock_path", "lock_store", "StoreLock"]


def lock_path(path: str | Path) -> Path:
    """The lock file of a store: ``STORE.lock`` beside it."""
    path = Path(path)
    return path.with_name(path.name + ".lock")


try:  # POSIX
    import fcntl as _fcntl
except ImportError:  # pragma: no cover - Windows
    _fcntl = None
try:  # Windows
    import msvcrt as _msvcrt
except ImportError:
    _msvcrt = None

#: Windows locks a byte range; one byte far past the owner text keeps that text readable.
_WINDOWS_LOCK_OFFSET = 1 << 30


class StoreLock:
    """An exclusive, non-blocking lock on a store, held by one ``run_sweep`` at a time.

    ``fcntl.flock`` on ``STORE.lock`` (POSIX) or ``msvcrt.locking`` (Windows): both are released
    by the operating system when the holder's process ends, however it ends. Where neither
    exists, the lock file is created exclusively and a file left by a process that is no longer
    alive on this host is taken over.
    """

    def __init__(self, path: str | Path):
        self.store = Path(path)
        self.path = lock_path(path)
        self._fd: int | None = None
        self._kind = ""

    # -- acquiring ------------------------------------------------------------------------------

    def acquire(self) -> "StoreLock":
        if self._fd is not None:
            raise RuntimeError("StoreLock is not reentrant")
        if _fcntl is not None:
            self._fd = self._acquire_flock()
        elif _msvcrt is not None:  # pragma: no cover - Windows
            self._fd = self._acquire_msvcrt()
        else:  # pragma: no cover - neither
            self._fd = self._acquire_exclusive_file()
        return self

    def _open(self, flags: int) -> int:
        try:
            return os.open(self.path, flags, 0o666)
        except FileExistsError:
            raise
        except OSError as exc:
            raise QgpError(
                f"cannot create the lock file {self.path} of --store {self.store} ({exc.strerror}); "
                "the store's folder must be writable"
            ) from None

    def _acquire_flock(self) -> int:
        while True:
            fd = self._open(os.O_RDWR | os.O_CREAT)
            try:
                _fcntl.flock(fd, _fcntl.LOCK_EX | _fcntl.LOCK_NB)
            except OSError as exc:
                owner = _read_owner(fd)
                if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    os.close(fd)
                    raise self._busy(owner) from None
                # A file system without flock (some network mounts): the exclusive-file scheme,
                # after removing the empty file just created for flock.
                if owner is None and os.fstat(fd).st_size == 0:
                    with contextlib.suppress(FileNotFoundError):
                        os.unlink(self.path)
                os.close(fd)
                return self._acquire_exclusive_file()
            # The previous holder removes the file before releasing it: if the name now points to
            # another file (or none), the lock just taken is on a removed file; take the current one.
            try:
                current = os.stat(self.path)
            except FileNotFoundError:
                current = None
            if current is not None and os.path.samestat(os.fstat(fd), current):
                self._kind = "flock"
                _write_owner(fd)
                return fd
            os.close(fd)

    def _acquire_msvcrt(self) -> int:  # pragma: no cover - Windows
        fd = self._open(os.O_RDWR | os.O_CREAT)
        try:
            os.lseek(fd, _WINDOWS_LOCK_OFFSET, os.SEEK_SET)
            _msvcrt.locking(fd, _msvcrt.LK_NBLCK, 1)
        except OSError:
            owner = _read_owner(fd)
            os.close(fd)
            raise self._busy(owner) from None
        self._kind = "msvcrt"
        _write_owner(fd)
        return fd

    def _acquire_exclusive_file(self) -> int:
        for _ in range(3):
            try:
                fd = self._open(os.O_RDWR | os.O_CREAT | os.O_EXCL)
            except FileExistsError:
                owner = _read_owner_file(self.path)
                if owner is not None and _owner_is_dead(owner):
                    with contextlib.suppress(FileNotFoundError):
                        os.unlink(self.path)
                    continue
                raise self._busy(owner) from None
            self._kind = "file"
            _write_owner(fd)
            return fd
        raise self._busy(_read_owner_file(self.path))

    def _busy(self, owner: dict | None) -> QgpError:
        if owner:
            who = f"pid {owner.get('pid', '?')} on {owner.get('host', '?')}, started {owner.get('started', '?')}"
        else:
            who = "its pid is not written yet"
        return QgpError(
            f"{self.store} is being written by another qgp sweep ({who}); wait for it to finish or use "
            "another --store"
        )

    # -- releasing ------------------------------------------------------------------------------

    def release(self) -> None:
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            # Remove the file while still holding the lock (a waiter re-checks the name, above), so
            # a finished sweep leaves no STORE.lock behind. Windows cannot remove an open file.
            if self._kind != "msvcrt":
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(self.path)
            elif _msvcrt is not None:  # pragma: no cover - Windows
                with contextlib.suppress(OSError):
                    os.lseek(fd, _WINDOWS_LOCK_OFFSET, os.SEEK_SET)
                    _msvcrt.locking(fd, _msvcrt.LK_UNLCK, 1)
        finally:
            os.close(fd)  # releases a flock
        if self._kind == "msvcrt":  # pragma: no cover - Windows
            with contextlib.suppress(OSError):
                os.unlink(self.path)

    @property
    def held(self) -> bool:
        return self._fd is not None

    def __enter__(self) -> "StoreLock":
        return self if self.held else self.acquire()  # lock_store() hands it over held

    def __exit__(self, *exc) -> None:
        self.release()


def lock_store(path: str | Path) -> StoreLock:
    """Take the store's writer lock (use as ``with lock_store(path): ...``); a QgpError naming the
    holder's pid, host and start time if another sweep holds it."""
    return StoreLock(path).acquire()


def _owner_text() -> str:
    return json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "started": utc_now()}) + "\n"


def _write_owner(fd: int) -> None:
    data = _owner_text().encode("utf-8")
    os.lseek(fd, 0, os.SEEK_SET)
    os.write(fd, data)
    os.ftruncate(fd, len(data))
    os.lseek(fd, 0, os.SEEK_SET)


def _parse_owner(raw: bytes) -> dict | None:
    try:
        owner = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return None
    return owner if isinstance(owner, dict) else None


def _read_owner(fd: int) -> dict | None:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        return _parse_owner(os.read(fd, 4096))
    except OSError:
        return None


def _read_owner_file(path: Path) -> dict | None:
    try:
        return _parse_owner(path.read_bytes()[:4096])
    except OSError:
        return None


def _owner_is_dead(owner: dict) -> bool:
    """True only when the owner ran on this host and its pid is gone (never guess for other hosts)."""
    if owner.get("host") != socket.gethostname() or not isinstance(owner.get("pid"), int) or os.name == "nt":
        return False
    try:
        os.kill(owner["pid"], 0)
    except ProcessLookupError:
        return True
    except OSError:
        return False
    return False
