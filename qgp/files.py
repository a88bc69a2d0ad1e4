"""Output files that are never half-written and never overwrite a user's file unasked.

Two rules serve every command that writes (``run``, ``demo``, ``export``, ``figures``, ``results``):

* **Atomic writes.** Each file is written to a temporary name in its own folder and renamed into
  place with :func:`os.replace` (atomic on POSIX and Windows within one file system), so a killed
  command leaves the old file or the new one, never a truncated one.
* **No silent overwrite.** Before any heavy work, :func:`check_outputs` lists the files a command
  would write that already exist and refuses, naming them, unless ``force`` is set; a path that
  is a folder where a file is wanted (or a file where a folder is wanted) is refused even with
  ``force``, and so is an output that is one of the command's own inputs.

Shared piece (like ``qgp.errors``): imports nothing from the pipeline.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import IO

from qgp.errors import QgpError

__all__ = [
    "atomic_open",
    "atomic_write_text",
    "atomic_write_bytes",
    "check_outputs",
    "check_output_file",
    "same_file",
    "figure_files",
    "write_csv_rows",
]


@contextlib.contextmanager
def atomic_open(path: str | Path, mode: str = "w", **kwargs) -> Iterator[IO]:
    """Open a temporary file beside ``path``; rename it onto ``path`` only if the block succeeds.

    Parameters
    ----------
    path : the final file name (its folder must exist).
    mode : ``"w"`` (text; ``encoding`` defaults to UTF-8) or ``"wb"``.
    **kwargs : passed to :func:`open` (``newline``, ``encoding``).

    Yields
    ------
    The open temporary file. On an exception it is removed and ``path`` is untouched.
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"atomic_open writes whole files; mode {mode!r} is not 'w' or 'wb'")
    path = Path(path)
    if "b" not in mode:
        kwargs.setdefault("encoding", "utf-8")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, mode, **kwargs) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, _default_mode())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _default_mode() -> int:
    # mkstemp creates 0600; a normal file gets 0666 minus the umask, as open() would give it.
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


def atomic_write_text(path: str | Path, text: str, *, encoding: str = "utf-8") -> None:
    """Write ``text`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    with atomic_open(path, "w", encoding=encoding, newline="") as fh:
        fh.write(text)


def atomic_write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    with atomic_open(path, "wb") as fh:
        fh.write(data)


def same_file(a: str | Path, b: str | Path) -> bool:
    """True when ``a`` and ``b`` name one existing file (through links or other spellings)."""
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def check_output_file(
    path: str | Path,
    *,
    force: bool,
    option: str = "the output",
    inputs: Iterable[str | Path] = (),
) -> Path:
    """Refuse, before any work, to write ``path`` where that would lose or corrupt a file.

    Parameters
    ----------
    path : the file a command will write.
    force : whether an existing file may be replaced.
    option : how the user named it (``"--csv"``), for the message.
    inputs : the command's input files; writing onto one is refused even with ``force``.

    Returns
    -------
    ``path`` as a ``Path``.
    """
    path = Path(path)
    for source in inputs:
        if same_file(path, source):
            raise QgpError(f"{option} {path} is the input file {source}; name a different output file")
    if path.is_dir():
        raise QgpError(f"{option} {path} is a folder; name a file inside it, e.g. {path / 'results.csv'}")
    if not path.parent.exists():
        raise QgpError(f"{option}: folder {path.parent} does not exist; create it first or name another path")
    if path.exists() and not force:
        raise QgpError(f"{option} {path} already exists; choose another name or pass --force to overwrite it")
    return path


def check_outputs(
    out: str | Path,
    names: Iterable[str],
    *,
    force: bool,
    option: str = "--out",
    inputs: Iterable[str | Path] = (),
) -> Path:
    """Refuse, before any work, to write the files ``names`` into the folder ``out`` over existing ones.

    Parameters
    ----------
    out : the output folder (created later by the caller; it may not exist yet).
    names : file or sub-folder names, relative to ``out``, that the command writes.
    force : whether existing files of those names may be replaced.
    option : how the user named the folder, for the message.
    inputs : the command's input files; a folder that holds one of them among ``names`` is refused.

    Returns
    -------
    ``out`` as a ``Path``.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise QgpError(f"{option} {out} is a file, not a folder; name a folder (it is created if missing)")
    names = list(names)
    for name in names:
        for source in inputs:
            if same_file(out / name, source):
                raise QgpError(f"{option} {out} would overwrite the input file {source}; choose another folder")
    existing = [name for name in names if (out / name).exists()]
    if existing and not force:
        shown = ", ".join(name + ("/" if (out / name).is_dir() else "") for name in existing[:6])
        more = f" and {len(existing) - 6} more" if len(existing) > 6 else ""
        raise QgpError(
            f"{option} {out} already holds {shown}{more}; choose another folder or pass --force to overwrite"
        )
    return out


def write_csv_rows(path: str | Path, columns, rows) -> None:
    """Write dicts as CSV rows under the header ``columns``, atomically; a missing key or None is an empty cell."""
    import csv

    with atomic_open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(columns))
        w.writeheader()
        for row in rows:
            w.writerow({k: ("" if row.get(k) is None else row[k]) for k in columns})


def figure_files(folder: str, stems) -> list[str]:
    """The names a report's figures take in its output folder: ``folder/stem.pdf`` and ``folder/stem.png``
    for each stem (what `qgp.reports.figures.save_figure` writes), for `check_outputs`."""
    return [f"{folder}/{stem}.{ext}" for stem in stems for ext in ("pdf", "png")]
