"""Loading data into qubits: amplitude encoding, Pauli decomposition and block encodings of A.

Qubit order follows qiskit: ``system[0]`` is the least significant bit, so amplitude ``j`` of the
``system`` register is entry ``j`` of the input vector (training row ``j``, never reordered).

A block encoding of a real symmetric matrix A is a unitary U on ``system`` ⊗ ``block`` with

    (⟨0|_block ⊗ I) U (|0⟩_block ⊗ I) = A/α,

α ≥ ‖A‖ the subnormalisation. ``block`` qubits come after the ``system`` qubits, so in U's matrix
(index = system + 2^m · block) the top-left 2^m × 2^m block is A/α. Both encodings here are
Hermitian as built (U² = I), which the qubitization walk of `qgp.circuits.phase_estimation` needs
(Low & Chuang, Quantum 3, 163 (2019)).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from qiskit.circuit import Gate, QuantumCircuit, QuantumRegister
from qiskit.circuit.library import UCRYGate, UnitaryGate
from qiskit.quantum_info import Operator, PauliList, SparsePauliOp

from qgp import memory
from qgp.errors import QgpError

__all__ = [
    "SYSTEM",
    "BLOCK",
    "BlockEncoding",
    "MultiplexerGate",
    "amplitude_encoding",
    "amplitude_encoding_matrix",
    "normalised_amplitudes",
    "pauli_decomposition",
    "pauli_terms_bound",
    "pauli_decomposition_bytes",
    "pauli_term_bounds",
    "require_decomposition_memory",
    "lcu_block_qubits",
    "lcu_alpha",
    "dilation_alpha",
    "lcu_block_encoding",
    "dilation_block_encoding",
    "block_encoding",
    "check_matrix",
]

SYSTEM = "system"
BLOCK = "block"

# Pauli coefficients below this are round-off of a dense transform, not terms of A.
_PAULI_CUTOFF = 1e-14
# Relative asymmetry accepted as round-off of a symmetric matrix.
_SYMMETRY_RTOL = 1e-10


class MultiplexerGate(Gate):
    """Σ_k |k⟩⟨k|_controls ⊗ U_k on qubits [targets…, controls…] (first control least significant).

    Aer's native ``multiplexer`` instruction: it applies each block U_k to its slice of the
    statevector in one pass. The matrix (for `Operator` and tests) is block-diagonal in the order
    k = 0, 1, …; the definition is that one unitary, so gate-level tools can still read it.
    """

    def __init__(self, matrices, label: str | None = None):
        # One contiguous (K, d, d) array; the parameters are views of its blocks (no second copy).
        try:
            stack = np.ascontiguousarray(np.asarray(matrices, dtype=complex))
        except ValueError:
            raise QgpError("a multiplexer needs 2^k square matrices of one size") from None
        n_ctrl = len(stack).bit_length() - 1
        if stack.ndim != 3 or len(stack) != 1 << n_ctrl or stack.shape[1] != stack.shape[2]:
            raise QgpError("a multiplexer needs 2^k square matrices of one size")
        n_target = stack.shape[1].bit_length() - 1
        super().__init__("multiplexer", n_target + n_ctrl, list(stack), label=label)
        self.stack = stack

    def validate_parameter(self, parameter):
        return parameter  # matrices, passed to Aer as they are

    def __array__(self, dtype=None, copy=None):
        mats = self.params
        dim = mats[0].shape[0]
        out = np.zeros((dim * len(mats),) * 2, dtype=complex)
        for k, m in enumerate(mats):
            out[k * dim : (k + 1) * dim, k * dim : (k + 1) * dim] = m
        return out if dtype is None else out.astype(dtype)

    def _define(self):
        qc = QuantumCircuit(self.num_qubits, name=self.name)
        qc.append(UnitaryGate(np.asarray(self), check_input=False), qc.qubits)
        self.definition = qc

    def inverse(self, annotated: bool = False):
        """Σ_k |k⟩⟨k| ⊗ U_k†; ``adjoint_of`` names this gate (a simulator may reuse its work)."""
        gate = MultiplexerGate(np.conjugate(self.stack.transpose(0, 2, 1), out=np.empty_like(self.stack)), label=self.label)
        gate.adjoint_of = self
        return gate


def _num_qubits_of(length: int, what: str) -> int:
    if length < 1 or length & (length - 1):
        raise QgpError(
            f"{what} has length {length}, not a power of two; pad the problem to 2^m rows "
            "(the padding step of the kernel module does this) before building circuits"
        )
    return length.bit_length() - 1


def normalised_amplitudes(vector) -> np.ndarray:
    """The real unit vector b/‖b‖ that amplitude encoding loads; checks length and values."""
    b = np.asarray(vector, dtype=float).reshape(-1)
    _num_qubits_of(b.size, "the vector to encode")
    if not np.all(np.isfinite(b)):
        raise QgpError("the vector to encode has NaN or infinite entries; clean the data first")
    norm = float(np.linalg.norm(b))
    if norm == 0.0:
        raise QgpError("the vector to encode is all zeros; there is no state to prepare")
    return b / norm


def _tree_levels(v: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """(target qubit, angles) of each level of the RY tree for the real unit vector ``v``.

    Level l rotates qubit n−1−l by θ = 2·atan2(b, a), uniformly controlled by the l more
    significant qubits, where a, b are the norms of the two halves of the current block. At the
    last level a, b are the signed entries themselves, so RY(θ) with θ in (−2π, 2π] puts the
    signs in. The angle index is j >> (target+1): the value of qubits target+1 … n−1 with qubit
    target+1 least significant, which is how UCRYGate indexes its controls.
    """
    n = v.size.bit_length() - 1
    levels = []
    for level in range(n):
        target = n - 1 - level
        blocks = v.reshape(2**level, 2, 2 ** (n - 1 - level))
        if level == n - 1:
            a, b = blocks[:, 0, 0], blocks[:, 1, 0]
        else:
            a = np.linalg.norm(blocks[:, 0, :], axis=1)
            b = np.linalg.norm(blocks[:, 1, :], axis=1)
        levels.append((target, 2 * np.arctan2(b, a)))
    return levels


def _real_amplitude_tree(
    amplitudes: np.ndarray, reg: QuantumRegister, name: str, native: bool = False
) -> QuantumCircuit:
    """A fixed unitary with |0…0⟩ ↦ Σ_j v_j|j⟩ for a real unit vector v: a binary tree of RYs.

    (Grover & Rudolph, arXiv:quant-ph/0208112 (2002); Möttönen et al., QIC 5, 467 (2005)); levels
    as in `_tree_levels`. Only RY and uniformly controlled RY: a real orthogonal matrix, exact
    under any transpilation, whose inverse is the exact inverse (the LCU needs
    PREPARE† = PREPARE⁻¹). ``native`` writes each uniformly controlled RY as a `MultiplexerGate`
    (the same operator, which Aer applies without transpiling).
    """
    v = np.asarray(amplitudes, dtype=float)
    qc = QuantumCircuit(reg, name=name)
    for level, (target, angles) in enumerate(_tree_levels(v)):
        if level == 0:
            qc.ry(float(angles[0]), reg[target])
        elif native:
            qc.append(MultiplexerGate([_ry(t) for t in angles]), [reg[target], *reg[target + 1 :]])
        else:
            qc.append(UCRYGate([float(t) for t in angles]), [reg[target], *reg[target + 1 :]])
    return qc


def _ry(theta: float) -> np.ndarray:
    c, s = np.cos(theta / 2), np.sin(theta / 2)
    return np.array([[c, -s], [s, c]], dtype=complex)


def amplitude_encoding_matrix(vector) -> np.ndarray:
    """The real orthogonal matrix of `amplitude_encoding` (column 0 is b/‖b‖), computed in numpy."""
    v = normalised_amplitudes(vector)
    dim = v.size
    u = np.eye(dim)
    for target, angles in _tree_levels(v):
        # rows j = (controls, target bit, lower bits); rotate each target pair by its angle
        w = u.reshape(dim >> (target + 1), 2, 1 << target, dim)
        c = np.cos(angles / 2)[:, None, None]
        s = np.sin(angles / 2)[:, None, None]
        a0, a1 = w[:, 0].copy(), w[:, 1].copy()
        w[:, 0] = c * a0 - s * a1
        w[:, 1] = s * a0 + c * a1
        u = w.reshape(dim, dim)
    return u


def amplitude_encoding(vector, name: str = SYSTEM, *, native: bool = False) -> QuantumCircuit:
    """Circuit on register ``name`` preparing Σ_j b_j/‖b‖ |j⟩ from |0…0⟩ (``name[0]`` least significant).

    Uses the real RY tree rather than qiskit's ``StatePreparation``: same state, but a fixed
    real unitary whose inverse is exact, and Aer 0.18 crashed on the multiplexers that
    ``StatePreparation.inverse()`` transpiles to. ``native``: the uniformly controlled RYs as
    `MultiplexerGate` s (simulation form; same operator).
    """
    b = normalised_amplitudes(vector)
    reg = QuantumRegister(_num_qubits_of(b.size, "the vector to encode"), name)
    return _real_amplitude_tree(b, reg, "encode", native)


def check_matrix(A) -> np.ndarray:
    """A as a float array after checking it is square, power-of-two sized, finite and symmetric."""
    a = np.asarray(A)
    if np.iscomplexobj(a):
        if np.any(np.abs(a.imag) > 0):
            raise QgpError("the matrix has complex entries; qgp expects a real symmetric matrix")
        a = a.real
    a = np.array(a, dtype=float)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise QgpError(f"the matrix has shape {a.shape}; it must be square")
    _num_qubits_of(a.shape[0], "the matrix")
    if not np.all(np.isfinite(a)):
        raise QgpError("the matrix has NaN or infinite entries; check the kernel hyperparameters")
    scale = max(float(np.max(np.abs(a))), np.finfo(float).tiny)
    asym = float(np.max(np.abs(a - a.T)))
    if asym > _SYMMETRY_RTOL * scale:
        raise QgpError(
            f"the matrix is not symmetric (max |A - Aᵀ| = {asym:.3g}); pass the symmetric kernel "
            "matrix K + σ²I"
        )
    return 0.5 * (a + a.T)


def _walsh_hadamard(x: np.ndarray) -> np.ndarray:
    """Unnormalised Walsh–Hadamard transform along the last axis: y_z = Σ_j (−1)^{z·j} x_j."""
    y = np.array(x, dtype=float)
    n = y.shape[-1]
    h = 1
    while h < n:
        y = y.reshape(*y.shape[:-1], n // (2 * h), 2, h)
        a, b = y[..., 0, :], y[..., 1, :]
        y = np.stack((a + b, a - b), axis=-2).reshape(*y.shape[:-3], n)
        h *= 2
    return y


def pauli_terms_bound(num_qubits: int) -> int:
    """Most Pauli strings a real symmetric 2^m × 2^m matrix can have: those with an even number
    of Y, (4^m + 2^m)/2 (Σ_P (−1)^{#Y} = (3 − 1)^m = 2^m over the 4^m strings)."""
    m = int(num_qubits)
    return (4**m + 2**m) // 2


# Memory of `pauli_decomposition`, measured with tracemalloc on dense random symmetric matrices
# (m = 6 … 11, every allowed term kept; numpy's allocations are traced): peak 141·4^m bytes at
# m = 6 up to 148·4^m at m = 11 (0.62 GB; 4.3 s here), against the formula's 142.2 and 148.5.
#   work arrays: 66 bytes per matrix entry — A and its checked copy, A[j, j⊕x], the transform,
#     the x and z masks, their AND, the Y count, the coefficients and the keep mask (8 or 1 each);
#   per term, at the peak: 132 + 3m bytes — the kept masks (16), the symplectic bits and their
#     int64 temporaries, the PauliList and SparsePauliOp copies; the result keeps 24 + 2m per term
#     (measured 38.2 at m = 7, 46.0 at m = 11: a complex coefficient, 2m bits, an 8-byte phase);
#   beyond m ≈ 17 the symplectic temporaries (16 + 10m per term) are the larger peak.
_PAULI_WORK_BYTES_PER_ENTRY = 66


def pauli_decomposition_bytes(num_qubits: int, n_terms: int | None = None) -> int:
    """Peak bytes `pauli_decomposition` allocates for a 2^m × 2^m matrix with ``n_terms`` Pauli
    strings (default: `pauli_terms_bound`): 66·4^m + T·max(132 + 3m, 16 + 10m) (see above)."""
    m = int(num_qubits)
    t = pauli_terms_bound(m) if n_terms is None else int(n_terms)
    return _PAULI_WORK_BYTES_PER_ENTRY * 4**m + t * max(132 + 3 * m, 16 + 10 * m)


def pauli_term_bounds(A) -> tuple[int, int]:
    """(lower, upper) bounds on the Pauli strings `pauli_decomposition` keeps, without decomposing.

    For each X-mask x the coefficients are c_{x,z} = Σ_j (−1)^{z·j} A[j, j⊕x] / 2^m (up to sign),
    so with d_x the entries A[j, j⊕x]: every |c_{x,z}| ≤ ‖d_x‖₁/2^m, and by Parseval
    max_z |c_{x,z}| ≥ ‖d_x‖₂/2^m. A mask whose ‖d_x‖₁/2^m is below the cut-off keeps no term; one
    whose ‖d_x‖₂/2^m reaches it keeps at least one. The upper bound counts the z an x allows
    (2^m for x = 0, the 2^(m−1) with an even number of Y otherwise). One pass over A in row
    blocks (~16 MB of temporaries): 0.6 s for 8192 × 8192 here, against 73 s for the decomposition.
    """
    a = np.asarray(A)
    dim = a.shape[0]
    m = dim.bit_length() - 1
    s1 = np.zeros(dim)
    s2 = np.zeros(dim)
    cols = np.arange(dim)
    rows_per = max(1, (1 << 20) // dim)
    for r0 in range(0, dim, rows_per):
        block = np.abs(a[r0 : r0 + rows_per]).astype(float, copy=False)
        x = (np.arange(r0, r0 + block.shape[0])[:, None] ^ cols[None, :]).ravel()
        v = block.ravel()
        s1 += np.bincount(x, weights=v, minlength=dim)
        s2 += np.bincount(x, weights=v * v, minlength=dim)
    some = s1 / dim >= _PAULI_CUTOFF
    lower = int(np.count_nonzero(np.sqrt(s2) / dim >= _PAULI_CUTOFF))
    upper = int(np.count_nonzero(some[1:])) * 2 ** max(m - 1, 0) + (dim if some[0] else 0)
    return max(lower, 1), min(max(upper, 1), pauli_terms_bound(m))


def require_decomposition_memory(num_qubits: int, cap: int, n_terms: int | None = None) -> None:
    """Refuse, before anything is allocated, a Pauli decomposition that cannot fit under ``cap``
    (``n_terms``: a bound on the strings kept, default `pauli_terms_bound`)."""
    m = int(num_qubits)
    t = pauli_terms_bound(m) if n_terms is None else int(n_terms)
    need = pauli_decomposition_bytes(m, t)
    if need > cap:
        dim = 2**m
        raise QgpError(
            f"the LCU encoding's Pauli decomposition of the {dim}×{dim} padded matrix needs about "
            f"{need / 2**30:.3g} GiB (up to {t:,} Pauli strings, "
            f"{max(132 + 3 * m, 16 + 10 * m)} B each, and {_PAULI_WORK_BYTES_PER_ENTRY} B per matrix entry of "
            f"work arrays), above the memory cap of {cap / 2**30:.3g} GiB; use [circuit] encoding = \"dilation\" "
            "or fewer training points ([data] n_train)"
        )


def pauli_decomposition(A) -> SparsePauliOp:
    """A = Σ_P c_P P over Pauli strings, c_P = Tr(P A)/2^m real for real symmetric A.

    Writes P = i^{|x∧z|} X^x Z^z (qubit-wise bit masks x, z). Then
    Tr(X^x Z^z A) = Σ_j (−1)^{z·j} A[j, j⊕x], so for each x one Walsh–Hadamard transform over j
    gives every z at once: O(4^m · m) work instead of 4^m traces. Terms with an odd number of Y
    are imaginary-weighted and vanish for real symmetric A; terms with |c| < 1e-14 are dropped.

    Refuses first (`require_decomposition_memory`, with `pauli_term_bounds`) when its arrays
    cannot fit in the memory the process has left (`qgp.memory.available_memory_bytes`);
    inference and inspection check the configured cap before calling it.
    """
    shape = np.shape(A)
    if len(shape) == 2 and shape[0] == shape[1] and shape[0] >= 1 and not shape[0] & (shape[0] - 1):
        m = shape[0].bit_length() - 1
        cap = memory.available_memory_bytes()
        if pauli_decomposition_bytes(m) > cap:  # the bound alone is too much: count the masks of A
            require_decomposition_memory(m, cap, pauli_term_bounds(A)[1])
    a = check_matrix(A)
    dim = a.shape[0]
    m = _num_qubits_of(dim, "the matrix")
    j = np.arange(dim)
    x = np.arange(dim)
    # rows: x mask; columns: j. d[x, j] = A[j, j⊕x]
    d = a[j[None, :], j[None, :] ^ x[:, None]]
    traces = _walsh_hadamard(d)  # traces[x, z] = Tr(X^x Z^z A)
    xs, zs = np.meshgrid(x, x, indexing="ij")
    both = xs & zs
    n_y = sum((both >> q) & 1 for q in range(m))  # qubits carrying a Y
    # c = i^{n_y} Tr(X^x Z^z A)/2^m; only even n_y survive for real A, with sign (−1)^{n_y/2}.
    even = n_y % 2 == 0
    coeffs = np.where(even, traces * (-1.0) ** (n_y // 2), 0.0) / dim
    keep = np.abs(coeffs) >= _PAULI_CUTOFF
    if not np.any(keep):
        raise QgpError("the matrix is zero; there is nothing to invert")
    bits = 1 << np.arange(m)
    xk, zk = xs[keep], zs[keep]
    x_bits = (xk[:, None] & bits[None, :]) != 0
    z_bits = (zk[:, None] & bits[None, :]) != 0
    paulis = PauliList.from_symplectic(z_bits, x_bits)
    return SparsePauliOp(paulis, coeffs[keep].astype(complex))


@dataclass(frozen=True)
class BlockEncoding:
    """A Hermitian unitary U on registers ``system`` (m qubits) and ``block`` with top-left block A/α.

    ``kind`` is ``"lcu"`` or ``"dilation"``; ``n_pauli_terms`` is the number of Pauli strings the
    LCU selects over (0 for the dilation). ``unitary`` holds U as a dense matrix when it was
    built densely (the dilation); `matrix()` computes it otherwise.
    """

    circuit: QuantumCircuit
    alpha: float
    kind: Literal["lcu", "dilation"]
    n_system_qubits: int
    n_block_qubits: int
    n_pauli_terms: int
    unitary: np.ndarray | None = field(default=None, repr=False, compare=False)
    pauli_op: SparsePauliOp | None = field(default=None, repr=False, compare=False)
    prepare_matrix: np.ndarray | None = field(default=None, repr=False, compare=False)

    def matrix(self) -> np.ndarray:
        """U as a dense matrix, index = system + 2^m · block.

        For the LCU it is assembled from its parts, U = Σ_j V†|j⟩⟨j|V ⊗ Q_j with V = PREPARE and
        Q_j = sign(c_j)·P_j (I for unused j), not by simulating the circuit gate by gate.
        """
        if self.unitary is not None:
            return self.unitary
        if self.pauli_op is not None and self.prepare_matrix is not None:
            return _lcu_matrix(self.pauli_op, self.prepare_matrix)
        return Operator(self.circuit).data

    def encoded_block(self) -> np.ndarray:
        """(⟨0|_block ⊗ I) U (|0⟩_block ⊗ I), which equals A/α."""
        dim = 2**self.n_system_qubits
        return self.matrix()[:dim, :dim]


def _signed_pauli_gate(pauli, negative: bool, m: int):
    """The gate ±P on m qubits (global phase π for −P, which matters once controlled)."""
    qc = QuantumCircuit(m, name=("-" if negative else "") + pauli.to_label())
    for q in range(m):
        xq, zq = bool(pauli.x[q]), bool(pauli.z[q])
        if xq and zq:
            qc.y(q)
        elif xq:
            qc.x(q)
        elif zq:
            qc.z(q)
    if negative:
        qc.global_phase = np.pi
    return qc.to_gate()


def _lcu_matrix(op: SparsePauliOp, v: np.ndarray) -> np.ndarray:
    dim_b, dim_s = v.shape[0], 2**op.num_qubits
    q = np.empty((dim_b, dim_s, dim_s), dtype=complex)
    q[:] = np.eye(dim_s)
    for j, (pauli, c) in enumerate(zip(op.paulis, op.coeffs.real)):
        q[j] = np.sign(c) * pauli.to_matrix()
    outer = np.einsum("ja,jb->jab", v.conj(), v).reshape(dim_b, -1)
    u = (outer.T @ q.reshape(dim_b, -1)).reshape(dim_b, dim_b, dim_s, dim_s)
    return u.transpose(0, 2, 1, 3).reshape(dim_b * dim_s, dim_b * dim_s)


def lcu_block_encoding(A) -> BlockEncoding:
    """U = PREPARE† · SELECT · PREPARE over A's Pauli decomposition A = Σ_j c_j P_j.

    PREPARE|0⟩ = Σ_j √(|c_j|/α)|j⟩ on ``block``; SELECT applies sign(c_j)·P_j on ``system`` when
    ``block`` = j (identity on unused block values). α = Σ_j |c_j|. SELECT is Hermitian (each
    ±P_j is), so U is Hermitian for any PREPARE; then ⟨0|U|0⟩_block = Σ_j (|c_j|/α) sign(c_j) P_j
    = A/α.
    """
    op = pauli_decomposition(A)
    coeffs = op.coeffs.real
    n_terms = len(coeffs)
    m = op.num_qubits
    alpha = lcu_alpha(op)
    k = lcu_block_qubits(n_terms)
    amps = np.zeros(2**k)
    amps[:n_terms] = np.sqrt(np.abs(coeffs) / alpha)
    amps /= np.linalg.norm(amps)  # guard round-off; the sum of |c_j|/α is 1 by construction
    system = QuantumRegister(m, SYSTEM)
    block = QuantumRegister(k, BLOCK)
    qc = QuantumCircuit(system, block, name="lcu")
    prepare = _real_amplitude_tree(amps, QuantumRegister(k, "b"), "prepare").to_gate()
    qc.append(prepare, block[:])
    for j, (pauli, c) in enumerate(zip(op.paulis, coeffs)):
        gate = _signed_pauli_gate(pauli, c < 0, m)
        qc.append(gate.control(k, ctrl_state=j, annotated=False), [*block, *system])
    qc.append(prepare.inverse(), block[:])
    return BlockEncoding(
        circuit=qc,
        alpha=alpha,
        kind="lcu",
        n_system_qubits=m,
        n_block_qubits=k,
        n_pauli_terms=n_terms,
        pauli_op=op,
        prepare_matrix=Operator(prepare).data,
    )


def _row_sum_bound(a: np.ndarray) -> float:
    """max_i Σ_j |A_ij| ≥ ‖A‖₂ for symmetric A (Gershgorin: it bounds every |λ|)."""
    return float(np.max(np.sum(np.abs(a), axis=1)))


def dilation_alpha(A, norm: float | None = None) -> float:
    """The dilation's α: the row-sum bound max_i Σ_j |A_ij|, raised to ``norm`` (‖A‖, when known)
    if round-off left it below. Cheap: no eigensolve and no unitary.

    Parameters
    ----------
    A : array, shape (2^m, 2^m)
    norm : float, optional
        ‖A‖ (the largest |eigenvalue|).

    Returns
    -------
    float
    """
    alpha = _row_sum_bound(np.asarray(A, dtype=float))
    return alpha if norm is None else max(alpha, float(norm))


def lcu_alpha(op: SparsePauliOp) -> float:
    """The LCU's α = Σ_P |c_P| over a Pauli decomposition (`pauli_decomposition`)."""
    return float(np.sum(np.abs(op.coeffs.real)))


def lcu_block_qubits(n_terms: int) -> int:
    """Block qubits of the LCU over ``n_terms`` Pauli strings: max(1, ⌈log₂ T⌉)."""
    return max(1, (int(n_terms) - 1).bit_length())


def dilation_block_encoding(A, alpha: float | None = None) -> BlockEncoding:
    """One-ancilla dilation U = [[B, S], [S, −B]], B = A/α, S = √(I − B²).

    S is built from A's eigendecomposition, so B and S commute and U² = I (U Hermitian and
    unitary). α defaults to the row-sum (Gershgorin) bound on ‖A‖; an α below ‖A‖ is refused
    because √(I − B²) would not exist.
    """
    a = check_matrix(A)
    m = _num_qubits_of(a.shape[0], "the matrix")
    evals, evecs = np.linalg.eigh(a)
    norm = float(np.max(np.abs(evals)))
    if norm == 0.0:
        raise QgpError("the matrix is zero; there is nothing to invert")
    if alpha is None:
        alpha = _row_sum_bound(a)
    alpha = float(alpha)
    if not np.isfinite(alpha) or alpha < norm * (1 - 1e-12):
        raise QgpError(
            f"dilation subnormalisation alpha={alpha:.6g} is below the matrix norm {norm:.6g}; "
            "pass alpha ≥ ‖A‖ or leave it unset to use the row-sum bound"
        )
    alpha = max(alpha, norm)
    mu = evals / alpha
    b = a / alpha
    s = (evecs * np.sqrt(np.clip(1.0 - mu**2, 0.0, None))) @ evecs.T
    s = 0.5 * (s + s.T)
    u = np.block([[b, s], [s, -b]])
    system = QuantumRegister(m, SYSTEM)
    block = QuantumRegister(1, BLOCK)
    qc = QuantumCircuit(system, block, name="dilation")
    qc.append(UnitaryGate(u, label="dilation", check_input=False), [*system, *block])
    return BlockEncoding(
        circuit=qc,
        alpha=alpha,
        kind="dilation",
        n_system_qubits=m,
        n_block_qubits=1,
        n_pauli_terms=0,
        unitary=u.astype(complex),
    )


def block_encoding(A, kind: Literal["lcu", "dilation"]) -> BlockEncoding:
    """The block encoding ``kind`` (the ``[circuit] encoding`` setting) of A, built by its entry of
    the registry qgp.circuits.methods.encodings.ENCODINGS (`QgpError` naming the choices otherwise)."""
    from qgp.circuits.methods.encodings import get_encoding

    return get_encoding(kind).build(A)
