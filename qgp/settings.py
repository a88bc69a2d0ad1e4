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
    "GateNoise",
    "NoiseMethod",
    "FitSettings",
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
    ``labels``: (column, label with unit) pairs for figure axes, e.g. ("ice_cm", "ice thickness (cm)").
    """

    train: Path
    target: str
    test: Path | None = None
    center: bool = True
    n_train: int | None = None
    subsample_seed: int = 0
    labels: tuple[tuple[str, str], ...] = ()


@dataclass(frozen=True)
class KernelSpec:
    """``[kernel]``: family and hyperparameters.

    For ``wendland`` the lengthscale is the support radius and ``smoothness`` picks
    φ_{3,1} (1) or φ_{3,2} (2). ``support`` (any family) multiplies the kernel by the
    taper φ_{3,1}(distance / support).
    """

    family: KernelFamily = "rbf"
    lengthscale: float | tuple[float, ...] = 1.0
    signal_variance: float = 1.0
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


#: ``[gate_noise] method``: exact density matrix or trajectories of the gate-level circuit, or the
#: per-block effective model simulated by trajectories (qgp.readout.noise_effective).
NoiseMethod = Literal["density_matrix", "trajectories", "effective"]

#: Gate names a device runs without error: rz is a frame change in the control software
#: (common practice in device noise models).
VIRTUAL_GATES = frozenset({"rz"})


def gate_arity(name: str) -> int:
    """Qubits of a qiskit standard gate named ``name`` (one-line `QgpError` if unknown)."""
    from qiskit.circuit.library import get_standard_gate_name_mapping

    from qgp.errors import QgpError

    gate = get_standard_gate_name_mapping().get(name)
    if gate is None:
        raise QgpError(f"unknown basis gate {name!r}; use qiskit standard gate names such as rz, sx, x, cx")
    return gate.num_qubits


@dataclass(frozen=True)
class GateNoise:
    """``[gate_noise]``: depolarising gate errors and read-out flips; checked on construction.

    Parameters
    ----------
    two_qubit, one_qubit : float
        Depolarising parameters λ in [0, 1] after each two-qubit / non-virtual one-qubit gate
        (ρ → (1 − λ)ρ + λ I/d, Nielsen & Chuang eq. 8.102).
    readout : float
        Symmetric read-out flip probability r in [0, 1].
    basis : tuple of str
        Gate-level basis the circuits are compiled to; one- and two-qubit gates, one of them two-qubit.
    method : {"density_matrix", "trajectories", "effective"}
    trajectories : int
        Noise samples per circuit for ``trajectories`` and ``effective``, at least 1.
    seed : int
        Seed of the trajectory sampler (the lowering to the basis is deterministic).
    """

    two_qubit: float = 0.0
    one_qubit: float = 0.0
    readout: float = 0.0
    basis: tuple[str, ...] = ("rz", "sx", "x", "cx")
    method: NoiseMethod = "effective"
    trajectories: int = 1000
    seed: int = 0

    def __post_init__(self) -> None:
        object.__setattr__(self, "basis", tuple(str(b) for b in self.basis))
        self.check()

    def check(self) -> None:
        """Raise `QgpError` (one line, naming the fix) for a setting that cannot run."""
        from qgp.errors import QgpError

        for name in ("two_qubit", "one_qubit", "readout"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 <= float(value) <= 1.0:
                raise QgpError(
                    f"gate_noise {name} = {value!r} is outside [0, 1]; give a probability in [0, 1] "
                    "(qgp keeps depolarising λ ≤ 1 although Aer accepts up to 4^n/(4^n−1))"
                )
        arity = {b: gate_arity(b) for b in self.basis}
        if any(n > 2 for n in arity.values()):
            raise QgpError(f"gate_noise basis {list(self.basis)} has gates on more than two qubits; use one- and two-qubit gates only")
        if 2 not in arity.values():
            raise QgpError(f"gate_noise basis {list(self.basis)} has no two-qubit gate; add one such as 'cx'")
        if self.method not in choices(NoiseMethod):
            raise QgpError(f"gate_noise method {self.method!r} is unknown; use one of {list(choices(NoiseMethod))}")
        if isinstance(self.trajectories, bool) or not isinstance(self.trajectories, int) or self.trajectories < 1:
            raise QgpError(f"gate_noise trajectories = {self.trajectories!r}; use an integer of at least 1")
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or self.seed < 0:
            raise QgpError(f"gate_noise seed = {self.seed!r}; use a non-negative integer")

    @property
    def is_ideal(self) -> bool:
        """True when every probability is zero (the noisy answer is the noiseless one)."""
        return self.two_qubit == 0 and self.one_qubit == 0 and self.readout == 0


#: ``[scale] order``: nested subsets from the ``subsample_seed`` permutation, or in file order.
ScaleOrder = Literal["permutation", "file"]


@dataclass(frozen=True)
class ScaleSettings:
    """``[scale]``: the conditioning audit and the fault-tolerant cost model (``qgp scale``).

    Audit: nested subsets n = ``n_min``, 2·n_min, … ≤ ``n_max`` (and the data's size), at the
    fixed ``[noise] variance`` and at the σ² that ``target_condition`` needs. Costs: n from
    ``cost_n_min`` to ``cost_n_max`` (``cost_points_per_decade`` per decade) for ``test_points``
    test points, each estimate to relative error ``relative_error``; surface code at
    ``physical_error`` with ``cycle_seconds`` per code cycle and a total failure probability
    ``failure_budget``; the classical GP at ``classical_flop_rate`` flop/s (None: measured).
    """

    n_min: int = 64
    n_max: int = 2**17
    order: ScaleOrder = "permutation"
    target_condition: float = 100.0
    relative_error: float = 0.01
    test_points: int = 1
    cost_n_min: int = 100
    cost_n_max: int = 10**6
    cost_points_per_decade: int = 4
    physical_error: float = 1e-3
    cycle_seconds: float = 1e-6
    failure_budget: float = 0.01
    classical_flop_rate: float | None = None


@dataclass(frozen=True)
class FitSettings:
    """``[fit]``: the log marginal likelihood from the circuits and ML-II with it (``qgp fit``).

    ``sizes``: the circuit sizes of the error study — clock qubits for phase estimation, the
    (odd) inversion degree for QSVT (its log polynomial has degree + 1); empty: the config's own
    size and its neighbours. ``probes``: 0 for the log-determinant on the maximally mixed state,
    R > 0 for R Rademacher states (Hutchinson). ML-II: Nelder–Mead on the log-hyperparameters from
    the kernel's own values and ``restarts`` seeded random starts, at most ``max_evaluations``
    circuit estimates per start, inside a-priori κ_b = λ_hi/λ_lo ≤ ``max_condition`` (None: the
    config problem's own κ_b — the circuits lose small eigenvalues beyond what they are built for).
    ``surface_points``: points of each hyperparameter's LML slice.
    """

    sizes: tuple[int, ...] = ()
    max_condition: float | None = None
    probes: int = 0
    restarts: int = 1
    max_evaluations: int = 120
    surface_points: int = 13


@dataclass(frozen=True)
class Config:
    """A whole validated config file. ``source`` is the file it came from (None if built in code)."""

    data: DataSpec
    kernel: KernelSpec = KernelSpec()
    noise: NoiseSpec = NoiseSpec()
    circuit: CircuitSettings = CircuitSettings()
    readout: ReadoutSettings = ReadoutSettings()
    #: ``[gate_noise]``; None (no section) means the noiseless circuits only.
    gate_noise: GateNoise | None = None
    #: ``[scale]`` (defaults when the section is absent).
    scale: ScaleSettings = ScaleSettings()
    #: ``[fit]`` (defaults when the section is absent).
    fit: FitSettings = FitSettings()
    source: Path | None = None
