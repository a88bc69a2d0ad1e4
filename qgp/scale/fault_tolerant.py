"""What a fault-tolerant (surface-code) run would cost: table lookups, block encoding, state
preparation, and the surface-code footprint and run time of a Toffoli count.

Every count here is a cost formula evaluated, not a circuit built: published formulas, except
the multi-level distillation factories, marked as this model's own construction. Each function's
docstring names the paper and the place in it, and says whether the formula was checked against
the source text ("verified") or written from memory ("from memory"); where an outside library
(Google's ``qualtran``, a test-only dependency) implements the same construction, the tests in
``tests/scale/test_fault_tolerant.py`` compare the two counts.

Conventions. "Toffolis" counts Toffoli-class gates (Toffoli, temporary logical-AND, controlled
SWAP), each 4 T gates in the surface-code model (Gidney 2018, "Halving the cost of quantum
addition", Quantum 2, 74: four T gates per temporary logical-AND, zero to erase it; verified
from the abstract). Clifford gates are free. Entries ``L`` of a table and its word size ``b``
(bits) are positive integers; block sizes ``λ`` of select-swap lookups are powers of two.

The lookups' formulas are the papers' leading counts: the constructions in qualtran save O(1)
Toffolis per lookup (an uncontrolled unary iteration saves one AND, for instance); the tests
state the exact offsets.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from qgp.errors import QgpError

__all__ = [
    "DEFAULT_BITS",
    "FIFTEEN_TO_ONE_CLOCK_CYCLES",
    "FIFTEEN_TO_ONE_TILES",
    "LAYOUTS",
    "BlockEncodingCost",
    "StatePreparationCost",
    "SurfaceCodeAssumptions",
    "SurfaceCodeCost",
    "data_block_tiles",
    "distilled_error",
    "factory_tiles",
    "logical_error_rate",
    "lookup_uncompute_toffolis",
    "optimal_select_swap_block",
    "optimal_uncompute_block",
    "phase_gradient_rotation_toffolis",
    "qrom_ancillas",
    "qrom_toffolis",
    "qubits_per_tile",
    "select_swap_qubits",
    "select_swap_toffolis",
    "sparse_access_block_encoding",
    "state_preparation_cost",
    "surface_code_cost",
]

#: Default word size (bits) of looked-up values and rotation angles. Rounding each stored entry
#: of A/‖A‖_max to b bits perturbs A/α (α = s·‖A‖_max) by at most 2^-b in operator norm (each row
#: has s entries, each off by ≤ 2^-b/s of α: the Schur test bound ‖E‖ ≤ s·max|E_ij|); the
#: inversion amplifies that by κ_α = α/λ_min, so the relative solution error is ≲ κ_α·2^-b.
#: b = 20 (2^-20 ≈ 1e-6) keeps that below 1e-2 for κ_α up to 10^4; pass more bits for worse
#: conditioned systems (each bit halves the rounding error and adds λ Toffolis to a select-swap
#: lookup's swap network). Own derivation, not a paper's.
DEFAULT_BITS = 20


def _positive_int(name: str, value) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        if isinstance(value, (float, np.floating)) and float(value).is_integer():
            value = int(value)
        else:
            raise QgpError(f"{name} must be a positive integer, got {value!r}; pass a whole number ≥ 1.")
    value = int(value)
    if value < 1:
        raise QgpError(f"{name} must be a positive integer, got {value}; pass a whole number ≥ 1.")
    return value


def _power_of_two(name: str, value) -> int:
    value = _positive_int(name, value)
    if value & (value - 1):
        raise QgpError(f"{name} must be a power of two, got {value}; pass 1, 2, 4, 8, …")
    return value


def _ceil_log2(value: int) -> int:
    """⌈log2 value⌉ for a positive integer (0 for 1), exact for any size."""
    return (int(value) - 1).bit_length()


def _ceil_div(a: int, b: int) -> int:
    return -(-a // b)


# -- table lookups ----------------------------------------------------------------------------


def qrom_toffolis(entries: int) -> int:
    """Toffolis of a controlled unary-iteration QROM over ``entries`` = L words: L − 1.

    Babbush, Gidney, Berry, Wiebe, McClean, Paler, Fowler & Neven 2018, "Encoding electronic
    spectra in quantum circuits with linear T complexity", PRX 8, 041015, Sec. III.A (unary
    iteration: 4L − 4 T gates, i.e. L − 1 temporary logical-ANDs, for a controlled iteration over
    L items; the data are written by CNOTs, free). From memory; it equals qualtran's ``QROM`` with
    one control exactly (tests/scale/test_fault_tolerant.py). The word size does not enter.
    """
    return _positive_int("entries", entries) - 1


def qrom_ancillas(entries: int) -> int:
    """Ancilla qubits of the unary iteration over L words: ⌈log2 L⌉ (the AND ladder).

    Babbush et al. 2018 (PRX 8, 041015), Sec. III.A: one ancilla per selection bit. From memory.
    """
    return _ceil_log2(_positive_int("entries", entries))


def _select_swap(entries: int, bits: int, block: int) -> int:
    if entries == 1:
        return 0  # one constant word: X gates (Clifford)
    return _ceil_div(entries, block) + bits * (block - 1)


def _blocks_up_to(entries: int):
    """λ = 1, 2, 4, … up to the first power of two ≥ entries."""
    top = 1 << _ceil_log2(entries)
    lam = 1
    while lam <= top:
        yield lam
        lam <<= 1


def optimal_select_swap_block(entries: int, bits: int, max_qubits: int | None = None) -> int:
    """The power-of-two block size λ minimising the select-swap Toffolis ⌈L/λ⌉ + b(λ − 1).

    ``max_qubits`` caps the lookup's bank b·λ (its qubit cost, `select_swap_qubits`); the smallest
    λ wins ties. Low, Kliuchnikov & Schaeffer 2018 (arXiv:1812.00954, Quantum 8, 1375 (2024)): the
    optimum is λ ≈ √(L/b). Minimising over powers of two directly (λ ≤ the first power of two ≥
    L) is exact for the formula; from memory for the formula itself (see `select_swap_toffolis`).
    """
    entries = _positive_int("entries", entries)
    bits = _positive_int("bits", bits)
    if max_qubits is not None and _positive_int("max_qubits", max_qubits) < bits:
        raise QgpError(
            f"max_qubits = {max_qubits} cannot hold one {bits}-bit word; allow at least {bits} qubits."
        )
    best, best_cost = 1, None
    for lam in _blocks_up_to(entries):
        if max_qubits is not None and bits * lam > max_qubits:
            break
        cost = _select_swap(entries, bits, lam)
        if best_cost is None or cost < best_cost:
            best, best_cost = lam, cost
    return best


def select_swap_toffolis(entries: int, bits: int, block: int | None = None, *, max_qubits: int | None = None) -> int:
    """Toffolis of a select-swap (QROAM) lookup of L words of b bits: ⌈L/λ⌉ + b(λ − 1).

    Low, Kliuchnikov & Schaeffer 2018, "Trading T-gates for dirty qubits in state preparation and
    unitary synthesis", arXiv:1812.00954 (clean-ancilla variant): a QROM over ⌈L/λ⌉ blocks writes
    λ words at once into a bank of b·λ qubits, then a swap network of b(λ − 1) controlled SWAPs
    moves the addressed word to the output, leaving the other words as junk for the uncompute
    (`lookup_uncompute_toffolis`). The count as written by Berry, Gidney, Motta, McClean & Babbush
    2019 (Quantum 3, 208, App. A–B). From memory; qualtran's ``QROAMClean`` implements it and
    counts ⌈L/λ⌉ − 2 ANDs (uncontrolled unary iteration) + b(λ − 1) controlled SWAPs, i.e. this
    count minus 2 (tests). One word (L = 1) is Clifford: 0.

    ``block=None`` takes `optimal_select_swap_block` (under ``max_qubits`` if given).
    """
    entries = _positive_int("entries", entries)
    bits = _positive_int("bits", bits)
    if block is None:
        block = optimal_select_swap_block(entries, bits, max_qubits)
    else:
        block = _power_of_two("block", block)
    return _select_swap(entries, bits, block)


def select_swap_qubits(bits: int, block: int) -> int:
    """Qubits of a select-swap lookup's bank: b·λ (the output word and λ − 1 junk words).

    Low, Kliuchnikov & Schaeffer 2018 (arXiv:1812.00954). From memory. The unary iteration's
    ⌈log2⌈L/λ⌉⌉ ANDs (`qrom_ancillas`) come on top.
    """
    return _positive_int("bits", bits) * _power_of_two("block", block)


def _uncompute(entries: int, block: int) -> int:
    if entries == 1:
        return 0
    return _ceil_div(entries, block) + block


def optimal_uncompute_block(entries: int, max_qubits: int | None = None) -> int:
    """The power-of-two λ minimising the measurement-based uncompute ⌈L/λ⌉ + λ (λ ≈ √L).

    Berry et al. 2019 (Quantum 3, 208), App. C. The one-hot register holds λ qubits, capped by
    ``max_qubits``. Exact minimisation of the formula; the formula from memory.
    """
    entries = _positive_int("entries", entries)
    best, best_cost = 1, None
    for lam in _blocks_up_to(entries):
        if max_qubits is not None and lam > max_qubits:
            break
        cost = _uncompute(entries, lam)
        if best_cost is None or cost < best_cost:
            best, best_cost = lam, cost
    return best


def lookup_uncompute_toffolis(entries: int, block: int | None = None) -> int:
    """Toffolis to erase a lookup's output (and junk) by measurement: ⌈L/λ⌉ + λ.

    Berry, Gidney, Motta, McClean & Babbush 2019, "Qubitization of arbitrary basis quantum
    chemistry leveraging sparsity and low rank factorization", Quantum 3, 208, App. C: measure
    the output in the X basis, then fix the phases (−1)^(m·data) with a lookup of L one-bit
    entries done as a select-swap with a λ-qubit one-hot register, independent of the word
    size b. From memory; qualtran's ``QROAMCleanAdjoint`` counts ⌈L/λ⌉ + λ − 4 (uncontrolled),
    i.e. this count minus 4 (tests). One word (L = 1) is Clifford: 0.
    """
    entries = _positive_int("entries", entries)
    block = optimal_uncompute_block(entries) if block is None else _power_of_two("block", block)
    return _uncompute(entries, block)


def phase_gradient_rotation_toffolis(bits: int) -> int:
    """Toffolis of a rotation by a b-bit angle held in a register: b − 1.

    The angle register is added into a b-qubit phase-gradient state, which applies the phase
    (Gidney 2018, "Halving the cost of quantum addition", Quantum 2, 74: an n-bit adder with
    n − 1 temporary logical-ANDs, Fig. 1 — "a 5-bit adder with T-count of 16", four ANDs;
    verified from the figure caption and abstract); the phase-gradient trick itself and making
    it act as exp(−iθZ) on a target by CNOT-conjugating the angle register are from memory
    (Kitaev, Shen & Vyalyi 2002; Gidney 2018). The addition is mod 2^b, so this is an
    upper bound (one AND fewer is possible). The phase-gradient state is prepared once.
    """
    return _positive_int("bits", bits) - 1


# -- block encoding ---------------------------------------------------------------------------


@dataclass(frozen=True)
class BlockEncodingCost:
    """One call of a block encoding of A/α: Toffolis, qubits beyond the system register, and how.

    ``alpha_sparsity`` is the s in α = s·‖A‖_max the construction achieves (s rounded up to a
    power of two; see `sparse_access_block_encoding`). The per-part counts add up to
    ``toffolis_per_call``.
    """

    toffolis_per_call: int
    logical_qubits: int
    construction: str
    citation: str
    entries: int = 0
    bits: int = DEFAULT_BITS
    alpha_sparsity: int = 1
    column_lookup_toffolis: int = 0
    value_lookup_toffolis: int = 0
    uncompute_toffolis: int = 0
    rotation_toffolis: int = 0
    blocks: dict = field(default_factory=dict)


_BE_CONSTRUCTION = (
    "sparse-access block encoding of symmetric A with α = s·‖A‖_max (s padded to a power of two "
    "with zero entries): per call, the column-index oracle O_c and its row counterpart O_r, each "
    "a select-swap lookup of the n·s stored column indices (⌈log2 n⌉ bits) erased by "
    "measurement-based uncomputation; the value oracle O_A, a select-swap lookup of the n·s "
    "stored angles arccos(A_ij/‖A‖_max) (b bits), then a controlled rotation by phase-gradient "
    "addition (b − 1 Toffolis), then O_A's measurement-based uncompute; the uniform "
    "superposition over the s positions is Hadamards (Clifford)"
)

_BE_CITATION = (
    "Gilyén, Su, Low & Wiebe 2019 (STOC, arXiv:1806.01838), Lemma 48 (s-sparse block encoding "
    "with O_r, O_c once and O_A twice, α = s·‖A‖_max) — from memory; Childs, Kothari & Somma 2017 "
    "(SIAM J. Comput. 46, 1920) — from memory; lookups: Low, Kliuchnikov & Schaeffer 2018 "
    "(arXiv:1812.00954) and Berry et al. 2019 (Quantum 3, 208, App. A–C) — from memory, "
    "cross-checked against qualtran; rotation: Gidney 2018 (Quantum 2, 74, Fig. 1) — verified"
)


def sparse_access_block_encoding(
    n: int, sparsity: int, bits: int = DEFAULT_BITS, *, max_lookup_qubits: int | None = None
) -> BlockEncodingCost:
    """Toffolis and qubits of one call of the sparse-access block encoding of an n×n A.

    Construction (Gilyén, Su, Low & Wiebe 2019, Lemma 48; Childs, Kothari & Somma 2017 — both
    from memory): U_A = U_L† U_R with U_R|0⟩|j⟩ = s^-1/2 Σ_k |c(j,k)⟩|j⟩(A_{cj}/‖A‖_max |0⟩ + …|1⟩)
    and U_L|0⟩|i⟩ = s^-1/2 Σ_k |i⟩|c(i,k)⟩|0⟩, so (A symmetric, pattern symmetric)
    ⟨0,i|U_A|0,j⟩ = A_ij/(s·‖A‖_max). Realised here as:

    - uniform superposition over s positions: Hadamards when s is a power of two; otherwise s
      is padded to the next power of two with zero-valued entries (α grows to s_pad·‖A‖_max,
      reported as ``alpha_sparsity``);
    - O_c and O_r: each one select-swap lookup of the L = n·s_pad column indices
      (⌈log2 n⌉ bits; `select_swap_toffolis`) plus its measurement-based uncompute
      (`lookup_uncompute_toffolis`). This costs the oracle as an out-of-place lookup; making it
      in place (erasing the position k for an arbitrary sparsity pattern) is not costed, so for
      unstructured patterns this is a lower estimate;
    - O_A: one select-swap lookup of L precomputed b-bit angles, a rotation by phase-gradient
      addition (`phase_gradient_rotation_toffolis`), and the lookup's measurement-based
      uncompute.

    Qubits beyond the system register: the column register's bank ⌈log2 n⌉·λ_c, the angle bank
    b·λ_A, the position register ⌈log2 s_pad⌉, the rotated flag, the b-qubit phase gradient and
    the unary iteration's ⌈log2 L⌉ ANDs.

    ``bits`` defaults to `DEFAULT_BITS` (20; see its comment for why). ``max_lookup_qubits``
    caps each lookup's bank (the block sizes then shrink).
    """
    n = _positive_int("n", n)
    sparsity = _positive_int("sparsity", sparsity)
    bits = _positive_int("bits", bits)
    if sparsity > n:
        raise QgpError(f"sparsity {sparsity} exceeds n = {n}; a row has at most n non-zeros.")
    s_pad = 1 << _ceil_log2(sparsity)
    entries = n * s_pad
    col_bits = max(1, _ceil_log2(n))
    lam_c = optimal_select_swap_block(entries, col_bits, max_lookup_qubits)
    lam_a = optimal_select_swap_block(entries, bits, max_lookup_qubits)
    lam_u = optimal_uncompute_block(entries, max_lookup_qubits)
    column = 2 * _select_swap(entries, col_bits, lam_c)
    value = _select_swap(entries, bits, lam_a)
    uncompute = 3 * _uncompute(entries, lam_u)
    rotation = phase_gradient_rotation_toffolis(bits)
    qubits = (
        col_bits * lam_c + bits * lam_a + _ceil_log2(s_pad) + 1 + bits + _ceil_log2(entries)
    )
    return BlockEncodingCost(
        toffolis_per_call=column + value + uncompute + rotation,
        logical_qubits=qubits,
        construction=_BE_CONSTRUCTION,
        citation=_BE_CITATION,
        entries=entries,
        bits=bits,
        alpha_sparsity=s_pad,
        column_lookup_toffolis=column,
        value_lookup_toffolis=value,
        uncompute_toffolis=uncompute,
        rotation_toffolis=rotation,
        blocks={"column": lam_c, "value": lam_a, "uncompute": lam_u},
    )


# -- state preparation ------------------------------------------------------------------------


@dataclass(frozen=True)
class StatePreparationCost:
    """Amplitude encoding of a classical n-vector: Toffolis, qubits beyond the system register."""

    toffolis: int
    logical_qubits: int
    citation: str
    levels: int = 0
    bits: int = DEFAULT_BITS


_SP_CITATION = (
    "Grover & Rudolph 2002 (arXiv:quant-ph/0208112): binary tree of conditional rotations, one "
    "level per qubit — from memory; per-level angle lookups by select-swap: Low, Kliuchnikov & "
    "Schaeffer 2018 (arXiv:1812.00954) with measurement-based uncompute (Berry et al. 2019, "
    "Quantum 3, 208, App. C) — from memory, cross-checked against qualtran; rotations by "
    "phase-gradient addition: Gidney 2018 (Quantum 2, 74, Fig. 1) — verified"
)


def state_preparation_cost(n: int, bits: int = DEFAULT_BITS, *, max_lookup_qubits: int | None = None) -> StatePreparationCost:
    """Toffolis and qubits to prepare Σ_j y_j|j⟩/‖y‖ for a classical real n-vector y.

    Grover & Rudolph 2002 (from memory): for m = ⌈log2 n⌉ qubits, level ℓ = 0 … m−1 rotates qubit
    ℓ by an angle that depends on the ℓ qubits already prepared. Here each level is a select-swap
    lookup of its angles (the tree's nodes at depth ℓ that cover the n leaves: ⌈n/2^(m−ℓ)⌉ of
    them, b bits), a rotation by phase-gradient addition, and the lookup's measurement-based
    uncompute; the signs of y are one more level: a lookup of n one-bit signs, a CZ (Clifford),
    and its uncompute. Qubits beyond the system register: the largest angle bank b·λ, the
    b-qubit phase gradient, and the unary iteration's ⌈log2 n⌉ ANDs.
    """
    n = _positive_int("n", n)
    bits = _positive_int("bits", bits)
    m = _ceil_log2(n)
    toffolis = 0
    bank = bits
    for level in range(m):
        nodes = _ceil_div(n, 1 << (m - level))
        lam = optimal_select_swap_block(nodes, bits, max_lookup_qubits)
        toffolis += _select_swap(nodes, bits, lam)
        toffolis += phase_gradient_rotation_toffolis(bits)
        toffolis += _uncompute(nodes, optimal_uncompute_block(nodes, max_lookup_qubits))
        bank = max(bank, bits * lam)
    # signs: one-bit lookup of the n signs, CZ, measurement-based uncompute
    lam_s = optimal_select_swap_block(n, 1, max_lookup_qubits)
    toffolis += _select_swap(n, 1, lam_s) + _uncompute(n, optimal_uncompute_block(n, max_lookup_qubits))
    bank = max(bank, lam_s)
    return StatePreparationCost(
        toffolis=toffolis,
        logical_qubits=bank + bits + m,
        citation=_SP_CITATION,
        levels=m,
        bits=bits,
    )


# -- surface code -----------------------------------------------------------------------------

Layout = Literal["compact", "intermediate", "fast"]

#: Litinski 2019 ("A Game of Surface Codes", Quantum 3, 128), Sec. 3: data blocks storing N
#: logical qubits — tiles as a function of N and clock cycles (one clock cycle = d code cycles)
#: per T gate consumed. Compact: 1.5N + 3 tiles, ≤ 9 cycles; intermediate: 2N + 4 tiles, ≤ 5
#: cycles; fast: 2N + √(8N) + 1 tiles, 1 cycle. From memory; qualtran's CompactDataBlock /
#: IntermediateDataBlock / FastDataBlock (which cite the paper's Figs. 9, 13a, 13b) carry the same
#: cycle counts (9, 5, 1) and the same fast tile count, but 1.5N and 2N tiles for the other two
#: (tests state the offsets of 3 and 4).
LAYOUTS: dict[str, tuple[str, int]] = {
    "compact": ("ceil(1.5*N) + 3", 9),
    "intermediate": ("2*N + 4", 5),
    "fast": ("ceil(2*N + sqrt(8*N) + 1)", 1),
}

#: Litinski 2019 (Quantum 3, 128), Sec. 3.1: the 15-to-1 distillation block uses 11 tiles for
#: 11 clock cycles and outputs one magic state with error 35p³ (Bravyi & Kitaev 2005's 15-to-1
#: protocol to leading order). From memory; consistent with the paper's worked example, which
#: these functions reproduce (tests), and with the row for this block in public comparison data
#: transcribed from Litinski's "Magic State Distillation: Not as Costly as You Think" (Quantum 3,
#: 205) — p = 1e-4: 3.5e-11, 3720 qubits = 11·2·13², 143 cycles = 11·13 — read, not the paper.
FIFTEEN_TO_ONE_TILES = 11
FIFTEEN_TO_ONE_CLOCK_CYCLES = 11
FIFTEEN_TO_ONE_COEFFICIENT = 35.0
MAX_DISTILLATION_LEVELS = 3


def logical_error_rate(physical_error, distance, prefactor: float = 0.1, threshold: float = 0.01):
    """Logical error per code cycle of one distance-d patch: A·(p/p_th)^((d+1)/2).

    With A = 0.1, p_th = 0.01 this is Fowler & Gidney 2018 (arXiv:1808.06709, Sec. XV) and the
    rule Gidney & Ekerå 2021 ("How to factor 2048 bit RSA integers in 8 hours using 20 million
    noisy qubits", Quantum 5, 433, Sec. 2 "Topological error") state for p = 10⁻³:
    10^(−⌈d/2⌉−1) per logical qubit per surface-code cycle — verified from the text, as is its
    worked example (d = 27 → 27 % for their run; tests). Litinski 2019 (Quantum 3, 128) uses the
    same 0.1·(100p)^((d+1)/2) — from memory. Vectorised over numpy arrays.
    """
    p = np.asarray(physical_error, dtype=float)
    d = np.asarray(distance, dtype=float)
    out = prefactor * (p / threshold) ** ((d + 1.0) / 2.0)
    return out if out.ndim else float(out)


def qubits_per_tile(distance: int, convention: Literal["litinski", "gidney_ekera"] = "litinski") -> int:
    """Physical qubits of one tile (one logical qubit's patch) at distance d.

    "litinski": 2d² (d² data and d² − 1 measurement qubits, rounded up; Litinski 2019, Quantum 3,
    128, Sec. 1 — from memory, and consistent with the table row quoted at
    `FIFTEEN_TO_ONE_TILES`). "gidney_ekera": 2(d+1)², including the spacing between patches
    (Gidney & Ekerå 2021, Quantum 5, 433, "Physical qubit count": d = 27 → 1568 — verified).
    """
    d = _positive_int("distance", distance)
    if convention == "litinski":
        return 2 * d * d
    if convention == "gidney_ekera":
        return 2 * (d + 1) ** 2
    raise QgpError(f"unknown tile convention {convention!r}; use 'litinski' or 'gidney_ekera'.")


def data_block_tiles(logical_qubits: int, layout: Layout = "compact") -> int:
    """Tiles of Litinski's data block holding N logical qubits (`LAYOUTS`; from memory)."""
    N = _positive_int("logical_qubits", logical_qubits)
    if layout == "compact":
        return math.ceil(1.5 * N) + 3
    if layout == "intermediate":
        return 2 * N + 4
    if layout == "fast":
        return math.ceil(2 * N + math.sqrt(8 * N) + 1)
    raise QgpError(f"unknown layout {layout!r}; use one of {sorted(LAYOUTS)}.")


def distilled_error(physical_error: float, levels: int) -> float:
    """Output error of ``levels`` rounds of 15-to-1 distillation: ε_k = 35·ε_(k−1)³, ε_0 = p.

    Bravyi & Kitaev 2005 (PRA 71, 022316) to leading order, as used by Litinski 2019 (Quantum 3,
    128, Sec. 3.1) with injected states of error p (from memory). Topological errors inside the
    factory are not in ε_k; `surface_code_cost` charges the factory tiles as memory instead.
    """
    eps = float(physical_error)
    for _ in range(_positive_int("levels", levels)):
        eps = FIFTEEN_TO_ONE_COEFFICIENT * eps**3
    return eps


def factory_tiles(levels: int) -> int:
    """Tiles of one ``levels``-level 15-to-1 factory: 11 for one level; 15·(level k−1) + 11 after.

    One level is Litinski's 15-to-1 block (11 tiles, 11 clock cycles; from memory). Higher levels
    are this model's own construction, not a paper's layout: 15 factories of the level below feed
    one more 11-tile block, pipelined so that a factory still outputs one state per 11 clock
    cycles (two levels: 176 tiles — the tile count I recall for Litinski's 225-to-1 block, from
    memory and not checked against a worked number).
    """
    tiles = FIFTEEN_TO_ONE_TILES
    for _ in range(_positive_int("levels", levels) - 1):
        tiles = 15 * tiles + FIFTEEN_TO_ONE_TILES
    return tiles


@dataclass(frozen=True)
class SurfaceCodeAssumptions:
    """The hardware and layout a surface-code estimate assumes.

    physical_error : float
        Physical error rate p per operation (also the error of an injected magic state).
    cycle_seconds : float
        One surface-code cycle (syndrome-extraction round).
    failure_budget : float
        Allowed probability that the run fails (memory errors + distilled-state errors).
    error_prefactor, error_threshold : float
        A and p_th of the logical error per patch per cycle A·(p/p_th)^((d+1)/2).
    layout : "compact" | "intermediate" | "fast"
        Litinski's data block (`LAYOUTS`).
    factories : int or None
        15-to-1 factories running in parallel; None: enough to feed the data block at its own
        rate, ⌈11 / (clock cycles per T of the layout)⌉ (compact 2, intermediate 3, fast 11).
    tile_convention : "litinski" | "gidney_ekera"
        Physical qubits per tile, 2d² or 2(d+1)² (`qubits_per_tile`).
    t_per_toffoli : int
        T gates per Toffoli: 4 (Jones 2013, PRA 87, 022328; Gidney 2018's temporary AND —
        verified from the latter's abstract).
    """

    physical_error: float = 1e-3
    cycle_seconds: float = 1e-6
    failure_budget: float = 0.01
    error_prefactor: float = 0.1
    error_threshold: float = 0.01
    layout: Layout = "compact"
    factories: int | None = None
    tile_convention: Literal["litinski", "gidney_ekera"] = "litinski"
    t_per_toffoli: int = 4

    def __post_init__(self):
        if not 0.0 < self.physical_error < self.error_threshold:
            raise QgpError(
                f"physical_error = {self.physical_error} must lie in (0, error_threshold = "
                f"{self.error_threshold}); below threshold a larger code distance suppresses errors."
            )
        if not self.cycle_seconds > 0.0:
            raise QgpError(f"cycle_seconds = {self.cycle_seconds} must be positive.")
        if not 0.0 < self.failure_budget < 1.0:
            raise QgpError(f"failure_budget = {self.failure_budget} must lie in (0, 1).")
        if not self.error_prefactor > 0.0:
            raise QgpError(f"error_prefactor = {self.error_prefactor} must be positive.")
        if self.layout not in LAYOUTS:
            raise QgpError(f"unknown layout {self.layout!r}; use one of {sorted(LAYOUTS)}.")
        if self.factories is not None:
            _positive_int("factories", self.factories)
        if self.tile_convention not in ("litinski", "gidney_ekera"):
            raise QgpError(f"unknown tile_convention {self.tile_convention!r}; use 'litinski' or 'gidney_ekera'.")
        _positive_int("t_per_toffoli", self.t_per_toffoli)


@dataclass(frozen=True)
class SurfaceCodeCost:
    """Footprint, run time and failure budget of a Toffoli (and T) count on the surface code."""

    code_distance: int
    physical_qubits: int
    seconds: float
    logical_error_per_cycle: float
    factory_qubits: int
    data_qubits: int
    data_tiles: int
    factory_tiles: int
    factories: int
    distillation_levels: int
    t_gates: float
    clock_cycles_per_t: float
    code_cycles: float
    memory_failure: float
    distillation_failure: float
    failure_probability: float
    citation: str


_SC_CITATION = (
    "Litinski 2019, 'A Game of Surface Codes', Quantum 3, 128, Sec. 3 (data blocks, 15-to-1 "
    "block, 2d² qubits per tile: from memory; the model reproduces the abstract's worked "
    "numbers, verified text: 100 qubits, T count 1e8, p = 1e-4, 1 µs: 55,000 qubits / 4 h and "
    "120,000 qubits / 22 min); logical error 0.1·(100p)^((d+1)/2) per patch per cycle: Gidney & "
    "Ekerå 2021, Quantum 5, 433, 'Topological error' (verified for p = 1e-3); two- and "
    "three-level factories: own construction"
)


def _distance_for(budget_left: float, volume_per_distance: float, assumptions: SurfaceCodeAssumptions) -> int | None:
    """Smallest odd d ≥ 3 with (volume_per_distance·d)·p_L(d) ≤ budget_left, or None by d = 999."""
    if volume_per_distance == 0.0:
        return 3
    for d in range(3, 1000, 2):
        p_l = logical_error_rate(
            assumptions.physical_error, d, assumptions.error_prefactor, assumptions.error_threshold
        )
        if volume_per_distance * d * p_l <= budget_left:
            return d
    return None


def surface_code_cost(
    logical_qubits: int,
    toffolis: float,
    assumptions: SurfaceCodeAssumptions | None = None,
    *,
    t_gates: float = 0.0,
) -> SurfaceCodeCost:
    """Code distance, physical qubits and seconds to run ``toffolis`` (and ``t_gates``) one after another.

    Model (Litinski 2019, "A Game of Surface Codes", Quantum 3, 128, Sec. 3; from memory except
    where marked):

    - magic states: T = t_per_toffoli·toffolis + t_gates, consumed one at a time by the data
      block (`LAYOUTS`: compact/intermediate/fast; ``N = logical_qubits``), each taking
      max(layout cycles, 11/factories) clock cycles of d code cycles;
    - factories: ``factories`` k-level 15-to-1 factories (`factory_tiles`, `distilled_error`),
      all tiles at the data's distance d;
    - failure: T·ε_k (distilled states) + (data + factory tiles)·code cycles·p_L(d) (memory,
      `logical_error_rate`) ≤ ``failure_budget`` — the factory tiles charged as memory is a
      conservative choice (Gidney & Ekerå 2021 leave them out);
    - for each k = 1 … 3 with T·ε_k < budget, d is the smallest odd d ≥ 3 meeting the budget;
      the k giving the smallest d is kept (ties: fewer physical qubits). Taking the smallest d
      makes the choice monotone: a smaller physical error never needs a larger d.

    Physical qubits = tiles × `qubits_per_tile`; seconds = code cycles × cycle_seconds. With
    Litinski's worked numbers (N = 100, T = 1e8, p = 1e-4, 1 µs, 1 % budget) this gives d = 13 and
    55,432 qubits in 3.97 h (compact block, one factory; paper: 55,000 qubits, 4 h) and 118,638
    qubits in 21.7 min (fast block, 11 factories; paper: 120,000 qubits, 22 min) — tests.

    Raises QgpError when no k ≤ 3 and d < 1000 fit the budget (at p = 10⁻³: T beyond ~10⁵⁹).
    """
    a = SurfaceCodeAssumptions() if assumptions is None else assumptions
    N = _positive_int("logical_qubits", logical_qubits)
    toffolis = float(toffolis)
    t_gates = float(t_gates)
    if not (toffolis >= 0.0 and t_gates >= 0.0 and math.isfinite(toffolis) and math.isfinite(t_gates)):
        raise QgpError(f"toffolis = {toffolis} and t_gates = {t_gates} must be finite and ≥ 0.")
    T = a.t_per_toffoli * toffolis + t_gates
    layout_cycles = LAYOUTS[a.layout][1]
    data_tiles = data_block_tiles(N, a.layout)
    if a.factories is not None:
        n_factories = int(a.factories)
    else:
        n_factories = math.ceil(FIFTEEN_TO_ONE_CLOCK_CYCLES / layout_cycles)
    if T == 0.0:
        n_factories = 0
    clock_per_t = max(layout_cycles, FIFTEEN_TO_ONE_CLOCK_CYCLES / n_factories) if n_factories else 0.0

    best = None
    for levels in range(1, MAX_DISTILLATION_LEVELS + 1):
        dist_fail = T * distilled_error(a.physical_error, levels)
        if dist_fail >= a.failure_budget:
            continue
        f_tiles = n_factories * factory_tiles(levels)
        volume = (data_tiles + f_tiles) * T * clock_per_t  # tile·clock-cycles; × d → tile·code cycles
        d = _distance_for(a.failure_budget - dist_fail, volume, a)
        if d is None:
            continue
        qubits = (data_tiles + f_tiles) * qubits_per_tile(d, a.tile_convention)
        key = (d, qubits)
        if best is None or key < best[0]:
            best = (key, levels, d, f_tiles, dist_fail, volume)
    if best is None:
        raise QgpError(
            f"{T:.3g} T gates cannot meet the failure budget {a.failure_budget} with ≤ "
            f"{MAX_DISTILLATION_LEVELS} levels of 15-to-1 distillation at p = {a.physical_error}; "
            "lower the physical error or the gate count."
        )
    _, levels, d, f_tiles, dist_fail, volume = best
    per_tile = qubits_per_tile(d, a.tile_convention)
    p_l = logical_error_rate(a.physical_error, d, a.error_prefactor, a.error_threshold)
    code_cycles = T * clock_per_t * d
    memory = volume * d * p_l
    return SurfaceCodeCost(
        code_distance=d,
        physical_qubits=(data_tiles + f_tiles) * per_tile,
        seconds=code_cycles * a.cycle_seconds,
        logical_error_per_cycle=p_l,
        factory_qubits=f_tiles * per_tile,
        data_qubits=data_tiles * per_tile,
        data_tiles=data_tiles,
        factory_tiles=f_tiles,
        factories=n_factories,
        distillation_levels=levels if n_factories else 0,
        t_gates=T,
        clock_cycles_per_t=clock_per_t,
        code_cycles=code_cycles,
        memory_failure=memory,
        distillation_failure=dist_fail,
        failure_probability=memory + dist_fail,
        citation=_SC_CITATION,
    )
