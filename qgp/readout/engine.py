"""A structured statevector engine for qgp's simulation-form circuits, in numpy.

It applies each instruction's own operator — the fused multiplexer stacks and diagonals the
circuits carry, H/RY/X/CX as 2×2 blocks, SWAPs as a relabelling of axes — to the state held as a
tensor with one axis per qubit, and replaces an inverse QFT or QFT written out as H, controlled
phases and swaps (``qgp.circuits.phase_estimation``) by one FFT along the clock axes: the same
unitary, QFT|j⟩ = 2^(−c/2) Σ_k e^{2πi jk/2^c}|k⟩ (Nielsen & Chuang eq. 5.2), recognised by
matching the instructions one by one against qiskit's own synthesis. Qubits still in |0⟩ are not
stored until a gate touches them, and qubits touched only by one-qubit gates stay one-qubit states
until a gate needs them: a layer of Hadamards on a fresh clock costs nothing, and the controlled
powers after it are written from the small stored state in one pass. With a projected read-out,
the flag rotation writes only the kept half (between a large clock's inverse QFT and QFT, the
three run as one four-step transform of three passes: `_fft_diagonal_ifft`), and the last
multiplexers (the inverse powers) and the closing layer are contracted with the read-out rows in
one read. Each of these is a product of the circuit's own operators in another order (linearity);
nothing here reads A or its eigenvectors.

Aer stays the reference: ``tests/readout/test_engine.py`` checks every circuit qgp simulates, for
every registered method, against Aer's statevector to 1e-12. A circuit holding an instruction
outside `SUPPORTED` raises `Unsupported`, and the caller runs Aer instead.
"""

from __future__ import annotations

import contextlib
import math
import threading
from concurrent.futures import ThreadPoolExecutor
from collections import OrderedDict
from collections.abc import Callable, Iterator, Mapping
from typing import Any

import numpy as np
import scipy.fft
from qiskit import QuantumCircuit

from qgp.readout.engine_program import SUPPORTED, Unsupported, compiled, supports

__all__ = ["SUPPORTED", "Unsupported", "buffer_pool", "project_statevector", "release_buffers", "simulate", "supports"]

_POOL_LOCK = threading.Lock()
_ZERO = np.array([1.0, 0.0], dtype=complex)
_X = np.array([[0.0, 1.0], [1.0, 0.0]], dtype=complex)
_POOL: dict[int, list[np.ndarray]] = {}


#: Work buffers of at most this many bytes (the pair) outlive the outermost `buffer_pool`, for the
#: next inference: a pair of ≤ 20-qubit states (cold 17-qubit inferences measured ~0.3 ms faster
#: each with the pair kept); a larger pair is never held between runs.
_KEEP_BYTES = 1 << 25


def _take_buffers(n: int) -> list[np.ndarray]:
    """Two work buffers of 2^n amplitudes, reused from an earlier run of the same width when one
    left them (their pages are then already mapped; a first touch of fresh memory measured here
    at ~0.3 GB/s, over ten times a pass). `qgp.readout.simulate.engine_scope` frees them when its
    outermost scope ends, unless they are small (`_KEEP_BYTES`; `release_buffers` frees those)."""
    with _POOL_LOCK:
        pair = _POOL.pop(n, None)
        _POOL.clear()  # at most one pair is kept
    return pair if pair is not None else [np.empty(2**n, dtype=complex), np.empty(2**n, dtype=complex)]


def _return_buffers(n: int, pair: list[np.ndarray]) -> None:
    with _POOL_LOCK:
        if len(pair) == 2 and _POOL_DEPTH > 0:
            _POOL.clear()
            _POOL[n] = pair


def release_buffers() -> None:
    """Free the kept work buffers (two statevectors of the last width run)."""
    with _POOL_LOCK:
        _POOL.clear()


_POOL_DEPTH = 0


@contextlib.contextmanager
def buffer_pool() -> Iterator[None]:
    """Inside, runs of one width reuse two work buffers; they are freed when the outermost
    ``buffer_pool`` ends unless they are small (`_KEEP_BYTES`); outside any, every run allocates
    its own."""
    global _POOL_DEPTH
    with _POOL_LOCK:
        _POOL_DEPTH += 1
    try:
        yield
    finally:
        with _POOL_LOCK:
            _POOL_DEPTH -= 1
            if _POOL_DEPTH == 0:
                for n in [n for n in _POOL if 2 * 16 * 2**n > _KEEP_BYTES]:
                    del _POOL[n]


class _State:
    """The state as a tensor with one axis per stored qubit; ``order[i]`` is the qubit of axis i
    (axis 0 most significant). Qubits not in ``order`` are in |0⟩."""

    def __init__(self, n: int):
        self.n = n
        self.t = np.ones((), dtype=complex)
        self.order: list[int] = []
        # Two buffers of the full size, written alternately: a fresh 2^q array per operation
        # would pay the kernel's page faults on every pass (measured: 3× a pass at 24 qubits).
        self._buffers = _take_buffers(n)
        self._current = -1
        #: A scalar factor not yet applied (diagonal gates on qubits still in |0⟩, global phase).
        self.factor = complex(1.0)
        #: Projected qubits already cut to their read-out value (`fix`): no longer stored, not |0⟩.
        self.fixed: dict[int, int] = {}
        #: Qubits in a known one-qubit state a (|ψ⟩ = a[0]|0⟩ + a[1]|1⟩), not stored yet: a layer of
        #: Hadamards on a fresh clock stays here until a gate needs it, and a multiplexer controlled
        #: by such qubits writes its result straight from the smaller stored state (`_from_pending`).
        self.pending: dict[int, np.ndarray] = {}

    def _scratch(self, shape) -> np.ndarray:
        """An array of ``shape`` in the buffer the state is not in (becomes the state's buffer)."""
        size = math.prod(shape)
        other = 0 if self._current != 0 else 1
        self._current = other
        return self._buffers[other][:size].reshape(shape)

    def expand(self, qubits: list[int], amplitudes: list[np.ndarray]) -> None:
        """Store fresh ``qubits`` in the product state ⊗ amplitudes[i] (one write of the new state)."""
        phi = np.ones(1, dtype=complex)
        for amp in amplitudes:  # qubits[0] ends up most significant
            phi = np.multiply.outer(phi, amp).reshape(-1)
        phi = phi.reshape(-1)
        new = self._scratch((phi.size, self.t.size))
        np.multiply(phi[:, None], self.t.reshape(1, -1), out=new)
        self.t = new.reshape((2,) * (len(qubits) + self.t.ndim))
        self.order[:0] = list(qubits)

    # -- layout --------------------------------------------------------------------------------

    def _touch(self, qubits) -> None:
        """Store the qubits among ``qubits`` not stored yet (pending ones in their state, others as |0⟩)."""
        for q in qubits:
            if q in self.order:
                continue
            amp = self.pending.pop(q, None)
            self.expand([q], [_ZERO if amp is None else amp])

    def _fresh(self, q: int) -> bool:
        """Whether qubit q is still |0⟩ (neither stored nor pending)."""
        return q not in self.order and q not in self.pending

    def set_pending(self, q: int, u: np.ndarray) -> None:
        """Apply the one-qubit u to an unstored qubit q (it stays unstored)."""
        self.pending[q] = u @ self.pending.get(q, _ZERO)

    def _arrange(self, prefix: list[int], suffix: list[int]) -> None:
        """Make the axis order [prefix…, others…, suffix…] (others keep their relative order)."""
        k = len(self.order)
        if self.order[: len(prefix)] == prefix and (not suffix or self.order[k - len(suffix) :] == suffix):
            return
        chosen = set(prefix) | set(suffix)
        new = prefix + [q for q in self.order if q not in chosen] + suffix
        perm = [self.order.index(q) for q in new]
        # Axes that stay neighbours move as one (a transpose over fewer, larger axes is faster).
        runs: list[list[int]] = []
        for ax in perm:
            if runs and ax == runs[-1][-1] + 1:
                runs[-1].append(ax)
            else:
                runs.append([ax])
        starts = sorted(r[0] for r in runs)
        sizes = {r[0]: 2 ** len(r) for r in runs}
        merged = self.t.reshape([sizes[a] for a in starts])
        moved = merged.transpose([starts.index(r[0]) for r in runs])
        out = self._scratch(moved.shape)
        np.copyto(out, moved)
        self.t = out.reshape((2,) * len(new))
        self.order = new

    def _consecutive(self, group: list[int]) -> int | None:
        """The first axis of ``group`` when its qubits sit on consecutive axes in that order."""
        try:
            i = self.order.index(group[0])
        except ValueError:
            return None
        return i if self.order[i : i + len(group)] == group else None

    # -- operations ----------------------------------------------------------------------------

    def matrix(self, u: np.ndarray, qubits: list[int]) -> None:
        """Apply u (2^a × 2^a, index little-endian over ``qubits``)."""
        a = len(qubits)
        if a == 1 and qubits[0] not in self.order:
            self.set_pending(qubits[0], u)
            return
        self._touch(qubits)
        group = list(reversed(qubits))
        i = self._consecutive(group)
        if i is None:
            self._arrange([], group)
            i = len(self.order) - a
        shape = self.t.shape
        hi = math.prod(shape[:i])
        lo = math.prod(shape[i + a :])
        view = self.t.reshape(hi, 2**a, lo)
        out = self._scratch((hi, 2**a, lo))
        if lo == 1:
            np.matmul(view.reshape(hi, 2**a), u.T, out=out.reshape(hi, 2**a))
        else:
            np.matmul(u, view, out=out)
        self.t = out.reshape(shape)

    def diagonal(self, d: np.ndarray, qubits: list[int]) -> None:
        """Multiply by the diagonal d (little-endian over ``qubits``), in place."""
        self._touch([q for q in qubits if q in self.pending])
        fresh = [q for q in qubits if q not in self.order]
        if fresh:  # a fresh qubit is |0⟩: keep only the entries where it is 0
            a = len(qubits)
            dt = np.asarray(d).reshape((2,) * a)  # axes: qubits[a-1] … qubits[0]
            index = tuple(0 if qubits[a - 1 - ax] in fresh else slice(None) for ax in range(a))
            d = dt[index].reshape(-1)
            qubits = [q for q in qubits if q not in fresh]
            if not qubits:
                self.factor *= complex(d.reshape(()))
                return
        a = len(qubits)
        dt = np.asarray(d, dtype=complex).reshape((2,) * a)  # axis j ↔ qubits[a-1-j]
        axes = [self.order.index(q) for q in reversed(qubits)]
        perm = np.argsort(axes)
        dt = dt.transpose(perm)
        # Merge runs of untouched axes (and of touched ones): numpy broadcasts over few axes fast.
        marks = [ax in axes for ax in range(len(self.order))]
        view_shape: list[int] = []
        d_shape: list[int] = []
        for ax, size in enumerate(self.t.shape):
            if ax > 0 and marks[ax] == marks[ax - 1]:
                view_shape[-1] *= size
                if marks[ax]:
                    d_shape[-1] *= size
            else:
                view_shape.append(size)
                d_shape.append(size if marks[ax] else 1)
        view = self.t.reshape(view_shape)
        view *= dt.reshape(d_shape)

    def multiplexer(self, stack: np.ndarray, targets: list[int], controls: list[int], identity=None, keep=None) -> None:
        """Σ_k |k⟩⟨k|_controls ⊗ U_k (k little-endian over ``controls``); ``identity[k]`` marks
        blocks that are the identity (copied, not multiplied: half the work of a controlled power).
        ``keep`` (0 or 1, a fresh single target only): the target is cut to that value at once
        (`fix`), so only that half is ever written."""
        if len(targets) == 1 and self._fresh(targets[0]):
            self._conditioned_expand(stack[:, :, 0], targets[0], controls, keep)
            return
        if keep is not None:
            raise ValueError("keep applies to a multiplexer on one fresh target")
        if controls and all(q in self.pending for q in controls):
            self._from_pending(stack, targets, controls)
            return
        self._touch(targets + controls)
        K, T = stack.shape[0], stack.shape[1]
        cgroup, tgroup = list(reversed(controls)), list(reversed(targets))
        i = self._consecutive(cgroup)
        k = len(self.order)
        if i == len(tgroup) and self.order[:i] == tgroup:
            # Targets first, controls right after (the layout `_from_pending` builds above a
            # prepared system): (T, K, rest), one product U_k·[ψ slab k] per k, strided in place.
            shape = self.t.shape
            view = self.t.reshape(T, K, -1)
            out = self._scratch(shape).reshape(T, K, -1)
            _blocks(view.transpose(1, 2, 0), stack, out.transpose(1, 2, 0), identity)
            self.t = out.reshape(shape)
            return
        if i is not None and self.order[k - len(tgroup) :] == tgroup and i + len(cgroup) == k - len(tgroup):
            # Controls right above the targets: the state is (hi, K, T) as it lies; K products of
            # (hi × T)(T × T) on strided views, the layout kept (cheaper than a transpose here).
            shape = self.t.shape
            view = self.t.reshape(-1, K, T).transpose(1, 0, 2)
            out = self._scratch(shape)
            _blocks(view, stack, out.reshape(-1, K, T).transpose(1, 0, 2), identity)
            self.t = out
            return
        if i is not None and self.order[k - len(tgroup) :] == tgroup and 1 < math.prod(self.t.shape[:i]) <= _LEADING_LOOP:
            # Controls together, targets last, a few amplitudes' worth of axes above the controls (a
            # flag): one (K, mid, T) product per leading value, the layout kept (no transpose).
            shape = self.t.shape
            a = math.prod(shape[:i])
            view = self.t.reshape(a, K, -1, T)
            out = self._scratch(view.shape)
            for j in range(a):
                _blocks(view[j], stack, out[j], identity)
            self.t = out.reshape(shape)
            return
        self._arrange(cgroup, tgroup)
        shape = self.t.shape
        view = self.t.reshape(K, -1, T)
        out = self._scratch(view.shape)
        _blocks(view, stack, out, identity)
        self.t = out.reshape(shape)

    def _from_pending(self, stack: np.ndarray, targets: list[int], controls: list[int]) -> None:
        """Σ_k |k⟩⟨k| ⊗ U_k with every control pending in a one-qubit state: the result is
        Σ_k c_k|k⟩ ⊗ U_k·ψ (c_k the product of the controls' amplitudes), written in one pass from
        the stored state ψ without storing the controls first — one product, or one per k.

        Layouts: when only the targets are stored, or they lead, the result is [targets, controls,
        rest] (a clock built above a prepared system then lies contiguous for its FFTs: measured
        ~1.6× faster than along a strided axis at 24 qubits); otherwise the controls go where the
        descending qubit order keeps registers together (before ψ's axes, or between them and
        the targets)."""
        tgroup = list(reversed(targets))
        self._touch(targets)  # on the small ψ
        c = _kron_vectors([self.pending[q] for q in reversed(controls)])  # controls[0] least significant
        K, T = stack.shape[0], stack.shape[1]
        cgroup = list(reversed(controls))
        others = [q for q in self.order if q not in targets]
        if not others or self.order[: len(tgroup)] == tgroup:
            self._arrange(tgroup, [])  # a no-op unless only the (few) targets are stored
            psi = self.t.reshape(T, -1)
            out = self._scratch((T, K, psi.shape[1]))
            if not self._copied(out, psi, stack, (1, 0, 2)):
                # One product [U_k]_((t′, k), t) (T·K × T) · ψ (T × rest), the stack laid out once.
                np.matmul(_laid_out(stack, (1, 0, 2)).reshape(T * K, T), psi, out=out.reshape(T * K, -1))
            self.order = tgroup + cgroup + others
            self._weigh(out, c, c[None, :, None], controls)
            return
        k_axes = len(self.order)
        if self.t.size <= _CANONICAL_BELOW:  # a copy of the small ψ, not of the result
            self._arrange(sorted((q for q in self.order if q not in targets), reverse=True), tgroup)
        elif self.order[k_axes - len(tgroup) :] != tgroup:
            self._arrange([], tgroup)
        before = self.order[: len(self.order) - len(tgroup)]
        psi = self.t.reshape(-1, T)
        hi = psi.shape[0]
        if before and min(before) > max(controls):
            # [ψ's axes, controls, targets]: one product ψ (hi × T) · [U_kᵀ]_k (T × K·T), the
            # stack read transposed in place by BLAS (no copy).
            out = self._scratch((hi, K, T))
            if not self._copied(out, psi, stack, (2, 0, 1)):
                np.matmul(psi, stack.reshape(K * T, T).T, out=out.reshape(hi, K * T))
            self.order = before + cgroup + tgroup
            weights = c[None, :, None]
        else:
            # [controls, ψ's axes, targets]: K products (hi × T)(T × T), each a contiguous slab.
            out = self._scratch((K, hi, T))
            if not self._copied(out, psi, stack, (0, 2, 1)):
                np.matmul(psi[None], stack.transpose(0, 2, 1), out=out)
            self.order = cgroup + before + tgroup
            weights = c[:, None, None]
        self._weigh(out, c, weights, controls)

    def _copied(self, out: np.ndarray, psi: np.ndarray, stack: np.ndarray, axes: tuple[int, ...]) -> bool:
        """When ψ = s·I (a reference register's Σ_r |r⟩|r⟩ before the controlled powers), U_k·ψ is
        s·U_k: ``out`` is the stack in the result's axis order (``axes``), s goes to the factor —
        a copy instead of a product (measured 0.25 ms of a 17-qubit run's 1.7 ms)."""
        s = _scaled_identity(psi)
        if s is None:
            return False
        np.copyto(out, stack.transpose(axes))  # read strided, written once: no copy of the stack kept
        self.factor *= s
        return True

    def _weigh(self, out: np.ndarray, c: np.ndarray, weights: np.ndarray, controls: list[int]) -> None:
        """Finish `_from_pending`: the controls' amplitudes applied (kept in the factor when they
        are one number, e.g. every control |+⟩), the controls stored, ``out`` the state."""
        if np.all(c == c[0]):
            self.factor *= complex(c[0])
        else:
            out *= weights
        for q in controls:
            del self.pending[q]
        self.t = out.reshape((2,) * len(self.order))

    def _conditioned_expand(self, columns: np.ndarray, target: int, controls: list[int], keep=None) -> None:
        """A fresh qubit set to Σ_f columns[k, f]|f⟩ for control value k: one write of the new state
        (the new qubit most significant); with ``keep`` = v, only its f = v half (the qubit then
        fixed at v: the eigenvalue-conditioned rotation of a read-out on flag = 1 becomes one
        diagonal pass)."""
        self._touch(controls)
        cgroup = list(reversed(controls))
        i = self._consecutive(cgroup)
        if i is None:
            self._arrange(cgroup, [])
            i = 0
        shape = self.t.shape
        hi = math.prod(shape[:i])
        K = columns.shape[0]
        view = self.t.reshape(hi, K, -1)
        if keep is not None:
            # In place (measured ~2× a copy to the other buffer), with the innermost axis the
            # longest one numpy's loop sees (a trailing axis of length 1 made it 3× slower).
            col = np.ascontiguousarray(columns[:, keep])  # a strided column measured 2.8× slower
            if view.shape[2] == 1:
                flat = view.reshape(hi, K)
                flat *= col[None, :]
            else:
                view *= col[None, :, None]
            self.fixed[target] = keep
            return
        out = self._scratch((2, hi, K, view.shape[2]))
        for f in (0, 1):
            np.multiply(view, columns[:, f][None, :, None], out=out[f])
        self.t = out.reshape((2, *shape))
        self.order.insert(0, target)
        if self.t.size <= _CANONICAL_BELOW:
            # Still small (a state preparation): put the axes in descending qubit order while a
            # transpose costs nothing, so later layers and multiplexers find registers in order.
            self._arrange(sorted(self.order, reverse=True), [])

    def fix(self, values: Mapping[int, int]) -> None:
        """Keep only the amplitudes with each qubit q of ``values`` at ``values[q]`` (one read of the
        state, one write of the part kept); those qubits are then no longer stored. Valid once no
        later operation acts on them: the projection then commutes with the rest of the circuit."""
        stored = {q: v for q, v in values.items() if q in self.order}
        for q, v in values.items():
            if q not in self.order:  # unstored (|0⟩ or pending): the read-out keeps its amplitude of v
                self.factor *= complex(self.pending.pop(q, _ZERO)[v])
            self.fixed[q] = v
        if not stored:
            return
        index = tuple(stored.get(q, slice(None)) for q in self.order)
        kept = self.t[index]
        out = self._scratch(kept.shape)
        np.copyto(out, kept)
        self.t = out
        self.order = [q for q in self.order if q not in stored]

    def drop(self) -> None:
        """Forget the state (after an error too): its work buffers go back to the pool."""
        _return_buffers(self.n, self._buffers)
        self._buffers = []
        self.t = np.ones((), dtype=complex)

    def x(self, q: int) -> None:
        if q not in self.order:
            self.set_pending(q, _X)
            return
        flipped = np.flip(self.t, self.order.index(q))
        self.t = self._scratch(flipped.shape)
        np.copyto(self.t, flipped)

    def cx(self, control: int, target: int) -> None:
        if self._fresh(control):
            return  # control in |0⟩
        self._touch([control, target])
        ci, ti = self.order.index(control), self.order.index(target)
        index = [slice(None)] * len(self.order)
        index[ci] = 1
        sub = self.t[tuple(index)]
        tsub = ti if ti < ci else ti - 1
        sub[...] = np.flip(sub, tsub).copy()

    def swap(self, a: int, b: int) -> None:
        ia = self.order.index(a) if a in self.order else None
        ib = self.order.index(b) if b in self.order else None
        if ia is not None:
            self.order[ia] = b
        if ib is not None:
            self.order[ib] = a
        pa, pb = self.pending.pop(a, None), self.pending.pop(b, None)
        if pa is not None:
            self.pending[b] = pa
        if pb is not None:
            self.pending[a] = pb

    def fft(self, qubits: list[int], inverse_qft: bool, workers: int) -> None:
        """The inverse QFT (``inverse_qft``) or the QFT on ``qubits`` (little-endian), as an FFT."""
        self._touch(qubits)
        group = list(reversed(qubits))
        i = self._consecutive(group)
        if i is None:
            self._arrange([], group)
            i = len(self.order) - len(group)
        shape = self.t.shape
        hi = math.prod(shape[:i])
        view = self.t.reshape(hi, 2 ** len(qubits), -1)
        self.t = _fft_in_place(view, forward=inverse_qft, workers=workers).reshape(shape)

    def fft_diagonal_fft(self, qubits: list[int], d: np.ndarray, workers: int) -> bool:
        """The inverse QFT on ``qubits``, the diagonal d over their values, then the QFT — the
        flag rotation between them cut to its read-out value — as one four-step transform
        (`_fft_diagonal_ifft`) when the clock is the last, contiguous axis; False (nothing done)
        otherwise."""
        group = list(reversed(qubits))
        i = self._consecutive(group)
        if i is None or i + len(group) != len(self.order) or len(qubits) < _FOUR_STEP_MIN:
            return False
        x = self.t.reshape(-1, 2 ** len(qubits))
        _fft_diagonal_ifft(x, d, workers)
        return True

    def statevector(self, project: Mapping[int, int] | None = None, scale: complex = 1.0) -> np.ndarray:
        """The statevector (a new array, the factor and ``scale`` applied), standard order (index
        bit q = qubit q); with ``project``, only the amplitudes with each qubit q of it at
        ``project[q]``, over the other qubits in the same order (`project_statevector`)."""
        project = dict(project or {})
        self._touch(list(self.pending))
        t, order, factor = self.t, list(self.order), self.factor * scale
        for q, v in project.items():
            if q in order:  # a view: the projected qubit's axis indexed away
                ax = order.index(q)
                t = t[(slice(None),) * ax + (v,)]
                order.pop(ax)
            elif v:  # a qubit still in |0⟩ projected on 1
                factor = 0.0
        return _standard_order(t, order, factor, [q for q in range(self.n) if q not in project])

    def projected(self, project: Mapping[int, int], closing: list[dict], muxes: tuple = ()) -> np.ndarray:
        """The amplitudes with each qubit q of ``project`` at ``project[q]`` after the ``closing``
        one-qubit layers (applied as ⟨v|·u along their axes), the other qubits in standard order
        (a new array, the factor applied). ``muxes``: the last multiplexer steps (in order), before
        the closing layers, each controlled by projected qubits no other of them touches and
        acting on unprojected targets: contracted with the rows one after another
        (`_contract_multiplexer`) instead of applied to the whole state."""
        self._touch(list(self.pending))
        rows = {q: np.eye(2, dtype=complex)[v] for q, v in project.items()}
        for layer in closing:  # ⟨v|·u_last·…·u_first
            for q, u in layer.items():
                rows[q] = rows[q] @ u
        muxes = list(muxes)
        while muxes and not all(
            all(q in self.order and np.count_nonzero(rows[q]) > 1 for q in mux[3]) and all(q in self.order for q in mux[2])
            for mux in muxes
        ):
            self.multiplexer(*muxes.pop(0)[1:5])  # not contractible as the state lies: applied
        held = {q for mux in muxes for q in mux[3]}
        t, order, factor = self.t, list(self.order), self.factor
        for q, row in rows.items():
            if q in self.fixed:  # cut to its read-out value already (`fix`)
                continue
            if q not in order:  # still |0⟩: only row[0] survives
                factor *= row[0]
        # Plain index picks first (views), then contractions, largest reduction first.
        for q in [q for q in rows if q in order and np.count_nonzero(rows[q]) == 1 and q not in held]:
            ax = order.index(q)
            k = int(np.flatnonzero(rows[q])[0])
            t = t[(slice(None),) * ax + (k,)]  # a view
            factor *= rows[q][k]
            order.pop(ax)
        contracted = [q for q in order if q in rows and q not in held]
        if contracted:
            # The contracted qubits' axes gathered into one block (usually already together: the
            # clock), then one product with the Kronecker product of their rows: a single read.
            first = min(order.index(q) for q in contracted)
            block = order[first : first + len(contracted)]
            if set(block) != set(contracted):
                others = [q for q in order if q not in contracted]
                t = np.asarray(t).transpose([order.index(q) for q in others + contracted])
                order = others + contracted
                first = len(others)
                block = contracted
            w = _kron_vectors([rows[q] for q in block])  # most significant axis first
            shape = np.shape(t)
            hi = math.prod(shape[:first])
            lo = math.prod(shape[first + len(block) :])
            t = np.matmul(w, np.reshape(t, (hi, w.size, lo))).reshape(shape[:first] + shape[first + len(block) :])
            order = order[:first] + order[first + len(block) :]
        free = self._buffers[1 - self._current] if len(self._buffers) == 2 and self._current >= 0 else None
        for mux in muxes:
            t, order = _contract_multiplexer(t, order, rows, mux[1], mux[2], mux[3], free)
            free = None  # the next one's ψ may lie in it
        return _standard_order(t, order, factor, [q for q in range(self.n) if q not in project])

    def release(self, reduce=None):
        """The final statevector (a new array, the factor applied), or ``reduce`` of it (given a
        view of the work buffer); `drop` then returns the buffers to the pool."""
        self._touch(list(range(self.n)))
        want = list(range(self.n - 1, -1, -1))
        if self.order != want:
            self._arrange(want, [])
        flat = self.t.reshape(-1)
        if reduce is not None:
            if self.factor != 1:
                flat *= self.factor
            result = reduce(flat)
            if isinstance(result, np.ndarray) and np.shares_memory(result, flat):
                result = result.copy()  # the buffer is reused by the next run
        else:
            result = np.empty(2**self.n, dtype=complex)
            np.multiply(flat, self.factor, out=result)
        return result


def project_statevector(statevector: np.ndarray, project: Mapping[int, int]) -> np.ndarray:
    """The amplitudes of ``statevector`` (qiskit's order) with each qubit q of ``project`` at
    ``project[q]``, over the other qubits in the same order — what `simulate` hands ``reduce``."""
    sv = np.asarray(statevector).reshape(-1)
    n = sv.size.bit_length() - 1
    index = tuple(project.get(q, slice(None)) for q in range(n - 1, -1, -1))
    return sv.reshape((2,) * n)[index].reshape(-1).copy()


def simulate(
    circuit: QuantumCircuit,
    *,
    labels: list[str] | None = None,
    workers: int = 1,
    reduce: Callable[[np.ndarray], Any] | None = None,
    project: Mapping[int, int] | None = None,
    saved_project: Mapping[int, int] | None = None,
) -> dict[str, Any]:
    """Run ``circuit`` from |0…0⟩.

    Parameters
    ----------
    circuit : QuantumCircuit
        Measurement-free, with instructions in `SUPPORTED`.
    labels : list of str, optional
        Labels of ``save_statevector`` instructions to return (the state at that point); the
        final state is always returned under ``"final"``.
    workers : int
        Threads for the FFTs.
    reduce : callable, optional
        Called with the final statevector (a view into a work buffer, valid only during the
        call); its result is returned under ``"final"`` instead of a copy of the state.
    project : mapping qubit → 0 or 1, optional
        With ``reduce``: only the final amplitudes with these qubits at these values are wanted;
        ``reduce`` gets them (the other qubits in qiskit's order, `project_statevector`), and a
        closing layer of one-qubit gates on projected qubits is contracted with the wanted rows
        instead of applied to the whole state (the same numbers, one read instead of several
        passes).
    saved_project : mapping qubit → 0 or 1, optional
        The states saved under ``labels`` hold only the amplitudes with these qubits at these
        values (`project_statevector` order): no zeros written for a qubit still in |0⟩.

    Returns
    -------
    dict
        label → statevector, shape (2^q,), index bit q = qubit q (qiskit's order).

    Raises
    ------
    Unsupported
        When an instruction is not in `SUPPORTED` (checked before any work).
    """
    program = compiled(circuit)
    wanted = set(labels or ())
    state = _State(circuit.num_qubits)
    out: dict[str, Any] = {}
    final_label = None
    steps = program.steps
    closing: list[dict] = []
    closing_muxes: list[tuple] = []
    if project and reduce is not None:
        # Saves nobody asked for at the end (the final state's own) do nothing: drop them, so that
        # the closing one-qubit layers on projected qubits are contracted at the end, not applied.
        while steps and steps[-1][0] == "save" and steps[-1][1] not in wanted:
            steps = steps[:-1]
        while steps and steps[-1][0] == "layer" and set(steps[-1][1]) <= set(project):
            closing.insert(0, steps[-1][1])
            steps = steps[:-1]
        # The inverse controlled powers before the closing Hadamards: contracted with the read-out
        # rows at the end (one read) instead of applied to the whole state. Each one taken must be
        # controlled by projected qubits that the later ones (already taken) do not touch.
        while steps and steps[-1][0] == "mux" and set(steps[-1][3]) <= set(project) and not set(steps[-1][2]) & set(project):
            if any(set(steps[-1][3]) & {*m[2], *m[3]} for m in closing_muxes):
                break
            closing_muxes.insert(0, steps[-1])
            steps = steps[:-1]
    held = frozenset(q for m in closing_muxes for q in m[3])
    cut = _cut_points(steps, project, closing, wanted, held) if project and reduce is not None else {}
    try:
        skip_to = -1
        for i, step in enumerate(steps):
            if i < skip_to:
                if i in cut:
                    state.fix(cut[i])
                continue
            kind = step[0]
            if kind == "fft" and step[2] and _rotation_between(steps, i, cut, state):
                # iQFT, the flag rotation cut to its read-out value (a diagonal on the clock), QFT.
                rot = steps[i + 1]
                column = np.ascontiguousarray(rot[1][:, cut[i + 1][rot[2][0]], 0])
                if state.fft_diagonal_fft(step[1], column, workers):
                    state.fixed[rot[2][0]] = cut[i + 1].pop(rot[2][0])
                    skip_to = i + 3
                    if i in cut:
                        state.fix(cut[i])
                    continue
            if kind == "mux":
                keep = None
                if i in cut and len(step[2]) == 1 and step[2][0] in cut[i] and state._fresh(step[2][0]):
                    # A fresh target cut right after: write only the kept half (one pass, not three).
                    keep = cut[i].pop(step[2][0])
                state.multiplexer(step[1], step[2], step[3], step[4], keep)
            elif kind == "layer":
                _apply_one_qubit_layer(state, step[1])
            elif kind == "fft":
                state.fft(step[1], step[2], workers)
            elif kind == "diag":
                state.diagonal(step[1], step[2])
            elif kind == "x":
                state.x(step[1])
            elif kind == "cx":
                state.cx(step[1], step[2])
            elif kind == "swap":
                state.swap(step[1], step[2])
            elif kind == "save":
                if step[1] in wanted and step[2]:
                    final_label = step[1]  # the final state itself, below: no extra copy
                elif step[1] in wanted:
                    out[step[1]] = state.statevector(saved_project, program.phase)
            else:
                state.matrix(step[1], step[2])
            if i in cut:
                state.fix(cut[i])
        state.factor *= program.phase
        if project and reduce is not None:
            out["final"] = reduce(state.projected(project, closing, tuple(closing_muxes)))
        else:
            out["final"] = state.release(reduce)
    finally:
        state.drop()
    if final_label is not None:
        out[final_label] = out["final"]
    return out


#: States up to this many amplitudes are kept in descending qubit order after a conditioned expand.
_CANONICAL_BELOW = 1 << 12
#: A multiplexer whose controls sit below at most this many amplitudes' worth of axes loops over them.
_LEADING_LOOP = 16


def _standard_order(t, order: list[int], factor: complex, rest: list[int]) -> np.ndarray:
    """A new flat array over the qubits ``rest`` in qiskit's order (most significant first): the
    stored tensor ``t`` (axes ``order`` ⊆ ``rest``) times ``factor``, zeros where an unstored
    qubit of ``rest`` (still |0⟩) is 1."""
    want = sorted(rest, reverse=True)
    moved = np.asarray(t).transpose([order.index(q) for q in want if q in order])
    if len(order) == len(want):  # every qubit stored: no zeros to write
        out = np.empty(moved.shape, dtype=complex)
        np.multiply(moved, factor, out=out)
        return out.reshape(-1)
    out = np.zeros((2,) * len(want), dtype=complex)
    # The trailing Ellipsis keeps a view when every index is an integer (a 0-d result).
    np.multiply(moved, factor, out=out[(*(slice(None) if q in order else 0 for q in want), Ellipsis)])
    return out.reshape(-1)


def _kron_vectors(vectors: list[np.ndarray]) -> np.ndarray:
    """v₀ ⊗ v₁ ⊗ … (v₀ most significant), by outer products (np.kron costs ~30 µs a call)."""
    out = np.ones(1, dtype=complex)
    for v in vectors:
        out = np.multiply.outer(out, v).reshape(-1)
    return out


def _rotation_between(steps, i: int, cut, state: "_State") -> bool:
    """Whether steps i, i+1, i+2 are an inverse QFT, a flag rotation on a fresh flag conditioned
    on exactly that clock and cut to its read-out value right after, and the QFT on that clock."""
    if i + 2 >= len(steps):
        return False
    a, rot, b = steps[i], steps[i + 1], steps[i + 2]
    return (
        rot[0] == "mux"
        and b[0] == "fft"
        and not b[2]
        and list(b[1]) == list(a[1]) == list(rot[3])
        and len(rot[2]) == 1
        and rot[1].shape[1] == 2
        and state._fresh(rot[2][0])
        and rot[2][0] in cut.get(i + 1, {})
    )


#: Clock registers from this many qubits get the fused four-step iQFT·rotation·QFT.
_FOUR_STEP_MIN = 12
#: Amplitudes per block of the four-step transform's middle pass (cache-sized).
_FOUR_STEP_BLOCK = 1 << 16


def _fft_diagonal_ifft(x: np.ndarray, d: np.ndarray, workers: int) -> None:
    """x ← IFFT(d ⊙ FFT(x)) along the last axis of x (rows: hi × N, orthonormal), in place, by the
    four-step decomposition N = N₁·N₂ (Bailey 1990): FFTs of length N₁ along the strided axis,
    then — row block by row block, in cache — the twiddles ω_N^(k₁·j₂), FFTs of length N₂, the
    diagonal (in the decomposition's k₁ + N₁·k₂ order, so no transpose is ever made), the inverse
    FFTs, the conjugate twiddles; then the inverse FFTs of length N₁. Three passes over x instead
    of two FFTs of many passes each and a diagonal pass (measured 1.2–1.3× faster at N = 2^19)."""
    hi, n = x.shape
    n1 = 1 << ((n.bit_length() - 1) // 2)
    n2 = n // n1
    cube = x.reshape(hi, n1, n2)
    _fft_in_place(cube, forward=True, workers=workers)
    dp = d.reshape(n2, n1).T  # dp[k1, k2] = d[k1 + n1·k2]
    # Blocks of k1 values over every row: the twiddles are computed once per block (a fresh
    # exponential per row measured slower than the whole transform), ~2^16 amplitudes a block.
    step = max(1, min(n1, _FOUR_STEP_BLOCK // (hi * n2)))
    j2 = np.arange(n2)

    def block(k0: int) -> None:
        k1 = np.arange(k0, min(n1, k0 + step))
        tw = np.exp((-2j * np.pi / n) * ((k1[:, None] * j2[None, :]) % n))
        r = cube[:, k0 : k0 + len(k1), :]
        r *= tw
        _fft_in_place(r, forward=True, workers=1, axis=2)
        r *= dp[k1]
        _fft_in_place(r, forward=False, workers=1, axis=2)
        r *= tw.conj()

    starts = range(0, n1, step)
    if workers > 1:
        with ThreadPoolExecutor(workers) as pool:
            list(pool.map(block, starts))
    else:
        for k0 in starts:
            block(k0)
    _fft_in_place(cube, forward=False, workers=workers)


def _contract_multiplexer(t, order: list[int], rows: Mapping[int, np.ndarray], stack, targets, controls, scratch=None):
    """Σ_k w_k·U_k ψ_k over the controls (w the Kronecker product of their read-out rows): the
    multiplexer Σ_k |k⟩⟨k| ⊗ U_k followed by ⟨w| on its controls, as one product — one read of ψ
    instead of a pass that writes the whole state and a read of it. With the targets leading
    ([targets, controls, rest…], as the engine lays out a clock above a prepared system):
    N (T × T·K) · ψ (T·K × rest), N[t′, (t, k)] = w_k·U_k[t′, t], the tensor over [targets…,
    rest…] returned; otherwise ψ (hi × K·T) · M (K·T × T), M[(k, t), t′] = w_k·U_k[t′, t], over
    [other qubits…, targets…] (ψ transposed to [others, controls, targets] first if it is not)."""
    cgroup = list(reversed(controls))
    tgroup = list(reversed(targets))
    K, T = stack.shape[0], stack.shape[1]
    w = _kron_vectors([rows[q] for q in cgroup])  # most significant first: k little-endian over ``controls``
    # Equal weights (a clock read on |0⟩ after its Hadamards) stay a factor of the small result.
    uniform = bool(np.all(w == w[0]))

    # In the free work buffer when it is large enough: a fresh 1 MiB array measured 0.8 ms of page
    # faults here, the product itself 0.06 ms.
    buf = scratch[: K * T * T] if scratch is not None and scratch.size >= K * T * T else np.empty(K * T * T, dtype=complex)

    def weighted(axes, shape, weights):
        if uniform:
            return _laid_out(stack, axes, buf)
        return np.multiply(weights, stack.transpose(axes), out=buf.reshape(shape))

    if order[: len(tgroup) + len(cgroup)] == tgroup + cgroup:
        rest = order[len(tgroup) + len(cgroup) :]
        m = weighted((1, 2, 0), (T, T, K), w[None, None, :])
        out = m.reshape(T, T * K) @ np.reshape(t, (T * K, -1))
        if uniform:
            out *= w[0]
        return out.reshape((2,) * (len(tgroup) + len(rest))), tgroup + rest
    others = [q for q in order if q not in controls and q not in targets]
    want = others + cgroup + tgroup
    if order != want:
        t = np.asarray(t).transpose([order.index(q) for q in want])
    m = weighted((0, 2, 1), (K, T, T), w[:, None, None])
    out = np.reshape(t, (2 ** len(others), K * T)) @ m.reshape(K * T, T)
    if uniform:
        out *= w[0]
    return out.reshape((2,) * (len(others) + len(tgroup))), others + tgroup


#: Per thread (its copies are overwritten in place, so never shared), multiplexer stacks copied
#: into the axis order a product reads them in (`_laid_out`), keyed by the stack's id and the
#: order, the stack held so its id is not reused: the last `_LAID_OUT_ENTRIES`, each at most
#: `_LAID_OUT_MAX_BYTES`.
_LAID_OUT = threading.local()
_LAID_OUT_ENTRIES = 4
_LAID_OUT_MAX_BYTES = 1 << 24


def _laid_out(stack: np.ndarray, axes: tuple[int, ...], into: np.ndarray | None = None) -> np.ndarray:
    """``stack.transpose(axes)`` as a contiguous array (a BLAS product needs its summed axes
    adjacent), kept for the next run of the same compiled circuit (the strided copy measured
    0.24 ms of a 17-qubit run's 1.6 ms). A new copy goes into the memory of the one it evicts:
    circuits run once each, as in cold inferences, then reuse a few buffers instead of mapping
    fresh pages for every copy (measured ~0.45 ms a MiB here). ``into``: where a copy too large to
    keep goes (a free work buffer; a new array when None)."""
    view = stack.transpose(axes)
    if view.nbytes > _LAID_OUT_MAX_BYTES:
        if into is None:
            return np.ascontiguousarray(view)
        out = into[: view.size].reshape(view.shape)
        np.copyto(out, view)
        return out
    kept = getattr(_LAID_OUT, "kept", None)
    if kept is None:
        kept = _LAID_OUT.kept = OrderedDict()
    key = (id(stack), axes)
    hit = kept.get(key)
    if hit is not None and hit[0] is stack:
        kept.move_to_end(key)
        return hit[1]
    memory = kept.popitem(last=False)[1][2] if kept and len(kept) >= _LAID_OUT_ENTRIES else None
    if memory is None or memory.size < view.size or memory.dtype != stack.dtype:
        memory = np.empty(view.size, dtype=stack.dtype)
    laid = memory[: view.size].reshape(view.shape)
    np.copyto(laid, view)
    kept[key] = (stack, laid, memory)
    return laid


def _scaled_identity(psi: np.ndarray) -> complex | None:
    """s when the square matrix ``psi`` is exactly s·I, else None."""
    n = psi.shape[0]
    if psi.shape != (n, n) or np.count_nonzero(psi) != n:
        return None
    d = psi.reshape(-1)[:: n + 1]
    return complex(d[0]) if np.all(d == d[0]) else None


def _step_qubits(step) -> list[int]:
    """The qubits one compiled step acts on (a save: none)."""
    kind = step[0]
    if kind == "mux":
        return [*step[2], *step[3]]
    if kind == "layer":
        return list(step[1])
    if kind in ("fft", "diag", "matrix"):
        return list(step[1] if kind == "fft" else step[2])
    if kind in ("x", "cx", "swap"):
        return list(step[1:])
    return []


def _cut_points(
    steps, project: Mapping[int, int], closing: list[dict], wanted: set, held: frozenset = frozenset()
) -> dict[int, dict[int, int]]:
    """Step index → the projected qubits to cut to their read-out value after it: each at its last
    step (and after the last state asked for), unless a closing layer or a multiplexer contracted
    at the end (``held``: its controls) acts on it. Cutting the flag after the rotation halves
    everything after it."""
    in_closing = {q for layer in closing for q in layer} | set(held)
    last_save = max((i for i, st in enumerate(steps) if st[0] == "save" and st[1] in wanted), default=-1)
    last: dict[int, int] = {}
    for i, st in enumerate(steps):
        for q in _step_qubits(st):
            if q in project:
                last[q] = i
    cut: dict[int, dict[int, int]] = {}
    for q, i in last.items():
        at = max(i, last_save)
        if q not in in_closing and at < len(steps) - 1:  # after the last step the read-out picks it for free
            cut.setdefault(at, {})[q] = project[q]
    return cut


def _blocks(view: np.ndarray, stack: np.ndarray, out: np.ndarray, identity) -> None:
    """out[k] = view[k]·stack[k]ᵀ for every k (view, out: (K, rows, T)); identity blocks copied."""
    if identity is None:
        np.matmul(view, stack.transpose(0, 2, 1), out=out)
        return
    for k in range(stack.shape[0]):
        if identity[k]:
            out[k] = view[k]
        else:
            np.matmul(view[k], stack[k].T, out=out[k])


def _fft_in_place(view: np.ndarray, *, forward: bool, workers: int, axis: int = 1) -> np.ndarray:
    """The orthonormal FFT (``forward``) or inverse FFT of ``view`` along ``axis``, written over
    ``view`` when scipy's pocketfft binding takes an output array (scipy ≥ 1.5); otherwise a new
    array from the public `scipy.fft`. In place matters: a fresh 2^23-amplitude result measured
    ~70 ms of page faults per transform here (208 ms against 140 ms with two threads)."""
    c2c = getattr(_pocketfft, "c2c", None) if _pocketfft is not None else None
    if c2c is not None and view.flags.writeable:
        try:
            return c2c(view, axes=[axis], forward=forward, inorm=1, out=view, nthreads=workers)
        except TypeError:  # another signature: the public route below
            pass
    f = scipy.fft.fft if forward else scipy.fft.ifft
    out = f(view, axis=axis, norm="ortho", workers=workers, overwrite_x=True)
    if not np.shares_memory(out, view):
        view[...] = out  # callers rely on the transform landing in ``view``
    return view


try:  # scipy's own binding of pocketfft (private; `_fft_in_place` falls back to scipy.fft)
    from scipy.fft._pocketfft import pypocketfft as _pocketfft
except ImportError:  # pragma: no cover - depends on the scipy build
    _pocketfft = None


#: Largest group of qubits a fused one-qubit layer applies as one matrix (2^4 × 2^4).
_LAYER_GROUP = 4


def _apply_one_qubit_layer(state: _State, per_qubit: dict[int, np.ndarray]) -> None:
    """One-qubit gates on distinct qubits commute: expand fresh qubits directly to u|0⟩, and apply
    the rest as Kronecker products over groups of adjacent axes."""
    stored = [q for q in per_qubit if q in state.order]
    for q in per_qubit:
        if q not in state.order:  # unstored: stays so, in its new one-qubit state
            state.set_pending(q, per_qubit[q])
    # Groups of qubits on adjacent axes, most significant first.
    stored.sort(key=state.order.index)
    groups: list[list[int]] = []
    for q in stored:
        if groups and len(groups[-1]) < _LAYER_GROUP and state.order.index(q) == state.order.index(groups[-1][-1]) + 1:
            groups[-1].append(q)
        else:
            groups.append([q])
    for group in groups:
        u = np.ones((1, 1), dtype=complex)
        for q in group:  # most significant first: kron(u_hi, …, u_lo)
            u = np.kron(u, per_qubit[q])
        state.matrix(u, list(reversed(group)))
