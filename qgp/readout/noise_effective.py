"""The effective per-block gate-noise model: one depolarising channel after each top-level block.

A gate-level noisy simulation (qgp.readout.noise: a density matrix, or trajectories on the fully
transpiled circuit) is too large for qgp's realistic circuits. This model keeps the circuit's
top-level structure instead. A measurement-free gate-form circuit is split with
``decompose_circuit(circuit, open_repeats=True)`` into runs of pieces (an oracle call or a repeated
power of it, a QFT, a rotation, a state preparation, an H…). Each run is one *block* b: its
operator is the piece's operator applied ``repeat`` times, followed by a depolarising channel on
the block's k qubits,

    ρ → (1 − λ_b) ρ + λ_b · I/2^k ⊗ Tr_block ρ          (Nielsen & Chuang eq. 8.102, on k qubits)

    λ_b = 1 − (1 − p₂)^(r·n₂) · (1 − p₁)^(r·n₁),

with n₂ / n₁ the piece's two-qubit / non-virtual one-qubit gate counts in ``spec.basis`` (the
counts of `qgp.circuits.decomposition.piece_counts`, i.e. of `lower_piece`; ``rz`` is virtual and
error-free, `qgp.settings.VIRTUAL_GATES`), r the run's ``repeat``, p₂ = ``spec.two_qubit`` and
p₁ = ``spec.one_qubit``. λ_b is the probability that at least one gate of the block errs; the
model replaces "which gate, which Pauli" by complete depolarisation of the whole block. It is
exact where a block is one basis gate (or gates on one qubit set, since depolarising commutes
with unitaries on the same qubits) and an approximation otherwise (it spreads a local error over
the whole block).

The channel is realised exactly in expectation by a Pauli twirl: with probability λ_b apply a
uniformly random Pauli string of the 4^k on the block's qubits (identity included), i.e. an
independent uniform {I, X, Y, Z} per qubit — the uniform Pauli average of any operator is
Tr_block(·) ⊗ I/2^k (common practice).

Estimator, exactly stratified on "no block errs": with w₀ = Π_b (1 − λ_b),

    P(event) = w₀ · P_ideal + (1 − w₀) · E[P | at least one block errs].

The error-free part is exact (P_ideal is computed once, or given); only the second term is
sampled, by ``spec.trajectories`` trajectories drawn *conditioned* on at least one error: the
first erring block b with probability λ_b Π_{a<b}(1 − λ_a)/(1 − w₀) (inverse CDF on the
cumulative log survival products, stable for tiny λ), then every later block independently with
λ_a, then the Paulis. When 1 − w₀ < 1e-15 (every probability zero, or no noisy gate) no
trajectory is simulated and the answer is P_ideal.

Random stream (one ``np.random.default_rng(spec.seed)`` per call, so results are reproducible and
independent of batching): for each sampled circuit in order, (1) N uniforms choosing the first
erring block, (2) an (N, n_blocks) array of uniforms for the later blocks, (3) an (N, Σ_b k_b)
array of integers in [0, 4) — the Pauli on each block qubit (0 = I, 1 = X, 2 = Y, 3 = Z), blocks in
order and each block's qubits in run order, used only where the block errs. Circuits with
negligible 1 − w₀ draw nothing.

Simulation: each block is one dense matrix (the piece's own matrix, qiskit's `Operator` or Aer's
unitary simulator, to the power ``repeat``; cached per (piece, repeat); pieces above
`MAX_BLOCK_QUBITS` qubits are refused) applied to the statevector held as a tensor (one axis per
qubit, `_apply`), with the sampled Paulis right after the erring blocks. A trajectory starts from
the noiseless state after its first erring block: the noiseless states after every block are
computed once per circuit and kept when they fit under the cap. Global phases are dropped (they do
not change probabilities). Each final state is reduced at once to its marginal over the event
qubits; read-out flips are applied to those marginals by
`qgp.readout.noise.events_from_probabilities`, as for the gate-level methods. Trajectories are not
built as qiskit circuits: a circuit keeps its own copy of each dense gate's matrix (qiskit 2.x) and
64 trajectory circuits of a 15-qubit Hadamard test held ~1.3 GB (measured).

Sources: Nielsen & Chuang eq. 8.102 (depolarising channel); qiskit 2.x ``Operator``; qiskit-aer's
unitary simulator; qgp.readout.noise (read-out flips, `ProbabilityResult`).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
from qiskit import QuantumCircuit

from qgp.circuits.decomposition import DecomposedCircuit, Piece, decompose_circuit, piece_counts
from qgp.errors import QgpError
from qgp.memory import default_memory_cap, require_memory, statevector_bytes
from qgp.readout.noise import ProbabilityResult, check_events, events_from_probabilities, noisy_gate_counts
from qgp.settings import GateNoise

__all__ = ["MAX_BLOCK_QUBITS", "BlockModel", "block_errors", "effective_event_probabilities"]

#: Widest piece turned into a dense unitary: 16·4^12 bytes = 256 MiB per distinct (piece, repeat).
MAX_BLOCK_QUBITS = 12

# Below this 1 − w₀ the sampled term cannot move a probability by more than rounding: skip it.
_NEGLIGIBLE = 1e-15



# ---------------------------------------------------------------------------------------------
# The block model


@dataclass(frozen=True)
class BlockModel:
    """A circuit as blocks (the runs of its decomposition) with their depolarising parameters.

    Attributes
    ----------
    decomposition : DecomposedCircuit
        ``decompose_circuit(circuit, open_repeats=True)``; block b is ``decomposition.runs[b]``.
    lambdas : ndarray, shape (n_blocks,)
        λ_b = 1 − (1 − p₂)^(two_qubit[b]) · (1 − p₁)^(one_qubit[b]).
    two_qubit : ndarray of int, shape (n_blocks,)
        Two-qubit basis gates of block b: repeat × the piece's count.
    one_qubit : ndarray of int, shape (n_blocks,)
        Non-virtual one-qubit basis gates of block b (``rz`` excluded): repeat × the piece's count.
    qubits : tuple of tuple of int
        Circuit qubits of each block (the run's qubits, in the piece's order).
    no_error_probability : float
        w₀ = Π_b (1 − λ_b), the exact probability that no block errs.
    error_probability : float
        1 − w₀, computed without cancellation (−expm1 of the summed log survivals).
    """

    decomposition: DecomposedCircuit = field(repr=False)
    lambdas: np.ndarray
    two_qubit: np.ndarray
    one_qubit: np.ndarray
    qubits: tuple[tuple[int, ...], ...]
    no_error_probability: float
    error_probability: float

    @property
    def n_blocks(self) -> int:
        return int(self.lambdas.size)

    @property
    def two_qubit_gates(self) -> int:
        """The circuit's total two-qubit gate count Σ_b r·n₂ in the basis (what p* is plotted against)."""
        return int(self.two_qubit.sum())

    @property
    def one_qubit_gates(self) -> int:
        """The circuit's total non-virtual one-qubit gate count Σ_b r·n₁ in the basis."""
        return int(self.one_qubit.sum())


def _piece_gate_counts(piece: Piece, basis: tuple[str, ...]) -> tuple[int, int]:
    """(two-qubit, non-virtual one-qubit) gate counts of one piece lowered to ``basis``.

    `piece_counts` gives `lower_piece`'s counts, from the in-memory or disk cache when it can, so
    a circuit counted before (e.g. for the resource report) is not transpiled again."""
    return noisy_gate_counts(piece_counts(piece, tuple(basis)).counts)


def _log_survival(two: np.ndarray, one: np.ndarray, spec: GateNoise) -> np.ndarray:
    """log(1 − λ_b) per block: r·n₂·log(1 − p₂) + r·n₁·log(1 − p₁), with 0·log 0 taken as 0 (a block
    without gates of a kind is untouched by that kind even at p = 1)."""
    # p = 1 gives log 0 = −inf (the block always errs); np.where evaluates 0·(−inf) = nan too.
    with np.errstate(divide="ignore", invalid="ignore"):
        l2, l1 = np.log1p(-float(spec.two_qubit)), np.log1p(-float(spec.one_qubit))
        return np.where(two > 0, two * l2, 0.0) + np.where(one > 0, one * l1, 0.0)


def _model(decomp: DecomposedCircuit, spec: GateNoise) -> BlockModel:
    per_piece = {key: _piece_gate_counts(piece, spec.basis) for key, piece in decomp.pieces.items()}
    two = np.array([run.repeat * per_piece[run.key][0] for run in decomp.runs], dtype=np.int64)
    one = np.array([run.repeat * per_piece[run.key][1] for run in decomp.runs], dtype=np.int64)
    log_s = _log_survival(two, one, spec)
    lambdas = -np.expm1(log_s) + 0.0  # 1 − e^{log s}, accurate when λ is tiny (+0.0: no −0.0)
    total = float(log_s.sum())
    for a in (two, one, lambdas):
        a.setflags(write=False)  # the dataclass is frozen; keep its arrays so too
    return BlockModel(
        decomposition=decomp,
        lambdas=lambdas,
        two_qubit=two,
        one_qubit=one,
        qubits=tuple(run.qubits for run in decomp.runs),
        no_error_probability=float(np.exp(total)),
        error_probability=float(-np.expm1(total)),
    )


def block_errors(circuit: QuantumCircuit, spec: GateNoise) -> BlockModel:
    """The effective model's blocks of ``circuit`` and their depolarising parameters under ``spec``.

    Parameters
    ----------
    circuit : QuantumCircuit
        Measurement-free gate-form circuit (any width: only gate counts are needed here).
    spec : GateNoise
        ``two_qubit``, ``one_qubit`` and ``basis`` are used (any ``method``).

    Returns
    -------
    BlockModel
        λ, gate counts and qubits per block (arrays of shape (n_blocks,)), and w₀.
    """
    return _model(decompose_circuit(circuit, open_repeats=True), spec)


# ---------------------------------------------------------------------------------------------
# Sampling trajectories conditioned on at least one error


def _sample_errors(lambdas, n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """``n`` draws of which blocks err, conditioned on at least one erring.

    The first erring block is drawn by inverse CDF: P(first ≤ b) = (1 − Π_{a≤b}(1 − λ_a)) / (1 − w₀),
    from cumulative log survivals (−expm1 keeps tiny λ exact); every later block then errs
    independently with its λ (blocks are independent, so conditioning on the first fixes only
    the earlier ones). Draws ``n`` uniforms, then an (n, n_blocks) array of uniforms.

    Parameters
    ----------
    lambdas : array_like, shape (n_blocks,)
        λ_b in [0, 1], at least one positive.
    n : int
    rng : numpy.random.Generator

    Returns
    -------
    first : ndarray of int, shape (n,)
        The first erring block of each draw.
    errs : ndarray of bool, shape (n, n_blocks)
        Which blocks err (``errs[i, first[i]]`` is True, none before it).
    """
    lam = np.asarray(lambdas, dtype=float)
    with np.errstate(divide="ignore"):
        cum = np.cumsum(np.log1p(-lam))
    total = -np.expm1(cum[-1])
    if not total > 0:
        raise QgpError("no block can err (every λ is 0); there is nothing to sample")
    cdf = -np.expm1(cum) / total  # non-decreasing, last entry exactly 1
    u = rng.random(n)
    # side="right": the first b with u < cdf[b]; a block with λ = 0 (cdf flat) is never chosen.
    first = np.minimum(np.searchsorted(cdf, u, side="right"), lam.size - 1)
    later = rng.random((n, lam.size)) < lam
    errs = later & (np.arange(lam.size)[None, :] > first[:, None])
    errs[np.arange(n), first] = True
    return first, errs


# ---------------------------------------------------------------------------------------------
# Simulation


def _marginal(sv: np.ndarray, n: int, saved: list[int]) -> np.ndarray:
    """Probabilities over the qubits ``saved``, shape (2^k,), bit j of an index being qubit
    ``saved[j]`` (the layout `events_from_probabilities` reads), from an n-qubit statevector."""
    p = (sv.real**2 + sv.imag**2).reshape((2,) * n)  # axis n−1−q is qubit q (little-endian)
    keep = [n - 1 - q for q in reversed(saved)]  # wanted axis order: saved[k−1] first
    summed = tuple(ax for ax in range(n) if ax not in keep)
    m = p.sum(axis=summed) if summed else p
    remaining = sorted(keep)  # sum keeps the other axes in increasing order
    return np.ascontiguousarray(m.transpose([remaining.index(ax) for ax in keep])).reshape(-1)


#: Pieces on at least this many qubits without a matrix of their own are multiplied out by Aer's
#: unitary simulator: qiskit's `Operator` composes a definition one gate at a time on the whole
#: 4^k matrix (the 10-qubit flag rotation of an 8-clock-qubit circuit, 1025 gates: 19.5 s, Aer 1.4 s,
#: equal to 5e-15; measured here).
AER_UNITARY_QUBITS = 7


def _piece_operator(op) -> np.ndarray:
    """The matrix of one piece (qiskit's qubit order): its own ``to_matrix`` when it has one, else
    `Operator` for small pieces and Aer's unitary simulator for wide ones."""
    from qiskit import QuantumCircuit, transpile
    from qiskit.circuit.exceptions import CircuitError
    from qiskit.quantum_info import Operator

    try:
        return np.asarray(op.to_matrix(), dtype=complex)
    except (AttributeError, CircuitError):
        pass
    if op.num_qubits < AER_UNITARY_QUBITS:
        return Operator(op).data
    from qiskit_aer import AerSimulator

    sim = AerSimulator(method="unitary")
    qc = QuantumCircuit(op.num_qubits)
    qc.append(op, range(op.num_qubits))
    qc = transpile(qc, sim, optimization_level=0)
    qc.save_unitary()
    result = sim.run(qc).result()
    if not result.success:
        raise QgpError(f"Aer could not multiply out piece {op.name!r}: {result.status}")
    return np.asarray(result.get_unitary(qc), dtype=complex)


def _block_matrices(model: BlockModel, cache: dict[tuple[str, int], np.ndarray]) -> list[np.ndarray]:
    """One matrix per block: the piece's operator to the power ``repeat``, built once per (piece
    digest, repeat) in ``cache`` — shared by the circuits of one call, which share their
    phase-estimation pieces."""
    decomp = model.decomposition
    out = []
    for run in decomp.runs:
        key = (run.key, run.repeat)
        if key not in cache:
            u = _piece_operator(decomp.pieces[run.key].operation)
            if run.repeat > 1:
                u = np.linalg.matrix_power(u, run.repeat)  # repeated squaring: O(log r) products
            cache[key] = u
        out.append(cache[key])
    return out


def _unitary_bytes(models: list[BlockModel]) -> int:
    """Memory of the distinct block unitaries of all ``models`` (kept for the whole call), plus
    matrix_power's temporaries for the widest."""
    sizes = {(run.key, run.repeat): 16 * 4 ** len(run.qubits) for m in models for run in m.decomposition.runs}
    return sum(sizes.values()) + 3 * max(sizes.values(), default=0)


def _cap(cap_bytes: int | None) -> int:
    return default_memory_cap() if cap_bytes is None else int(cap_bytes)


def _apply(state: np.ndarray, u: np.ndarray, qubits: tuple[int, ...]) -> np.ndarray:
    """``u`` (2^k × 2^k, index bit j = ``qubits[j]``, qiskit's order) applied to an n-qubit state
    held as a tensor of shape (2,)·n whose axis n−1−q is qubit q; returns a new tensor."""
    n, k = state.ndim, len(qubits)
    axes = [n - 1 - q for q in reversed(qubits)]  # u's row/column bits, most significant first
    out = np.tensordot(u.reshape((2,) * (2 * k)), state, axes=(list(range(k, 2 * k)), axes))
    return np.moveaxis(out, list(range(k)), axes)


#: Codes 1, 2, 3 of the sampled Paulis (code 0, the identity, applies nothing).
_PAULIS = (None, np.array([[0, 1], [1, 0]], complex), np.array([[0, -1j], [1j, 0]]), np.array([[1, 0], [0, -1]], complex))


def _prefix_states(n: int, mats, model: BlockModel, keep: bool) -> list[np.ndarray]:
    """The noiseless state after each block (``keep``), or only the final one; index 0 is |0…0⟩."""
    state = np.zeros((2,) * n, dtype=complex)
    state[(0,) * n] = 1.0
    out = [state]
    for u, qubits in zip(mats, model.qubits):
        state = _apply(state, u, qubits)
        if keep:
            out.append(state)
    return out if keep else [out[0], state]


def _trajectory(prefix: list[np.ndarray], mats, model: BlockModel, first: int, errs, paulis, offsets) -> np.ndarray:
    """Final state of one trajectory: the noiseless state after block ``first`` (``prefix``, or
    recomputed), then each erring block's sampled Paulis, the blocks after each."""
    if len(prefix) > 2:
        state = prefix[first + 1]
    else:
        state = prefix[0]
        for u, qubits in zip(mats[: first + 1], model.qubits[: first + 1]):
            state = _apply(state, u, qubits)
    for b in range(first, len(mats)):
        if b > first:
            state = _apply(state, mats[b], model.qubits[b])
        if errs[b]:
            for j, q in enumerate(model.qubits[b]):
                code = int(paulis[offsets[b] + j])
                if code:
                    state = _apply(state, _PAULIS[code], (q,))
    return state


def _check_pieces(decomp: DecomposedCircuit, name: str) -> None:
    for piece in decomp.pieces.values():
        if piece.n_qubits > MAX_BLOCK_QUBITS:
            raise QgpError(
                f"the effective noise model needs a dense unitary per block, but piece {piece.name!r} of "
                f"{name!r} acts on {piece.n_qubits} qubits (most {MAX_BLOCK_QUBITS}); use method='trajectories' or fewer qubits"
            )


def effective_event_probabilities(
    circuits, events, spec: GateNoise, *, ideal=None, cap_bytes: int | None = None
) -> ProbabilityResult:
    """Probability of each event under the effective per-block model of ``spec``.

    Parameters
    ----------
    circuits : list of QuantumCircuit
        Measurement-free gate-form circuits; every top-level piece on at most `MAX_BLOCK_QUBITS`
        qubits.
    events : list of list of dict[int, int]
        ``events[i]`` lists circuit i's events, each a dict qubit index → 0/1 (qiskit's order).
    spec : GateNoise
        ``method`` must be ``"effective"``; ``trajectories`` sampled per circuit, ``seed`` the
        sampler's seed.
    ideal : list of array_like, optional
        ``ideal[i]``, shape (len(events[i]),): circuit i's noiseless event probabilities *before*
        read-out flips, so the error-free part is not simulated again. Used only when
        ``spec.readout == 0``: flips mix events, so they need the noiseless distribution over the
        event qubits, which is then simulated (one noiseless run per circuit).
    cap_bytes : int, optional
        Memory cap; default half the available memory (`qgp.memory.default_memory_cap`).

    Returns
    -------
    ProbabilityResult
        ``method="effective"``; ``trajectories = spec.trajectories``; ``samples[i]`` of shape
        (N, n_events_i): the conditioned trajectories' event probabilities after flips (a circuit
        with 1 − w₀ < 1e-15 simulates none and holds its ideal row once); ``ideal_weight[i]`` = w₀;
        ``ideal[i]`` the noiseless event probabilities after flips; ``probabilities[i]`` =
        w₀·ideal + (1 − w₀)·mean(samples) and ``standard_errors[i]`` = (1 − w₀)·std(samples,
        ddof=1)/√N (zeros when nothing, or a single trajectory, was sampled), shapes
        (n_events_i,). ``seconds``: building and simulating the circuits (gate counting excluded).
    """
    if spec.method != "effective":
        raise QgpError(
            f"the effective model needs GateNoise method 'effective', not {spec.method!r}; "
            "gate-level methods run in qgp.readout.noise.event_probabilities"
        )
    circuits = list(circuits)
    if len(events) != len(circuits):
        raise QgpError(f"got {len(events)} event lists for {len(circuits)} circuits; give one list per circuit")
    if ideal is not None and len(ideal) != len(circuits):
        raise QgpError(f"got {len(ideal)} ideal arrays for {len(circuits)} circuits; give one per circuit or none")
    saved = [check_events(ev, c.num_qubits) for c, ev in zip(circuits, events)]
    readout = float(spec.readout)
    given = None
    if ideal is not None and readout == 0:
        given = [np.asarray(v, dtype=float).reshape(-1) for v in ideal]
        for i, (v, ev) in enumerate(zip(given, events)):
            if v.shape != (len(ev),):
                raise QgpError(f"ideal[{i}] has {v.size} values for {len(ev)} events; give one per event")
    # Decompose and refuse oversized pieces before any counting, lowering or allocation.
    decomps = [decompose_circuit(c, open_repeats=True) for c in circuits]
    for c, d in zip(circuits, decomps):
        _check_pieces(d, c.name)
    n_traj = int(spec.trajectories)
    for c, s, ev in zip(circuits, saved, events):
        require_memory(
            # the state, tensordot's output and the prefix's first and last states; the marginals
            4 * statevector_bytes(c.num_qubits) + 8 * n_traj * (1 << len(s)) + 8 * n_traj * len(ev),
            f"an effective-noise trajectory of '{c.name}' on {c.num_qubits} qubits",
            cap_bytes,
        )
    models = [_model(d, spec) for d in decomps]
    widest = max((c.num_qubits for c in circuits), default=0)
    require_memory(
        statevector_bytes(widest) + _unitary_bytes(models),
        "the dense block unitaries of the effective noise model (16·4^k bytes per distinct block)",
        cap_bytes,
    )

    rng = np.random.default_rng(int(spec.seed))
    cache: dict[tuple[str, int], np.ndarray] = {}
    start = time.perf_counter()
    means, errors, samples, weights, ideals = [], [], [], [], []
    for i, (c, m, s, ev) in enumerate(zip(circuits, models, saved, events)):
        n = c.num_qubits
        mats = _block_matrices(m, cache)
        # The noiseless state after every block is shared by the trajectories whose first error
        # comes later: kept when it fits under the cap (else each trajectory recomputes its prefix).
        keep = (m.n_blocks + 3) * statevector_bytes(n) + _unitary_bytes(models) <= _cap(cap_bytes)
        prefix = _prefix_states(n, mats, m, keep)
        if given is not None:
            ideal_i = given[i]
        else:
            noiseless = _marginal(prefix[-1].reshape(-1), n, s)[None, :]
            ideal_i = events_from_probabilities(noiseless, s, ev, readout)[0]
        w0 = m.no_error_probability
        if m.error_probability < _NEGLIGIBLE:
            # Nothing can err (p = 0 or no noisy gate): the noiseless answer, no trajectory.
            rows = ideal_i[None, :]
            value, se = ideal_i.copy(), np.zeros(len(ev))
        else:
            first, errs = _sample_errors(m.lambdas, n_traj, rng)
            offsets = np.concatenate([[0], np.cumsum([len(q) for q in m.qubits])])
            paulis = rng.integers(0, 4, size=(n_traj, int(offsets[-1])), dtype=np.int8)
            marginals = np.array(
                [
                    _marginal(_trajectory(prefix, mats, m, int(first[t]), errs[t], paulis[t], offsets).reshape(-1), n, s)
                    for t in range(n_traj)
                ]
            )
            rows = events_from_probabilities(marginals, s, ev, readout)
            # The error-free part is exact: only (1 − w₀)·E[P | an error] carries sampling error.
            value = w0 * ideal_i + m.error_probability * rows.mean(axis=0)
            se = (
                m.error_probability * rows.std(axis=0, ddof=1) / np.sqrt(n_traj)
                if n_traj > 1
                else np.zeros(len(ev))
            )
        means.append(value)
        errors.append(se)
        samples.append(rows)
        weights.append(float(w0))
        ideals.append(ideal_i)
    seconds = time.perf_counter() - start
    return ProbabilityResult(
        tuple(means),
        tuple(errors),
        "effective",
        n_traj,
        seconds,
        samples=tuple(samples),
        ideal_weight=tuple(weights),
        ideal=tuple(ideals),
    )
