"""An on-disk cache of what gate counting needs for one lowered piece: its counts and path matrix.

`qgp.circuits.decomposition` counts gates and depth of a circuit from each distinct piece's gate
counts and longest-path matrix, which take a qiskit ``transpile`` to find. This module keeps them
between processes, so a second run of the same problem transpiles nothing for its counts.

* **Key.** One entry per (piece digest, basis, optimisation level, qiskit version), plus
  `FORMAT_VERSION` of this file layout; the file is named by the sha256 of that key. The key
  fields are stored in the entry too and checked on read (transpiler output can change between
  qiskit versions).
* **Format.** One small JSON file per entry: ``counts`` (gate name → number) and ``paths`` (the
  square longest-path matrix, −inf written as ``null``), written atomically
  (`qgp.files.atomic_write_text`).
* **Location.** ``$QGP_CACHE_DIR/gate-counts/`` when ``QGP_CACHE_DIR`` is set and not empty,
  else ``$XDG_CACHE_HOME/qgp/gate-counts/`` or ``~/.cache/qgp/gate-counts/``.
  ``QGP_CACHE_DIR=off`` disables the disk cache.
* **Never fatal.** A missing, unreadable, corrupt or mismatched entry reads as a miss (the caller
  recomputes and rewrites it); a folder that cannot be written is skipped silently.

Shared piece: imports nothing from the rest of ``qgp.circuits``.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import qiskit

from qgp.files import atomic_write_text

__all__ = [
    "ENV_VAR",
    "DISABLED",
    "SUBFOLDER",
    "FORMAT_VERSION",
    "PieceCounts",
    "qiskit_version",
    "cache_dir",
    "entry_key",
    "entry_path",
    "encode_entry",
    "decode_entry",
    "load",
    "store",
]

#: Environment variable naming the cache root folder.
ENV_VAR = "QGP_CACHE_DIR"
#: The value of `ENV_VAR` (any case) that turns the disk cache off.
DISABLED = "off"
#: The folder of gate-count entries inside the cache root.
SUBFOLDER = "gate-counts"
#: Layout of an entry; part of the key, so a change leaves old entries unread.
FORMAT_VERSION = 1


@dataclass(frozen=True)
class PieceCounts:
    """What counting needs of one lowered piece: gate counts and the longest-path matrix.

    ``paths[j, i]`` is the longest gate path from input qubit i to output qubit j (−inf if none),
    as in `qgp.circuits.decomposition.LoweredPiece`.
    """

    counts: Mapping[str, int]
    paths: np.ndarray

    @property
    def depth(self) -> int:
        """The piece's depth: its longest path (every path starts at depth 0)."""
        return int(self.paths.max()) if self.paths.size else 0


def qiskit_version() -> str:
    """The installed qiskit version, part of every key.

    Returns
    -------
    str
        ``qiskit.__version__``.
    """
    return str(qiskit.__version__)


def cache_dir(environ: Mapping[str, str] | None = None) -> Path | None:
    """The folder of gate-count entries, or None when the disk cache is off.

    Parameters
    ----------
    environ : Mapping[str, str], optional
        The environment to read (default ``os.environ``).

    Returns
    -------
    Path or None
        ``$QGP_CACHE_DIR/gate-counts`` if that variable is set and not empty; None if it is
        ``off``; else ``$XDG_CACHE_HOME/qgp/gate-counts`` (an absolute ``XDG_CACHE_HOME`` only,
        as the XDG base-directory specification says) or ``~/.cache/qgp/gate-counts``.
    """
    env = os.environ if environ is None else environ
    value = env.get(ENV_VAR, "").strip()
    if value.lower() == DISABLED:
        return None
    if value:
        return Path(value).expanduser() / SUBFOLDER
    xdg = env.get("XDG_CACHE_HOME", "")
    if xdg and os.path.isabs(xdg):
        return Path(xdg) / "qgp" / SUBFOLDER
    try:
        home = Path.home()
    except RuntimeError:  # no home folder can be determined: no disk cache
        return None
    return home / ".cache" / "qgp" / SUBFOLDER


def _key_fields(digest: str, basis: Sequence[str], optimization_level: int, version: str) -> dict:
    return {
        "format": FORMAT_VERSION,
        "digest": str(digest),
        "basis": [str(b) for b in basis],
        "optimization_level": int(optimization_level),
        "qiskit": str(version),
    }


def entry_key(digest: str, basis: Sequence[str], optimization_level: int, version: str) -> str:
    """The sha256 hex digest naming one entry.

    Parameters
    ----------
    digest : str
        The piece's content digest (`Piece.key`).
    basis : sequence of str
        The basis gates, in order.
    optimization_level : int
        The transpiler's optimisation level.
    version : str
        The qiskit version.

    Returns
    -------
    str
        64 hex characters.
    """
    fields = _key_fields(digest, basis, optimization_level, version)
    return hashlib.sha256(json.dumps(fields, sort_keys=True).encode()).hexdigest()


def entry_path(
    folder: Path, digest: str, basis: Sequence[str], optimization_level: int, version: str
) -> Path:
    """The file of one entry in ``folder`` (see `entry_key` for the other parameters).

    Parameters
    ----------
    folder : Path
        The folder of entries (`cache_dir`).
    digest, basis, optimization_level, version
        The key, as in `entry_key`.

    Returns
    -------
    Path
        ``folder / "<sha256>.json"``.
    """
    return Path(folder) / f"{entry_key(digest, basis, optimization_level, version)}.json"


def encode_entry(
    digest: str,
    basis: Sequence[str],
    optimization_level: int,
    version: str,
    entry: PieceCounts,
) -> str:
    """The JSON text of one entry: its key fields, ``counts`` and ``paths`` (−inf as null).

    Parameters
    ----------
    digest, basis, optimization_level, version
        The key, as in `entry_key`.
    entry : PieceCounts
        The counts and path matrix.

    Returns
    -------
    str
        The file's text.
    """
    doc = _key_fields(digest, basis, optimization_level, version)
    doc["counts"] = {str(name): int(n) for name, n in entry.counts.items()}
    doc["paths"] = [[None if x == -math.inf else float(x) for x in row] for row in np.asarray(entry.paths).tolist()]
    return json.dumps(doc, allow_nan=False, separators=(",", ":")) + "\n"


def _reject_constant(name: str):
    raise ValueError(f"non-finite number {name} in a gate-count entry")


def _decode_counts(raw, basis: Sequence[str]) -> dict[str, int]:
    if not isinstance(raw, dict):
        raise ValueError("counts is not an object")
    out = {}
    for name, n in raw.items():
        if name not in basis or isinstance(n, bool) or not isinstance(n, int) or n < 0:
            raise ValueError(f"bad count {name!r}: {n!r}")
        out[name] = n
    return out


def _decode_paths(raw, n_qubits: int) -> np.ndarray:
    if not isinstance(raw, list) or len(raw) != n_qubits:
        raise ValueError("paths is not a list of one row per qubit")
    rows = []
    for row in raw:
        if not isinstance(row, list) or len(row) != n_qubits:
            raise ValueError("a paths row is not a list of one entry per qubit")
        for x in row:
            if x is not None and (isinstance(x, bool) or not isinstance(x, (int, float)) or x < 0):
                raise ValueError(f"bad path length {x!r}")
        rows.append([-math.inf if x is None else float(x) for x in row])
    return np.array(rows, dtype=float).reshape(n_qubits, n_qubits)


def decode_entry(
    text: str,
    digest: str,
    basis: Sequence[str],
    optimization_level: int,
    version: str,
    n_qubits: int,
) -> PieceCounts:
    """Read one entry's text, checking that it is the entry asked for.

    Parameters
    ----------
    text : str
        The file's text.
    digest, basis, optimization_level, version
        The expected key, as in `entry_key`; every field must match the stored one.
    n_qubits : int
        The piece's qubit count: ``paths`` must be ``n_qubits`` × ``n_qubits``.

    Returns
    -------
    PieceCounts
        The stored counts and path matrix.

    Raises
    ------
    ValueError
        The text is not JSON, a key field differs, or counts or paths are malformed (gate names
        outside ``basis``, negative or non-integer counts, a wrong shape, non-finite numbers).
    KeyError
        A field is missing.
    """
    doc = json.loads(text, parse_constant=_reject_constant)
    if not isinstance(doc, dict):
        raise ValueError("a gate-count entry is not a JSON object")
    expected = _key_fields(digest, basis, optimization_level, version)
    for name, value in expected.items():
        if doc[name] != value:
            raise ValueError(f"entry {name} is {doc[name]!r}, not {value!r}")
    counts = _decode_counts(doc["counts"], expected["basis"])
    return PieceCounts(counts=counts, paths=_decode_paths(doc["paths"], int(n_qubits)))


def load(
    digest: str,
    basis: Sequence[str],
    optimization_level: int,
    n_qubits: int,
    *,
    folder: Path | None = None,
) -> PieceCounts | None:
    """The cached counts of one piece, or None on a miss (absent, unreadable, corrupt, mismatched).

    Parameters
    ----------
    digest, basis, optimization_level
        The key, as in `entry_key`; the version is the installed qiskit's.
    n_qubits : int
        The piece's qubit count (checked against the stored path matrix).
    folder : Path, optional
        The folder of entries (default `cache_dir`); nothing is read when the cache is off.

    Returns
    -------
    PieceCounts or None
        The entry, or None when it must be recomputed.
    """
    folder = cache_dir() if folder is None else folder
    if folder is None:
        return None
    version = qiskit_version()
    path = entry_path(folder, digest, basis, optimization_level, version)
    try:
        text = path.read_text(encoding="utf-8")
        return decode_entry(text, digest, basis, optimization_level, version, n_qubits)
    except (OSError, ValueError, KeyError):  # json.JSONDecodeError and UnicodeDecodeError are ValueErrors
        return None


def store(
    digest: str,
    basis: Sequence[str],
    optimization_level: int,
    entry: PieceCounts,
    *,
    folder: Path | None = None,
) -> Path | None:
    """Write one entry atomically; a folder that cannot be written is skipped silently.

    Parameters
    ----------
    digest, basis, optimization_level
        The key, as in `entry_key`; the version is the installed qiskit's.
    entry : PieceCounts
        The counts and path matrix.
    folder : Path, optional
        The folder of entries (default `cache_dir`, created if missing); nothing is written when
        the cache is off.

    Returns
    -------
    Path or None
        The file written, or None if the cache is off or the write failed.
    """
    folder = cache_dir() if folder is None else folder
    if folder is None:
        return None
    version = qiskit_version()
    text = encode_entry(digest, basis, optimization_level, version, entry)
    path = entry_path(folder, digest, basis, optimization_level, version)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        atomic_write_text(path, text)
    except OSError:
        return None
    return path
