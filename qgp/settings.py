"""Typed, frozen configuration: what a `qgp` config file says, after validation.

The TOML section and key names are a contract (see docs/config.md); `qgp.config` parses and
validates a file into these dataclasses once, at the edge. Everything downstream takes these
objects and never re-checks free strings.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Literal, get_args

__all__ = [
    "MAX_ABS_VALUE",
    "MAX_SHOTS",
    "KernelFamily",
    "Encoding",
    "Evolution",
    "Method",
    "EVOLUTION_USES_BLOCK_ENCODING",
    "Strategy",
    "Engine",
    "Rotation",
    "TrotterOrder",
    "DataSpec",
    "KernelSpec",
    "NoiseSpec",
    "CircuitSettings",
    "ReadoutSettings",
    "Config",
    "choices",
]

KernelFamily = Literal["rbf", "matern32", "matern52", "wendland"]
# The inversion methods and block encodings are registries in the circuits stage
# (qgp.circuits.methods.METHODS, qgp.circuits.methods.encodings.ENCODINGS). `qgp.config` sits before
# that stage and may not import it, so it validates against these declarations, which
# tests/circuits/test_methods.py checks list exactly the registries' names (and uses_block_encoding).
Encoding = Literal["lcu", "dilation"]
Evolution = Literal["exact", "trotter", "walk"]
#: ``[circuit] method``: phase-estimation inversion (with an ``evolution`` oracle and a clock) or the
#: quantum singular value transformation of the ``encoding`` (qgp.circuits.qsvt).
Method = Literal["phase_estimation", "qsvt"]

#: For each ``[circuit] evolution``: whether ``[circuit] encoding`` applies to it (the method's
#: ``uses_block_encoding``).
EVOLUTION_USES_BLOCK_ENCODING: dict[str, bool] = {"exact": False, "trotter": False, "walk": True}
Strategy = Literal["auto", "amortised", "per-point", "hybrid"]
#: Statevector engine: numpy where it applies (auto), always numpy, or always qiskit-aer.
Engine = Literal["auto", "numpy", "aer"]
Rotation = Literal["inverse", "inverse_sqrt"]
TrotterOrder = Literal[1, 2]


def choices(literal_type) -> tuple:
    """The allowed values of a ``Literal`` type, for validation and error messages."""
    return get_args(literal_type)


#: Largest |value| read from a CSV: GP sums of squares (‖y‖², distances²) overflow float64 near
#: √(1.8e308) ≈ 1.3e154; 1e150 leaves room for sums over 10⁴ rows.
MAX_ABS_VALUE = 1e150

#: Most shots per test point: counts stay exact in float64 (2⁵³) and fit numpy's C long.
MAX_SHOTS = 2**53


@dataclass(frozen=True)
class DataSpec:
    """``[data]``: CSV files (header row), the target column, and prior-mean centring.

    ``n_train`` keeps a reproducible random subset of that many training rows (in file order),
    drawn from a permutation seeded by ``subsample_seed``: subsets for growing n are nested.
    """

    train: Path
    target: str
    test: Path | None = None
    center: bool = True
    n_train: int | None = None
    subsample_seed: int = 0


@dataclass(frozen=True)
class KernelSpec:
    """``[kernel]``: family and hyperparameters.

    For ``wendland`` the lengthscale is the support radius and ``smoothness`` picks
    φ_{3,1} (1) or φ_{3,2} (2). ``support`` (any family) multiplies the kernel by the
    taper φ_{3,1}(distance / support).
    """

    family: KernelFamily = "rbf"
    lengthscale: float | tuple[float, ...] = 1.0
    amplitude: float = 1.0
    support: float | None = None
    fit: bool = False
    smoothness: Literal[1, 2] = 1


@dataclass(frozen=True)
class NoiseSpec:
    """``[noise]``: either a fixed variance σ² or a target condition number κ of A = K + σ²I."""

    variance: float | None = None
    target_condition: float | None = None


@dataclass(frozen=True)
class CircuitSettings:
    """``[circuit]``: the inversion circuit.

    ``method = "phase_estimation"`` (the default): ``evolution``, ``clock_qubits`` and the rest.
    ``encoding`` applies only to methods that use a block encoding (``evolution = "walk"``; the
    other oracles need no block register). ``evolution_time`` and ``filter_floor`` override the values derived from
    the eigenvalue bounds. ``method = "qsvt"``: the polynomial of ``encoding``'s A/α with relative
    error ``target_error`` or of ``degree`` (exactly one); ``clock_qubits`` is then 0 (no clock).
    """

    clock_qubits: int = 8
    encoding: Encoding = "dilation"
    evolution: Evolution = "walk"
    trotter_steps: int = 4
    trotter_order: TrotterOrder = 2
    evolution_time: float | None = None
    filter_floor: float | None = None
    method: Method = "phase_estimation"
    target_error: float | None = None
    degree: int | None = None


@dataclass(frozen=True)
class ReadoutSettings:
    """``[readout]``: ``shots = 0`` means exact outcome probabilities."""

    shots: int = 0
    seed: int = 20261202
    strategy: Strategy = "auto"
    memory_cap_bytes: int | None = None
    engine: Engine = "auto"


@dataclass(frozen=True)
class Config:
    """A whole validated config file. ``source`` is the file it came from (None if built in code)."""

    data: DataSpec
    kernel: KernelSpec = KernelSpec()
    noise: NoiseSpec = NoiseSpec()
    circuit: CircuitSettings = CircuitSettings()
    readout: ReadoutSettings = ReadoutSettings()
    source: Path | None = None
