"""Load and validate a qgp config (TOML) and its CSV data, once, at the edge.

Section and key names are a contract (docs/config.md). Every error names the file, section/key
or row, and says how to fix it; nothing heavy runs before validation has passed.
"""

from __future__ import annotations

import csv
import gzip
import math
import tomllib
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from qgp.errors import QgpError, did_you_mean
from qgp.settings import (
    MAX_ABS_VALUE,
    MAX_SHOTS,
    CircuitSettings,
    Config,
    DataSpec,
    FitSettings,
    Encoding,
    EVOLUTION_USES_BLOCK_ENCODING,
    KernelFamily,
    KernelSpec,
    NoiseSpec,
    ReadoutSettings,
    Strategy,
    Engine,
    Method,
    GateNoise,
    NoiseMethod,
    ScaleOrder,
    ScaleSettings,
    choices,
)

__all__ = ["load_config", "parse_config", "Dataset", "load_dataset", "read_csv", "MAX_CLOCK_QUBITS"]

#: Phase estimation with more clock qubits than this is never simulable here (memory guard).
MAX_CLOCK_QUBITS = 24

_SECTIONS: dict[str, tuple[str, ...]] = {
    "data": ("train", "test", "target", "center", "n_train", "subsample_seed", "labels"),
    # "amplitude": the deprecated name of signal_variance, read for one release (`_signal_variance`).
    "kernel": ("family", "lengthscale", "signal_variance", "amplitude", "support", "fit", "smoothness"),
    "noise": ("variance", "target_condition"),
    "circuit": (
        "clock_qubits",
        "encoding",
        "evolution",
        "trotter_steps",
        "trotter_order",
        "evolution_time",
        "filter_floor",
        "method",
        "target_error",
        "degree",
    ),
    "readout": ("shots", "seed", "strategy", "memory_cap_gib", "engine"),
    "gate_noise": ("two_qubit", "one_qubit", "readout", "basis", "method", "trajectories", "seed"),
    "scale": (
        "n_min",
        "n_max",
        "order",
        "target_condition",
        "relative_error",
        "test_points",
        "cost_n_min",
        "cost_n_max",
        "cost_points_per_decade",
        "physical_error",
        "cycle_seconds",
        "failure_budget",
        "classical_flop_rate",
    ),
    "fit": ("sizes", "probes", "restarts", "max_evaluations", "surface_points", "max_condition"),
}


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file; CSV paths are relative to the file."""
    path = Path(path)
    if not path.is_file():
        raise QgpError(f"config file {path} does not exist; check the path (try `qgp demo --out DIR` for an example)")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise QgpError(f"{path} is not valid TOML: {exc}; fix the syntax") from None
    return parse_config(raw, base_dir=path.parent, source=path)


def parse_config(raw: dict[str, Any], *, base_dir: Path, source: Path | None = None) -> Config:
    """Validate a config given as nested dicts (as TOML parses it)."""
    where = str(source) if source else "config"
    for section in raw:
        if section not in _SECTIONS:
            raise QgpError(
                f"{where}: unknown section [{section}]{did_you_mean(section, _SECTIONS)}; valid sections are "
                + ", ".join(f"[{s}]" for s in _SECTIONS)
            )
        if not isinstance(raw[section], dict):
            raise QgpError(f"{where}: [{section}] must be a table of keys, not a value")
        for key in raw[section]:
            if key not in _SECTIONS[section]:
                raise QgpError(
                    f"{where}: unknown key '{key}' in [{section}]{did_you_mean(key, _SECTIONS[section])}; valid keys are "
                    + ", ".join(_SECTIONS[section])
                )
    if "data" not in raw:
        raise QgpError(f"{where}: missing [data] section; add [data] with train = \"...csv\" and target = \"column\"")
    v = _Validator(where)
    data = _parse_data(v, raw["data"], base_dir)
    kernel = _parse_kernel(v, raw.get("kernel", {}))
    noise = _parse_noise(v, raw.get("noise", {}), kernel)
    circuit = _parse_circuit(v, raw.get("circuit", {}))
    readout = _parse_readout(v, raw.get("readout", {}))
    gate_noise = _parse_gate_noise(v, raw["gate_noise"]) if "gate_noise" in raw else None
    scale = _parse_scale(v, raw.get("scale", {}))
    fit = _parse_fit(v, raw.get("fit", {}), circuit)
    return Config(
        data=data,
        kernel=kernel,
        noise=noise,
        circuit=circuit,
        readout=readout,
        gate_noise=gate_noise,
        scale=scale,
        fit=fit,
        source=source,
    )


class _Validator:
    """Typed getters that name the file, section and key in every error."""

    def __init__(self, where: str):
        self.where = where

    def fail(self, section: str, key: str, msg: str) -> QgpError:
        return QgpError(f"{self.where}: [{section}] {key} {msg}")

    def number(self, table, section, key, default=None, *, positive=False, minimum=None, gt=None):
        if key not in table:
            return default
        val = table[key]
        if isinstance(val, bool) or not isinstance(val, (int, float)):
            raise self.fail(section, key, f"must be a number, got {val!r}")
        val = float(val)
        if not math.isfinite(val):
            raise self.fail(section, key, f"must be finite, got {val}")
        if positive and val <= 0:
            raise self.fail(section, key, f"must be > 0, got {val:g}")
        if minimum is not None and val < minimum:
            raise self.fail(section, key, f"must be ≥ {minimum:g}, got {val:g}")
        if gt is not None and val <= gt:
            raise self.fail(section, key, f"must be > {gt:g}, got {val:g}")
        return val

    def integer(self, table, section, key, default, *, minimum=None, maximum=None):
        if key not in table:
            return default
        val = table[key]
        if isinstance(val, bool) or not isinstance(val, int):
            raise self.fail(section, key, f"must be a whole number, got {val!r}")
        if minimum is not None and val < minimum:
            raise self.fail(section, key, f"must be ≥ {minimum}, got {val}")
        if maximum is not None and val > maximum:
            raise self.fail(section, key, f"must be ≤ {maximum}, got {val}")
        return val

    def boolean(self, table, section, key, default):
        if key not in table:
            return default
        val = table[key]
        if not isinstance(val, bool):
            raise self.fail(section, key, f"must be true or false, got {val!r}")
        return val

    def string(self, table, section, key, default=None):
        if key not in table:
            return default
        val = table[key]
        if not isinstance(val, str) or not val:
            raise self.fail(section, key, f"must be a non-empty string, got {val!r}")
        return val

    def choice(self, table, section, key, default, literal_type):
        if key not in table:
            return default
        allowed = literal_type if isinstance(literal_type, tuple) else choices(literal_type)
        val = table[key]
        if val not in allowed or isinstance(val, bool):
            shown = ", ".join(repr(a) for a in allowed)
            raise self.fail(section, key, f"must be one of {shown}, got {val!r}")
        return val


def _parse_data(v: _Validator, t: dict, base_dir: Path) -> DataSpec:
    train = v.string(t, "data", "train")
    target = v.string(t, "data", "target")
    if train is None:
        raise v.fail("data", "train", "is required: the training CSV path, relative to the config file")
    if target is None:
        raise v.fail("data", "target", "is required: the name of the target column in the CSV header")
    test = v.string(t, "data", "test")
    paths = {}
    for key, rel in (("train", train), ("test", test)):
        if rel is None:
            continue
        p = (base_dir / rel).resolve()
        if p.is_dir():
            raise v.fail("data", key, f"{p} is a folder, not a CSV file; name the file inside it")
        if not p.is_file():
            raise v.fail("data", key, f"file {p} does not exist; the path is relative to the config file")
        paths[key] = p
    return DataSpec(
        train=paths["train"],
        target=target,
        test=paths.get("test"),
        center=v.boolean(t, "data", "center", True),
        n_train=v.integer(t, "data", "n_train", None, minimum=2),
        subsample_seed=v.integer(t, "data", "subsample_seed", 0, minimum=0),
        labels=_parse_labels(v, t.get("labels", {})),
    )


def _parse_labels(v: _Validator, t) -> tuple[tuple[str, str], ...]:
    """``[data] labels``: a table column = "label (unit)"; the columns are checked against the header
    when the data are read (`load_dataset`)."""
    if not isinstance(t, dict) or not all(isinstance(x, str) and x.strip() for x in t.values()):
        raise v.fail("data", "labels", 'must be a table of column = "label (unit)" strings, e.g. labels = { ice_cm = "ice thickness (cm)" }')
    return tuple((str(k), str(x)) for k, x in t.items())


def _parse_kernel(v: _Validator, t: dict) -> KernelSpec:
    d = KernelSpec()
    family: KernelFamily = v.choice(t, "kernel", "family", d.family, KernelFamily)
    ls = t.get("lengthscale", d.lengthscale)
    if isinstance(ls, list):
        if not ls:
            raise v.fail("kernel", "lengthscale", "list is empty; give one positive number per input column")
        vals = tuple(v.number({"x": x}, "kernel", "lengthscale", positive=True) for x in ls)
        lengthscale: float | tuple[float, ...] = vals
    else:
        lengthscale = v.number({"lengthscale": ls}, "kernel", "lengthscale", positive=True)
    smooth = t.get("smoothness", d.smoothness)
    if smooth not in (1, 2) or isinstance(smooth, bool):
        raise v.fail("kernel", "smoothness", f"must be 1 (φ_3,1) or 2 (φ_3,2), got {smooth!r}")
    if "smoothness" in t and family != "wendland":
        raise v.fail("kernel", "smoothness", f"applies only to family = \"wendland\", not {family!r}; remove it")
    return KernelSpec(
        family=family,
        lengthscale=lengthscale,
        signal_variance=_signal_variance(v, t, d.signal_variance),
        support=v.number(t, "kernel", "support", None, positive=True),
        fit=v.boolean(t, "kernel", "fit", d.fit),
        smoothness=smooth,
    )


def _signal_variance(v: _Validator, t: dict, default: float) -> float:
    """``signal_variance``, or its deprecated name ``amplitude`` (one release, FutureWarning)."""
    if "amplitude" not in t:
        return v.number(t, "kernel", "signal_variance", default, positive=True)
    if "signal_variance" in t:
        raise v.fail("kernel", "amplitude", "is the deprecated name of signal_variance, which is also set; remove amplitude")
    warnings.warn(
        f"{v.where}: `[kernel] amplitude` is deprecated: it holds the signal variance (units of the target "
        "squared); rename the key to `signal_variance` (`amplitude` will be removed in the next release)",
        FutureWarning,
        stacklevel=2,
    )
    return v.number(t, "kernel", "amplitude", default, positive=True)


def _parse_noise(v: _Validator, t: dict, kernel: KernelSpec) -> NoiseSpec:
    var = v.number(t, "noise", "variance", None, minimum=0.0)
    kappa = v.number(t, "noise", "target_condition", None, gt=1.0)
    if var is not None and kappa is not None:
        raise QgpError(
            f"{v.where}: [noise] sets both variance and target_condition; keep one "
            "(target_condition chooses the variance that gives that condition number)"
        )
    if var is None and kappa is None and not kernel.fit:
        raise QgpError(
            f"{v.where}: [noise] needs variance (σ²) or target_condition (κ), "
            "or set [kernel] fit = true to fit the noise"
        )
    return NoiseSpec(variance=var, target_condition=kappa)


#: Keys of ``[circuit]`` that only phase estimation reads (refused with ``method = "qsvt"``) and
#: only QSVT reads (refused otherwise).
_PHASE_ESTIMATION_KEYS = ("clock_qubits", "evolution", "trotter_steps", "trotter_order", "evolution_time", "filter_floor")
_QSVT_KEYS = ("target_error", "degree")
#: Largest QSVT polynomial degree accepted (block-encoding calls per circuit).
MAX_QSVT_DEGREE = 10000


def _parse_circuit(v: _Validator, t: dict) -> CircuitSettings:
    d = CircuitSettings()
    method = v.choice(t, "circuit", "method", d.method, Method)
    if method == "qsvt":
        return _parse_qsvt(v, t)
    for key in _QSVT_KEYS:
        if key in t:
            raise v.fail("circuit", key, 'applies only to method = "qsvt"; remove it or set [circuit] method = "qsvt"')
    # The registries' names, declared in qgp.settings (this stage precedes the circuits stage).
    evolution = v.choice(t, "circuit", "evolution", d.evolution, tuple(EVOLUTION_USES_BLOCK_ENCODING))
    encoding = v.choice(t, "circuit", "encoding", d.encoding, Encoding)
    if "encoding" in t and not EVOLUTION_USES_BLOCK_ENCODING[evolution]:
        users = " or ".join(f"evolution = \"{name}\"" for name, uses in EVOLUTION_USES_BLOCK_ENCODING.items() if uses)
        raise v.fail(
            "circuit",
            "encoding",
            f"applies only to {users} (the {evolution!r} oracle uses no block register); remove it",
        )
    order = t.get("trotter_order", d.trotter_order)
    if order not in (1, 2) or isinstance(order, bool):
        raise v.fail("circuit", "trotter_order", f"must be 1 or 2, got {order!r}")
    clock = v.integer(t, "circuit", "clock_qubits", d.clock_qubits, minimum=1, maximum=MAX_CLOCK_QUBITS)
    evolution_time = v.number(t, "circuit", "evolution_time", None, positive=True)
    if clock < 2 and evolution_time is None:
        # What run accepts (qgp.circuits.phase_estimation.derived_evolution_time; the error budget needs t for every oracle).
        raise v.fail(
            "circuit",
            "clock_qubits",
            "= 1 needs [circuit] evolution_time (the derived t = 2π(1 − 2^(1−c))/λ_max is 0 at c = 1); "
            "set clock_qubits ≥ 2 or give evolution_time",
        )
    return CircuitSettings(
        clock_qubits=clock,
        encoding=encoding,
        evolution=evolution,
        trotter_steps=v.integer(t, "circuit", "trotter_steps", d.trotter_steps, minimum=1),
        trotter_order=order,
        evolution_time=evolution_time,
        filter_floor=v.number(t, "circuit", "filter_floor", None, positive=True),
    )


def _parse_qsvt(v: _Validator, t: dict) -> CircuitSettings:
    """``method = "qsvt"``: the encoding and exactly one of ``target_error`` / ``degree``."""
    for key in _PHASE_ESTIMATION_KEYS:
        if key in t:
            raise v.fail("circuit", key, 'applies only to method = "phase_estimation" (QSVT has no clock or oracle); remove it')
    encoding = v.choice(t, "circuit", "encoding", CircuitSettings().encoding, Encoding)
    target = v.number(t, "circuit", "target_error", None, gt=0.0)
    degree = v.integer(t, "circuit", "degree", None, minimum=1, maximum=MAX_QSVT_DEGREE)
    if (target is None) == (degree is None):
        raise QgpError(
            f"{v.where}: [circuit] method = \"qsvt\" needs exactly one of target_error (the polynomial's relative "
            "error, e.g. 1e-2) or degree; give one"
        )
    if degree is not None and degree % 2 == 0:
        raise v.fail("circuit", "degree", f"is the inversion polynomial's degree and must be odd, got {degree}; use {degree + 1}")
    if target is not None and not target < 1:
        raise v.fail("circuit", "target_error", f"must be below 1 (a relative error), got {target!r}")
    return CircuitSettings(method="qsvt", clock_qubits=0, encoding=encoding, target_error=target, degree=degree)


def _parse_readout(v: _Validator, t: dict) -> ReadoutSettings:
    d = ReadoutSettings()
    cap = v.number(t, "readout", "memory_cap_gib", None, positive=True)
    return ReadoutSettings(
        shots=v.integer(t, "readout", "shots", d.shots, minimum=0, maximum=MAX_SHOTS),
        seed=v.integer(t, "readout", "seed", d.seed, minimum=0),
        strategy=v.choice(t, "readout", "strategy", d.strategy, Strategy),
        memory_cap_bytes=None if cap is None else int(cap * 2**30),
        engine=v.choice(t, "readout", "engine", d.engine, Engine),
    )


def _parse_gate_noise(v: _Validator, t: dict) -> GateNoise:
    """``[gate_noise]``: present means noisy circuits (even with every probability 0)."""
    d = GateNoise()
    basis = t.get("basis", list(d.basis))
    if not isinstance(basis, list) or not basis or not all(isinstance(b, str) and b for b in basis):
        raise v.fail("gate_noise", "basis", f"must be a list of gate names such as [\"rz\", \"sx\", \"x\", \"cx\"], got {basis!r}")
    values = dict(
        two_qubit=v.number(t, "gate_noise", "two_qubit", d.two_qubit, minimum=0.0),
        one_qubit=v.number(t, "gate_noise", "one_qubit", d.one_qubit, minimum=0.0),
        readout=v.number(t, "gate_noise", "readout", d.readout, minimum=0.0),
        basis=tuple(basis),
        method=v.choice(t, "gate_noise", "method", d.method, NoiseMethod),
        trajectories=v.integer(t, "gate_noise", "trajectories", d.trajectories, minimum=1, maximum=10**7),
        seed=v.integer(t, "gate_noise", "seed", d.seed, minimum=0),
    )
    try:
        return GateNoise(**values)
    except QgpError as exc:
        raise QgpError(f"{v.where}: {exc}") from None


def _parse_scale(v: _Validator, t: dict) -> ScaleSettings:
    d = ScaleSettings()
    values = dict(
        n_min=v.integer(t, "scale", "n_min", d.n_min, minimum=4),
        n_max=v.integer(t, "scale", "n_max", d.n_max, minimum=4, maximum=2**24),
        order=v.choice(t, "scale", "order", d.order, ScaleOrder),
        target_condition=v.number(t, "scale", "target_condition", d.target_condition, gt=1.0),
        relative_error=v.number(t, "scale", "relative_error", d.relative_error, gt=0.0),
        test_points=v.integer(t, "scale", "test_points", d.test_points, minimum=1),
        cost_n_min=v.integer(t, "scale", "cost_n_min", d.cost_n_min, minimum=2),
        cost_n_max=v.integer(t, "scale", "cost_n_max", d.cost_n_max, minimum=2, maximum=10**12),
        cost_points_per_decade=v.integer(t, "scale", "cost_points_per_decade", d.cost_points_per_decade, minimum=1, maximum=100),
        physical_error=v.number(t, "scale", "physical_error", d.physical_error, gt=0.0),
        cycle_seconds=v.number(t, "scale", "cycle_seconds", d.cycle_seconds, positive=True),
        failure_budget=v.number(t, "scale", "failure_budget", d.failure_budget, gt=0.0),
        classical_flop_rate=v.number(t, "scale", "classical_flop_rate", None, positive=True),
    )
    if values["n_min"] & (values["n_min"] - 1):
        raise v.fail("scale", "n_min", f"= {values['n_min']} is not a power of two; the audit doubles n from it (use e.g. 64)")
    if values["n_max"] < values["n_min"]:
        raise v.fail("scale", "n_max", f"= {values['n_max']} is below n_min = {values['n_min']}; raise n_max or lower n_min")
    if values["cost_n_max"] <= values["cost_n_min"]:
        raise v.fail("scale", "cost_n_max", f"= {values['cost_n_max']} is not above cost_n_min = {values['cost_n_min']}; widen the range")
    for key in ("relative_error", "failure_budget"):
        if not values[key] < 1:
            raise v.fail("scale", key, f"must be below 1 (a probability or relative error), got {values[key]!r}")
    if not values["physical_error"] < 1e-2:
        raise v.fail(
            "scale", "physical_error", f"= {values['physical_error']!r} is not below the surface code's threshold ≈ 1e-2; use e.g. 1e-3"
        )
    return ScaleSettings(**values)


def _parse_fit(v: _Validator, t: dict, circuit: CircuitSettings) -> FitSettings:
    d = FitSettings()
    sizes = t.get("sizes", list(d.sizes))
    if not isinstance(sizes, list) or not all(isinstance(x, int) and not isinstance(x, bool) for x in sizes):
        raise v.fail("fit", "sizes", f"must be a list of integers (clock qubits, or QSVT degrees), got {sizes!r}")
    qsvt = circuit.method == "qsvt"
    for x in sizes:
        if qsvt and (x < 1 or x % 2 == 0):
            raise v.fail("fit", "sizes", f"has {x}: QSVT sizes are odd inversion degrees ≥ 1 (as [circuit] degree); use {max(1, x + 1 - x % 2)}")
        if not qsvt and not 2 <= x <= MAX_CLOCK_QUBITS:
            raise v.fail("fit", "sizes", f"has {x}: clock sizes must lie in 2 … {MAX_CLOCK_QUBITS}")
    return FitSettings(
        sizes=tuple(sorted(set(sizes))),
        probes=v.integer(t, "fit", "probes", d.probes, minimum=0, maximum=100_000),
        restarts=v.integer(t, "fit", "restarts", d.restarts, minimum=0, maximum=100),
        max_evaluations=v.integer(t, "fit", "max_evaluations", d.max_evaluations, minimum=10, maximum=100_000),
        surface_points=v.integer(t, "fit", "surface_points", d.surface_points, minimum=3, maximum=1001),
        max_condition=v.number(t, "fit", "max_condition", None, gt=1.0),
    )


@dataclass(frozen=True)
class Dataset:
    """Training and (optional) test data in file order; ``y_test`` is None without a target column."""

    X_train: np.ndarray
    y_train: np.ndarray
    X_test: np.ndarray | None
    y_test: np.ndarray | None
    inputs: tuple[str, ...]
    target: str


def read_csv(path: Path, target: str, *, target_required: bool = True) -> tuple[np.ndarray, np.ndarray | None, tuple[str, ...]]:
    """Parse a numeric CSV with a header row into (X, y or None, input column names)."""
    try:
        # utf-8-sig: spreadsheet programs start a UTF-8 CSV with a byte-order mark.
        opener = gzip.open if Path(path).suffix == ".gz" else open
        with opener(path, "rt", newline="", encoding="utf-8-sig") as fh:
            reader = csv.reader(fh)
            # (file line where the record ends, record): messages name the line a text editor shows.
            rows = [(reader.line_num, r) for r in reader]
    except UnicodeDecodeError:
        raise QgpError(f"{path} is not a UTF-8 text CSV file; export it as CSV") from None
    except (gzip.BadGzipFile, EOFError):
        raise QgpError(f"{path} ends in .gz but is not a complete gzip file; recompress it or drop the .gz") from None
    lines = [line for line, r in rows if any(cell.strip() for cell in r)]
    rows = [r for _, r in rows if any(cell.strip() for cell in r)]
    if not rows:
        raise QgpError(f"{path} is empty; it needs a header row and data rows")
    header = [h.strip() for h in rows[0]]
    if len(set(header)) != len(header):
        raise QgpError(f"{path}: duplicate column names in the header {header}; rename them")
    if target not in header and target_required:
        raise QgpError(
            f"{path}: target column '{target}' not in the header; columns are {', '.join(header)} "
            "(set [data] target to one of them)"
        )
    inputs = tuple(h for h in header if h != target)
    if not inputs:
        raise QgpError(f"{path}: no input columns besides the target '{target}'; add at least one")
    values = np.empty((len(rows) - 1, len(header)))
    for i, row in enumerate(rows[1:], start=2):
        # Data row N (the header not counted) and its line in the file (blank lines skipped above).
        where = f"{path}, data row {i - 1} (file line {lines[i - 1]})"
        if len(row) != len(header):
            raise QgpError(f"{where}: {len(row)} cells but the header has {len(header)}; fix the row")
        for j, cell in enumerate(row):
            try:
                x = float(cell)
            except ValueError:
                raise QgpError(
                    f"{where}, column '{header[j]}': '{cell}' is not a number; fix or remove the row"
                ) from None
            if not math.isfinite(x):
                raise QgpError(
                    f"{where}, column '{header[j]}': value {cell} is not finite; fix or remove the row"
                )
            if abs(x) > MAX_ABS_VALUE:
                raise QgpError(
                    f"{where}, column '{header[j]}': |{cell}| > {MAX_ABS_VALUE:g}, whose square overflows "
                    "double precision; rescale the column (divide it by a power of ten) and the kernel with it"
                )
            values[i - 2, j] = x
    in_idx = [header.index(c) for c in inputs]
    y = values[:, header.index(target)] if target in header else None
    return values[:, in_idx], y, inputs


def load_dataset(spec: DataSpec) -> Dataset:
    """Read the training (and test) CSVs named in ``[data]``, in file order, never reordered."""
    X, y, inputs = read_csv(spec.train, spec.target)
    for column, _ in spec.labels:
        if column not in (*inputs, spec.target):
            raise QgpError(
                f"[data] labels names column '{column}'{did_you_mean(column, (*inputs, spec.target))}, which "
                f"{spec.train} does not have; columns are {', '.join((*inputs, spec.target))}"
            )
    if X.shape[0] < 2:
        raise QgpError(f"{spec.train}: {X.shape[0]} training row(s); a GP needs at least 2")
    if spec.n_train is not None:
        if spec.n_train > X.shape[0]:
            raise QgpError(
                f"[data] n_train = {spec.n_train} but {spec.train} has only {X.shape[0]} rows; lower n_train"
            )
        keep = np.sort(np.random.default_rng(spec.subsample_seed).permutation(X.shape[0])[: spec.n_train])
        X, y = X[keep], y[keep]
    Xs = ys = None
    if spec.test is not None:
        Xs, ys, test_inputs = read_csv(spec.test, spec.target, target_required=False)
        if set(test_inputs) != set(inputs):
            raise QgpError(
                f"{spec.test}: input columns {list(test_inputs)} differ from the training file's "
                f"{list(inputs)}; the test file needs the same input columns (the target is optional)"
            )
        if Xs.shape[0] < 1:
            raise QgpError(f"{spec.test}: no test rows; add rows or drop [data] test")
        order = [test_inputs.index(c) for c in inputs]
        Xs = Xs[:, order]
    return Dataset(X_train=X, y_train=y, X_test=Xs, y_test=ys, inputs=inputs, target=spec.target)

