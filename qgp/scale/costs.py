"""Fault-tolerant cost of quantum GP inference against the classical GP, n = 10² … 10⁶.

For each inversion method the audit's fitted growth laws (`qgp.scale.growth`) give, at every n,
κ, λ_min and the sparsity s; the block encoding a device could build at that size is the
sparse-access one with α = s·‖A‖_max, its oracles table lookups of the n·s stored entries
(`qgp.scale.fault_tolerant`). Then, per test point and per estimate (the mean k*ᵀA⁻¹y and the
variance's k*ᵀA⁻¹k*, one estimate each):

- one circuit application = state preparation of y and of k* + the inversion's block-encoding
  calls (the method's own query model, `Algorithm.fault_tolerant_queries`, checked against
  qgp's counted circuits in tests/circuits/test_fault_tolerant_queries.py);
- the read-out estimates a Hadamard-test bias a·(estimate), with a = 1/κ in the worst case (the
  inversion's normalisation C ≈ λ_min, Harrow, Hassidim & Lloyd 2009): shots N = (κ/ε)² for
  relative error ε, or amplitude estimation with M = ⌈2πκ/ε⌉ Grover iterations, 2M + 1
  circuit applications (Brassard, Høyer, Mosca & Tapp 2002, Thm 12);
- Toffolis of all applications run one after another on a surface code (`surface_code_cost`).

The classical GP on the same n: a dense Cholesky factorisation, or conjugate gradients on the
(sparse) A with √κ-bounded iterations (`qgp.scale.classical_cost`), at a stated flop rate.

Omitted on the quantum side, so its costs are lower bounds in that respect: the clock's QFT and the
eigenvalue-conditioned rotation's arithmetic, the Clifford gates, routing, and the repetitions
amplitude estimation needs to lift its 8/π² success probability. Nothing here is a measurement of a
device: these are published cost formulas evaluated on fitted laws.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.scale.classical_cost import classical_gp_flops
from qgp.scale.fault_tolerant import (
    SurfaceCodeAssumptions,
    sparse_access_block_encoding,
    state_preparation_cost,
    surface_code_cost,
)
from qgp.scale.growth import GrowthFit, growth_value
from qgp.settings import CircuitSettings

__all__ = [
    "COST_METHODS",
    "LOOKUP_QUBIT_CAP",
    "COST_COLUMNS",
    "ScaleLaws",
    "CostRow",
    "cost_sizes",
    "cost_table",
    "crossovers",
]

#: The methods of the cost table: (key, figure label, circuit settings). At scale every method
#: calls the sparse-access block encoding, whatever encoding the simulated circuits use; Trotter is
#: listed so its row says why it has no model.
COST_METHODS: tuple[tuple[str, str, CircuitSettings], ...] = (
    ("walk", "phase estimation, qubitization walk", CircuitSettings(evolution="walk")),
    ("exact", "phase estimation, e^{iAt} by QSP", CircuitSettings(evolution="exact")),
    ("trotter", "phase estimation, Trotter", CircuitSettings(evolution="trotter")),
    ("qsvt", "QSVT", CircuitSettings(method="qsvt", target_error=0.01, clock_qubits=0)),
)


#: Largest bank of qubits one select-swap lookup may use. Fewest Toffolis alone would take banks of
#: ~√(n·s·b) qubits (606,276 logical qubits per call at n = 10⁵, s = 3·10⁴); this cap gives 4,804
#: qubits for 43× the Toffolis, a third of the space-time volume (measured with
#: `sparse_access_block_encoding`).
LOOKUP_QUBIT_CAP = 4096


@dataclass(frozen=True)
class ScaleLaws:
    """The audit's growth laws the costs extrapolate with.

    ``sparsity`` is None for a kernel without finite support (s = n). ``norm_max`` = ‖A‖_max =
    signal variance + σ², the same at every n.
    """

    condition_number: GrowthFit
    eigenvalue_min: GrowthFit
    sparsity: GrowthFit | None
    norm_max: float

    def at(self, n: np.ndarray) -> dict[str, np.ndarray]:
        """κ, λ_min, λ_max = κ·λ_min and s (≤ n) at each n; arrays shaped like ``n``."""
        n = np.asarray(n, dtype=float)
        kappa = np.maximum(growth_value(self.condition_number, n), 1.0 + 1e-12)
        lmin = growth_value(self.eigenvalue_min, n)
        s = n if self.sparsity is None else np.clip(growth_value(self.sparsity, n), 1.0, n)
        return {"condition_number": kappa, "eigenvalue_min": lmin, "eigenvalue_max": kappa * lmin, "sparsity": np.ceil(s)}


@dataclass(frozen=True)
class CostRow:
    """One (n, method) row of ``costs.csv``; quantum columns None where ``modelled`` is False."""

    n: int
    method: str
    label: str
    modelled: bool
    condition_number: float
    sparsity: int
    alpha: float
    block_condition_number: float
    clock_qubits: int | None
    block_encoding_calls: float | None
    toffolis_per_block_encoding_call: float | None
    toffolis_state_preparation: float | None
    toffolis_per_application: float | None
    readout_shots: float | None
    readout_amplitude_estimation: float | None
    toffolis_total: float | None
    logical_qubits: int | None
    code_distance: int | None
    physical_qubits: float | None
    quantum_seconds: float | None
    quantum_seconds_shots: float | None
    classical_cholesky_flops: float
    classical_cg_flops: float
    classical_cholesky_seconds: float
    classical_cg_seconds: float
    classical_best_seconds: float
    note: str

    def as_dict(self) -> dict:
        """Plain CSV/JSON-ready values."""
        out = {}
        for key, value in asdict(self).items():
            if isinstance(value, (np.floating, np.integer)):
                value = value.item()
            out[key] = value
        return out


COST_COLUMNS: tuple[str, ...] = tuple(CostRow.__dataclass_fields__)


def cost_sizes(n_min: int, n_max: int, per_decade: int) -> np.ndarray:
    """Log-spaced integer n from ``n_min`` to ``n_max`` inclusive, ``per_decade`` per decade."""
    decades = math.log10(n_max / n_min)
    points = max(2, int(round(decades * per_decade)) + 1)
    return np.unique(np.round(np.logspace(math.log10(n_min), math.log10(n_max), points)).astype(int))


def _row(n, key, label, settings, law, *, eps, test_points, surface, flop_rate, norm_max) -> CostRow:
    alg = algorithm_of(settings)
    kappa, lmin, lmax, s = (float(law[k]) for k in ("condition_number", "eigenvalue_min", "eigenvalue_max", "sparsity"))
    be = sparse_access_block_encoding(int(n), int(s), max_lookup_qubits=LOOKUP_QUBIT_CAP)
    # The construction pads s to a power of two with zero entries, so its α is s_pad·‖A‖_max.
    alpha = max(be.alpha_sparsity * norm_max, lmax)
    classical = classical_gp_flops(n, n * s, kappa, eps, test_points)
    chol_s = classical.cholesky / flop_rate
    cg_s = classical.conjugate_gradients / flop_rate
    base = dict(
        n=int(n),
        method=key,
        label=label,
        condition_number=kappa,
        sparsity=int(s),
        alpha=alpha,
        block_condition_number=alpha / lmin,
        classical_cholesky_flops=classical.cholesky,
        classical_cg_flops=classical.conjugate_gradients,
        classical_cholesky_seconds=chol_s,
        classical_cg_seconds=cg_s,
        classical_best_seconds=min(chol_s, cg_s),
    )
    gap = alg.fault_tolerant_gap(settings)
    if gap is not None:
        empty = dict.fromkeys(
            (f for f in COST_COLUMNS if f not in base and f not in ("modelled", "note")), None
        )
        return CostRow(**base, **empty, modelled=False, note=gap)
    q = alg.fault_tolerant_queries(settings, lambda_lo=lmin, lambda_hi=lmax, alpha=alpha, relative_error=eps)
    prep = state_preparation_cost(int(n), max_lookup_qubits=LOOKUP_QUBIT_CAP)
    per_app = 2.0 * prep.toffolis + q.block_encoding_calls * be.toffolis_per_call
    shots = (kappa / eps) ** 2
    grover = math.ceil(2.0 * math.pi * kappa / eps)
    applications = 2 * grover + 1
    estimates = 2 * test_points  # mean and variance at each test point
    total = estimates * applications * per_app
    total_shots = estimates * shots * per_app
    m = max(1, math.ceil(math.log2(n)))
    qubits = m + max(be.logical_qubits, prep.logical_qubits) + q.extra_qubits + 2  # + flag and Hadamard-test probe
    sc = surface_code_cost(qubits, total, surface)
    sc_shots = surface_code_cost(qubits, total_shots, surface)
    return CostRow(
        **base,
        modelled=True,
        clock_qubits=q.clock_qubits,
        block_encoding_calls=q.block_encoding_calls,
        toffolis_per_block_encoding_call=be.toffolis_per_call,
        toffolis_state_preparation=prep.toffolis,
        toffolis_per_application=per_app,
        readout_shots=shots,
        readout_amplitude_estimation=float(applications),
        toffolis_total=total,
        logical_qubits=qubits,
        code_distance=sc.code_distance,
        physical_qubits=sc.physical_qubits,
        quantum_seconds=sc.seconds,
        quantum_seconds_shots=sc_shots.seconds,
        note=q.model,
    )


def cost_table(
    laws: ScaleLaws,
    sizes,
    *,
    relative_error: float,
    test_points: int,
    surface: SurfaceCodeAssumptions,
    flop_rate: float,
    methods: tuple[tuple[str, str, CircuitSettings], ...] = COST_METHODS,
) -> tuple[CostRow, ...]:
    """Quantum and classical cost at each n for each method.

    Parameters
    ----------
    laws : ScaleLaws
        The audit's fitted laws.
    sizes : array of int, shape (k,)
        Training-set sizes n.
    relative_error : float
        ε of every estimate (the inversion's and the read-out's).
    test_points : int
        Test points predicted (mean and variance at each).
    surface : SurfaceCodeAssumptions
    flop_rate : float
        Classical flop/s.
    methods : tuple of (key, label, CircuitSettings)

    Returns
    -------
    tuple of CostRow, n-major.
    """
    sizes = np.asarray(sizes, dtype=int)
    values = laws.at(sizes)
    rows = []
    for i, n in enumerate(sizes):
        law = {k: v[i] for k, v in values.items()}
        for key, label, settings in methods:
            if settings.target_error is not None:
                settings = replace(settings, target_error=relative_error)
            rows.append(
                _row(
                    int(n), key, label, settings, law,
                    eps=relative_error, test_points=test_points, surface=surface, flop_rate=flop_rate, norm_max=laws.norm_max,
                )
            )
    return tuple(rows)


def crossovers(rows: tuple[CostRow, ...]) -> dict[str, int | None]:
    """Per modelled method, the smallest n whose quantum time beats the best classical one (None: none)."""
    out: dict[str, int | None] = {}
    for row in rows:
        if not row.modelled:
            continue
        out.setdefault(row.method, None)
        if out[row.method] is None and row.quantum_seconds < row.classical_best_seconds:
            out[row.method] = row.n
    return out
