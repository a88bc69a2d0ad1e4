"""The quantum singular value transformation (QSVT) of a Hermitian block encoding.

Gilyén, Su, Low & Wiebe, STOC 2019 (arXiv:1806.01838), Thm. 17 and Cor. 18; Martyn, Rossi, Tan &
Chuang, PRX Quantum 2, 040203 (2021), Sec. IV. For a Hermitian unitary U with ⟨0|U|0⟩_block = A/α,
each eigenvector |u⟩ of A (A u = λu, x = λ/α) spans with U|0⟩|u⟩ a plane on which U is the
reflection R(x) = [[x, √(1−x²)], [√(1−x²), −x]] and the projector-controlled phase e^{iφ(2Π−I)},
Π = |0⟩⟨0|_block ⊗ I, is e^{iφZ}. The sequence

    e^{iφ₀(2Π−I)} · U · e^{iφ₁(2Π−I)} · U ⋯ U · e^{iφ_d(2Π−I)}

therefore has ⟨0|·|0⟩_block = Q(A/α), Q(x) = ⟨0|e^{iφ₀Z} R(x) e^{iφ₁Z} ⋯ R(x) e^{iφ_dZ}|0⟩. With
R(x) = −i·e^{iπ/4 Z} W(x) e^{iπ/4 Z}, W(x) = e^{i·arccos(x)·X}, reflection phases φ relate to the
W-convention phases ψ of `qgp.circuits.qsp` by φ₀ = ψ₀ − π/4, φ_j = ψ_j − π/2, φ_d = ψ_d − π/4 and
Q = (−i)^d·P_ψ. One signal qubit ``a`` in |+⟩ runs the sequence with +φ (a = 0) and −φ (a = 1); R
is real, so the second branch gives Q̄, and with the relative phase (−1)^d between the branches
(a Z on ``a`` when d is odd) and the global phase i^d the block on a = 0 after the closing Hadamard
is Re P_ψ(A/α) = f(A/α), the real polynomial the phases were solved for (GSLW Cor. 18's
linear-combination trick).

Registers, as for phase estimation (qgp.circuits.inversion) with no clock:

    system (m) | flag (1) | block (b + 1)

``block`` holds the block encoding's b qubits and, last, the signal qubit. A closing multiplexed X
sets ``flag`` = 1 exactly on block = 0 (signal included), so the post-selection is the same as
phase estimation's (flag = 1, block = 0) and P(flag = 1) is the success probability ‖f(A/α)b‖².

Two forms of one operator: ``"gate"`` (the encoding's own circuit per call, projector phases as an
open-controlled X on the signal, RZ, and the X again; what resources and OpenQASM count) and
``"simulation"`` (each call fused with the phase that follows it into one multiplexer over the
signal qubit with blocks D±·U, when U fits in `_MAX_FUSED_QUBITS`; above that U and a diagonal).
"""

from __future__ import annotations

import math

import numpy as np
from qiskit.circuit import QuantumCircuit, QuantumRegister
from qiskit.circuit.library import DiagonalGate, HGate, RZGate, UnitaryGate, XGate, ZGate

from qgp.circuits.encoding import BLOCK, SYSTEM, BlockEncoding, MultiplexerGate
from qgp.circuits.phase_estimation import Form, _check_form
from qgp.errors import QgpError

__all__ = ["FLAG", "PROBE", "reflection_phases", "qsvt_circuit", "qsvt_block", "qsvt_calls"]

FLAG = "flag"
PROBE = "probe"

# Largest U (system + block qubits) fused with its phases into one multiplexer in the simulation
# form: two 2^10 × 2^10 blocks are 32 MB.
_MAX_FUSED_QUBITS = 10


def reflection_phases(wx_phases) -> np.ndarray:
    """Reflection-convention phases φ from W-convention phases ψ (module docstring).

    Parameters
    ----------
    wx_phases : array, shape (d + 1,)
        ψ₀…ψ_d with Re⟨0|e^{iψ₀Z} W e^{iψ₁Z} ⋯ W e^{iψ_dZ}|0⟩ = f(x) (qgp.circuits.qsp).

    Returns
    -------
    ndarray, shape (d + 1,)
    """
    psi = np.asarray(wx_phases, dtype=float).reshape(-1)
    if psi.size < 2:
        raise QgpError("a QSVT sequence needs at least one block-encoding call (two phases)")
    phi = psi - np.pi / 2
    phi[0] = psi[0] - np.pi / 4
    phi[-1] = psi[-1] - np.pi / 4
    return phi


def qsvt_calls(wx_phases) -> int:
    """Block-encoding calls of the sequence: d = len(phases) − 1."""
    return int(np.asarray(wx_phases).size) - 1


def _phase_diagonal(phi: float, b: int) -> np.ndarray:
    """e^{±iφ(2Π−I)} over [block (b), signal], little-endian: + on signal = 0, − on signal = 1."""
    reflect = -np.ones(2**b)
    reflect[0] = 1.0  # 2Π − I: +1 on block = 0
    return np.concatenate((np.exp(1j * phi * reflect), np.exp(-1j * phi * reflect)))


def qsvt_circuit(be: BlockEncoding, wx_phases, form: Form = "gate", *, probe: bool = False) -> QuantumCircuit:
    """The QSVT of ``be`` with the polynomial whose W-convention phases are ``wx_phases``.

    Parameters
    ----------
    be : BlockEncoding
        Hermitian (U = U†), as qgp's ``lcu`` and ``dilation`` encodings are built.
    wx_phases : array, shape (d + 1,)
        Symmetric QSP phases (`qgp.circuits.qsp.qsp_phases`), d ≥ 1.
    form : "gate" or "simulation"
    probe : bool
        Add a last qubit ``probe`` and run the whole sequence (global phase i^d included) only
        on probe = 0; probe = 1 leaves system and block untouched, so its flag ends at 1 — the
        controlled operation of a Hadamard test of ⟨l|f(A/α)|r⟩. Gate form: the signal's
        Hadamards, the RZ of each phase and every call of U are controlled on probe = 0 (open
        control); the phases' X on the signal need no control, as on probe = 1 they flip a
        signal that nothing else touches and flip it back.

    Returns
    -------
    QuantumCircuit
        On registers system (m), flag (1), block (b + 1) [, probe (1)]; from |0⟩ on flag and
        block its amplitudes on flag = 1, block = 0 are f(A/α) applied to the system input.
    """
    _check_form(form)
    phi = reflection_phases(wx_phases)
    d = phi.size - 1
    m, b = be.n_system_qubits, be.n_block_qubits
    regs = [QuantumRegister(m, SYSTEM), QuantumRegister(1, FLAG), QuantumRegister(b + 1, BLOCK)]
    if probe:
        regs.append(QuantumRegister(1, PROBE))
    qc = QuantumCircuit(*regs, name=f"qsvt-{be.kind}")
    system, flag, block = regs[0], regs[1], regs[2]
    enc, signal = list(block[:b]), block[b]
    ctrl = [regs[3][0]] if probe else []
    opening = (_Z if d % 2 else np.eye(2)) @ _H  # H, then Z: relative phase (−1)^d between the ±φ branches
    if probe and form == "gate":
        qc.append(HGate().control(1, ctrl_state=0), [*ctrl, signal])
        if d % 2:
            qc.append(ZGate().control(1, ctrl_state=0), [*ctrl, signal])
        # i^d on probe = 0 only: the global phase i^d, undone on probe = 1 by a phase gate.
        qc.global_phase += d * math.pi / 2
        qc.p(-d * math.pi / 2, ctrl[0])
    elif probe:
        # i^d on the active branch only: a global phase would also turn the probe = 1 branch.
        qc.append(MultiplexerGate([1j**d * opening, np.eye(2)], label="open"), [signal, *ctrl], copy=False)
    else:
        qc.h(signal)
        if d % 2:
            qc.z(signal)
        qc.global_phase += d * math.pi / 2  # i^d
    fused = form == "simulation" and m + b <= _MAX_FUSED_QUBITS
    _append_phase(qc, float(phi[d]), enc, signal, form, ctrl)
    if fused:
        u = be.matrix()
        # D±·U for each call, D± the phase that follows it: one multiplexer over the signal.
        cache: dict[float, MultiplexerGate] = {}
        dim = 2**m
        for j in range(d - 1, -1, -1):
            key = float(phi[j])
            if key not in cache:
                diag = _phase_diagonal(key, b)
                blocks = [np.repeat(diag[s * 2**b : (s + 1) * 2**b], dim)[:, None] * u for s in (0, 1)]
                cache[key] = MultiplexerGate(blocks + [np.eye(u.shape[0])] * (2 * len(ctrl)), label="U·phase")
            qc.append(cache[key], [*system, *enc, signal, *ctrl], copy=False)
    else:
        if form == "simulation":
            calls = _native_calls(be, len(ctrl))
        else:
            u_gate = be.circuit.to_gate()
            if ctrl:
                u_gate = u_gate.control(1, ctrl_state=0)
            calls = [(u_gate, ([m + 2 + b] if ctrl else []) + list(range(m)) + list(range(m + 1, m + 1 + b)))]
        for j in range(d - 1, -1, -1):
            for gate, qubits in calls:
                qc.append(gate, [qc.qubits[i] for i in qubits], copy=False)
            _append_phase(qc, float(phi[j]), enc, signal, form, ctrl)
    if probe and form == "gate":
        qc.append(HGate().control(1, ctrl_state=0), [*ctrl, signal])
    elif probe:
        qc.append(MultiplexerGate([_H, np.eye(2)], label="close"), [signal, *ctrl], copy=False)
    else:
        qc.h(signal)
    _append_flag(qc, flag[0], list(block), form)
    return qc


_H = np.array([[1, 1], [1, -1]], dtype=complex) / math.sqrt(2)
_Z = np.diag([1.0, -1.0]).astype(complex)


def _native_calls(be: BlockEncoding, n_ctrl: int = 0) -> list[tuple]:
    """One call of U as instructions the simulators apply natively, on circuit qubit indices
    (system 0…m−1, block m+1…m+b, then the signal and ``n_ctrl`` probe qubits): for the LCU,
    PREPARE on the block, SELECT as one multiplexer over the block (sign(c_j)·P_j, identity on
    unused values) and PREPARE†; otherwise U dense. With a probe, each acts on probe = 0 only."""
    m, b = be.n_system_qubits, be.n_block_qubits
    system, enc = list(range(m)), list(range(m + 1, m + 1 + b))
    probe = list(range(m + 2 + b, m + 2 + b + n_ctrl))

    def gate(u: np.ndarray, label: str):
        if not n_ctrl:
            return UnitaryGate(u, label=label, check_input=False)
        return MultiplexerGate([u, np.eye(u.shape[0])], label=label)

    if be.pauli_op is None or be.prepare_matrix is None:
        return [(gate(be.matrix(), "U"), system + enc + probe)]
    eye = np.eye(2**m, dtype=complex)
    mats = [eye] * 2**b
    for j, (pauli, c) in enumerate(zip(be.pauli_op.paulis, be.pauli_op.coeffs.real)):
        mats[j] = np.sign(c) * pauli.to_matrix()
    prep = np.asarray(be.prepare_matrix, dtype=complex)
    return [
        (gate(prep, "prepare"), enc + probe),
        (MultiplexerGate(mats + [eye] * (2**b * n_ctrl), label="select"), system + enc + probe),
        (gate(prep.conj().T, "prepare_dg"), enc + probe),
    ]


def _append_phase(qc: QuantumCircuit, phi: float, enc: list, signal, form: Form, ctrl: list = ()) -> None:
    """e^{iφ(2Π−I)} on signal = 0 and e^{−iφ(2Π−I)} on signal = 1 (on probe = 0 only, with ``ctrl``)."""
    if form == "simulation":
        diag = _phase_diagonal(phi, len(enc))
        if ctrl:
            diag = np.concatenate((diag, np.ones_like(diag)))
        qc.append(DiagonalGate(list(diag)), [*enc, signal, *ctrl])
        return
    # X on the signal when block = 0 (open controls), RZ(2φ), X again (GSLW Fig. 1).
    cx = XGate().control(len(enc), ctrl_state=0, annotated=False)
    qc.append(cx, [*enc, signal])
    if ctrl:
        qc.append(RZGate(2 * phi).control(1, ctrl_state=0), [*ctrl, signal])
    else:
        qc.rz(2 * phi, signal)
    qc.append(cx, [*enc, signal])


def _append_flag(qc: QuantumCircuit, flag, block: list, form: Form) -> None:
    """flag ⊕= [block = 0] (block includes the signal)."""
    if form == "simulation":
        eye, x = np.eye(2, dtype=complex), np.array([[0, 1], [1, 0]], dtype=complex)
        qc.append(MultiplexerGate([x] + [eye] * (2 ** len(block) - 1), label="flag"), [flag, *block], copy=False)
        return
    qc.append(XGate().control(len(block), ctrl_state=0, annotated=False), [*block, flag])


def qsvt_block(circuit: QuantumCircuit, m: int) -> np.ndarray:
    """The 2^m × 2^m block of ``circuit`` (a `qsvt_circuit`) from flag = 0, block = 0 to flag = 1,
    block = 0: f(A/α). Column by column from qiskit's Statevector (for tests and small checks;
    a dense Operator of a wide LCU circuit is far slower)."""
    from qiskit.quantum_info import Statevector

    dim = 2**m
    cols = [Statevector.from_int(j, 2**circuit.num_qubits).evolve(circuit).data[dim : 2 * dim] for j in range(dim)]
    return np.column_stack(cols)  # output index s + 2^m·1 (flag = 1, block = 0)
