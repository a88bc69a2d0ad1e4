"""The sweep file: a grid of configs, validated and expanded, and the snapshot of its data files.

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

The data files are read once, when the sweep is loaded: their bytes (and SHA-256, recorded in the
store) are the snapshot every point uses, so a file edited during a sweep is never mixed in.
"""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from qgp.config import _SECTIONS as _CONFIG_KEYS  # the config's key list is the one source of valid keys
from qgp.config import parse_config
from qgp.errors import QgpError, did_you_mean
from qgp.sweeps.store import GridEntry, canonical_json, json_hash

__all__ = ["GridPoint", "Sweep", "valid_keys", "load_sweep", "parse_sweep"]

_SWEEP_KEYS = ("base", "axes", "paired")
_PATH_KEYS = ("train", "test")


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
            raise QgpError(
                f"{where}: unknown key '{key}' in [{name}]{did_you_mean(key, valid)}; keys are \"section.key\", valid ones: "
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


# -- the data snapshot ---------------------------------------------------------------------------


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
