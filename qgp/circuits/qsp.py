"""Phase factors for symmetric quantum signal processing (QSP), in double precision.

Convention (the circuit code depends on it)::

    W(x) = e^{i·arccos(x)·X} = [[x, i√(1−x²)], [i√(1−x²), x]]
    U(x, Φ) = e^{iφ_0 Z} · W(x) e^{iφ_1 Z} · W(x) e^{iφ_2 Z} ⋯ W(x) e^{iφ_d Z},   Φ = (φ_0, …, φ_d).

Given a real polynomial f of degree d and parity d mod 2 by its Chebyshev coefficients
(f = Σ_k c_k T_k) with max_{[−1,1]} |f| < 1, `qsp_phases` finds symmetric phases
(φ_j = φ_{d−j}) with Re⟨0|U(x, Φ)|0⟩ = f(x) on [−1, 1].

Method: the optimisation-based symmetric QSP of Dong, Meng, Whaley & Lin, PRA 103, 042419 (2021),
solved by Newton's method on the reduced phases as in Dong, Lin, Ni & Wang, SIAM J. Sci. Comput.
46 (2024) ("Robust iterative method for symmetric QSP in all parameter regimes", arXiv:2307.12468).
The d̃ = ⌈(d+1)/2⌉ reduced phases ψ give the full phases

    Φ = π/4·(e_0 + e_d) − (ψ_0, …, ψ_{d̃−1}, mirrored),     φ_k = φ_{d−k} = π/4·[k∈{0,d}] − ψ_k,

so that Re U00(x, Φ) = Im U00(x, sym ψ), the papers' response: ψ = 0 gives f ≡ 0, and the map
ψ ↦ Chebyshev coefficients has Jacobian 2·I at ψ = 0 (ψ_k ↔ c_{d−2k}; 1·I for the middle phase
ψ_{d/2} ↔ c_0 when d is even). This is the linearisation behind the fixed-point iteration of
Dong, Lin, Ni & Wang, "Infinite quantum signal processing", arXiv:2209.10162 (2022), and the
starting point ψ = c/2 of Newton's method here.

The equations F(ψ)(x_j) = f(x_j) are imposed at the d̃ positive Chebyshev nodes
x_j = cos((2j+1)π/(4d̃)) — the positive half of the 2d̃ Chebyshev nodes; a polynomial of degree
≤ 2d̃ − 1 and definite parity is fixed by its values there. The exact Jacobian costs O(d·d̃) per
iteration: with P_m = E_0 W E_1 ⋯ W E_m (E_k = e^{iφ_k Z}) and symmetric Φ, the suffix after
E_k is the transpose of P_{d−k}, so ∂U00/∂φ_k = i·(a_0 b_0 − a_1 b_1) with a = row 0 of P_k E_k⁻¹
and b = row 0 of P_{d−k}; ∂/∂φ_{d−k} is the same number (U(Φ) = U(Φ)ᵀ). Only the first row of
each prefix is carried, for all nodes at once.

Phases are those of QSPPACK with ``targetPre = true``; pyqsp 0.2.0's ``sym_qsp`` (Im U00 target)
returns Φ_p with π/4·(e_0 + e_d) − Φ_p equal to these to 2e-15 (measured, degrees 21–2001).

Measured on 2 shared cores, with max|f| the true maximum (see `_max_abs`): Newton converges (node
residual ≤ 1e-13; dense-grid residual ≤ 5e-13 for smooth targets, ≤ 8e-12 for a·T_d and random
coefficients at d ≥ 1000, where Clenshaw's own error is of that size) for every target tried —
x/(x² + 50⁻²), sin 40x, tanh 20x, cos 30x, e^{−20x²}, T_d and random coefficients, d = 21 … 2001 —
at max|f| = 0.5, 0.9, 0.99, 0.999, 0.9999 and 0.99999, in 3, 5, 6, 8, 9–12 and 11–14 iterations. The fixed-point
iteration ψ ← ψ − J₀⁻¹(F(ψ) − f) (J₀ the Jacobian at 0) needs ≈ 50 iterations at 0.9, ≈ 1500 at
0.9999 and did not converge in 2000 at 0.99999, so it is not used. Time per call (best of 5, the
target ≈ cos 40x or x/(x² + 50⁻²) at max|f| = 0.9): 0.01 s at d = 100, 0.1 s at d = 500, 0.3 s at
d = 1000, 0.6 s at d = 2000 (up to ≈ 2 s under load); memory O(d²/4) complex numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as _cheb

from qgp.errors import QgpError

__all__ = ["PhaseFactors", "qsp_phases", "qsp_response", "chebyshev_values"]

# Entries of the other parity below this fraction of the largest |c_k| count as zero.
_PARITY_RTOL = 1e-14
# |x| may exceed 1 by this much (rounding) in `qsp_response`; x is then clipped to [−1, 1].
_X_ATOL = 1e-12


@dataclass(frozen=True)
class PhaseFactors:
    """Symmetric QSP phases for one target polynomial.

    Attributes
    ----------
    phases : ndarray of shape (d+1,)
        Full symmetric phases Φ (φ_j = φ_{d−j}) in the module's convention.
    degree : int
        d, the polynomial degree (``len(phases) − 1``).
    residual : float
        max |Re U00(x, Φ) − f(x)| on a dense Chebyshev–Lobatto grid of max(2001, 4d+1) points
        in [−1, 1] (the ends included).
    iterations : int
        Newton steps taken until the node residual met ``tol`` (0 for the zero polynomial; the
        one polishing step after that is not counted).
    method : str
        ``"newton"``.
    """

    phases: np.ndarray
    degree: int
    residual: float
    iterations: int
    method: str


def chebyshev_values(coefficients, x) -> np.ndarray:
    """f(x) = Σ_k c_k T_k(x) by Clenshaw's recurrence (`numpy.polynomial.chebyshev.chebval`).

    Parameters
    ----------
    coefficients : array_like of shape (d+1,)
        Chebyshev coefficients c_k, low order first.
    x : array_like of any shape

    Returns
    -------
    ndarray of the shape of x (float)
    """
    c = np.asarray(coefficients, dtype=float)
    if c.ndim != 1 or c.size == 0:
        raise QgpError("Chebyshev coefficients must be a non-empty 1-D array; pass c_0 … c_d")
    return np.asarray(_cheb.chebval(np.asarray(x, dtype=float), c), dtype=float)


def qsp_response(phases, x) -> np.ndarray:
    """⟨0|U(x, Φ)|0⟩ for every x: the numpy reference of the convention (any phases, not only symmetric).

    Carries the first row of e^{iφ_0 Z} W e^{iφ_1 Z} ⋯ W e^{iφ_k Z} through k = 0 … d, vectorised over x.

    Parameters
    ----------
    phases : array_like of shape (d+1,)
    x : array_like of any shape, entries in [−1, 1]

    Returns
    -------
    ndarray of the shape of x (complex)
    """
    phi = np.asarray(phases, dtype=float)
    if phi.ndim != 1 or phi.size == 0 or not np.all(np.isfinite(phi)):
        raise QgpError("phases must be a non-empty 1-D array of finite numbers (φ_0 … φ_d)")
    xa = np.asarray(x, dtype=float)
    if not np.all(np.isfinite(xa)) or np.any(np.abs(xa) > 1 + _X_ATOL):
        raise QgpError("signal values x must be finite and in [−1, 1]; rescale x into the interval")
    return _first_row(phi, np.clip(xa.ravel(), -1.0, 1.0)).reshape(xa.shape)


def _first_row(phi: np.ndarray, x: np.ndarray) -> np.ndarray:
    """⟨0|U(x, Φ)|0⟩: row 0 (a, b) of P_m = E_0 W E_1 ⋯ W E_m carried to m = d; x of shape (n,)."""
    s = 1j * np.sqrt((1.0 - x) * (1.0 + x))  # accurate near x = ±1, unlike 1 − x²
    e = np.exp(1j * phi)
    ec = e.conjugate()
    a = np.full(x.size, e[0], dtype=complex)
    b = np.zeros(x.size, dtype=complex)
    for k in range(1, phi.size):
        # (a, b)·W·E_k with W = [[x, s], [s, x]], E_k = diag(e^{iφ_k}, e^{−iφ_k})
        a, b = (a * x + b * s) * e[k], (a * s + b * x) * ec[k]
    return a


def _full_phases(psi: np.ndarray, d: int) -> np.ndarray:
    """Φ from the reduced phases ψ (shape (d̃,)): φ_k = φ_{d−k} = π/4·[k ∈ {0, d}] − ψ_k."""
    phi = np.empty(d + 1)
    half = 0.0 - psi  # 0.0 − ψ: no −0.0 entries
    phi[: psi.size] = half
    phi[d - psi.size + 1 :] = half[::-1]
    phi[0] += np.pi / 4
    phi[d] += np.pi / 4  # d = 0: both quarters land on the one phase, Re e^{iπ/2} = 0
    return phi


def _residual_and_jacobian(psi: np.ndarray, d: int, nodes: np.ndarray, target: np.ndarray):
    """(F(ψ) − f at the nodes, shape (d̃,); ∂F/∂ψ, shape (d̃, d̃), rows nodes, columns ψ_k).

    One pass over k = 0 … d carries row 0 (a, b) of P_k for all nodes; rows k < d̃ are kept, and at
    k = d − j ≥ d − d̃ + 1 the derivative in φ_j is formed from the kept row j and the current row:
    ∂U00/∂φ_j = i·(a_j e^{−iφ_j} a_{d−j} − b_j e^{iφ_j} b_{d−j}). Memory O(d̃²).
    """
    phi = _full_phases(psi, d)
    m = psi.size
    s = 1j * np.sqrt((1.0 - nodes) * (1.0 + nodes))
    e = np.exp(1j * phi)
    ec = e.conjugate()
    rows_a = np.empty((m, nodes.size), dtype=complex)
    rows_b = np.empty((m, nodes.size), dtype=complex)
    du = np.empty((m, nodes.size), dtype=complex)  # ∂U00/∂φ_j, j < d̃
    a = np.full(nodes.size, e[0], dtype=complex)
    b = np.zeros(nodes.size, dtype=complex)
    for k in range(d + 1):
        if k:
            a, b = (a * nodes + b * s) * e[k], (a * s + b * nodes) * ec[k]
        if k < m:
            rows_a[k], rows_b[k] = a, b
        j = d - k
        if j < m:  # a_j e^{−iφ_j}: row 0 of the factors left of E_j; (a, b) now: column 0 of those right of it
            du[j] = rows_a[j] * ec[j] * a - rows_b[j] * e[j] * b
    weight = np.where(2 * np.arange(m) == d, 1.0, 2.0)[:, None]  # φ_j and φ_{d−j} both carry ψ_j
    jac = (weight * du.imag).T  # ∂F/∂ψ_j = −weight·Re(i·du) = weight·Im(du)
    return a.real - target, jac


def _check_coefficients(coefficients) -> tuple[np.ndarray, int, int]:
    """Checked coefficients (wrong-parity entries zeroed), degree d, parity."""
    try:
        c = np.asarray(coefficients)
    except Exception:  # ragged lists and the like
        raise QgpError("Chebyshev coefficients must be a 1-D array of real numbers; pass c_0 … c_d") from None
    if c.ndim != 1 or c.size == 0:
        raise QgpError(
            f"Chebyshev coefficients must be a non-empty 1-D array, got shape {c.shape}; pass c_0 … c_d"
        )
    if np.iscomplexobj(c):
        if np.any(c.imag != 0):
            raise QgpError("Chebyshev coefficients must be real; QSP here targets a real polynomial f")
        c = c.real
    try:
        c = c.astype(float)
    except (TypeError, ValueError):
        raise QgpError("Chebyshev coefficients must be real numbers; pass a float array c_0 … c_d") from None
    if not np.all(np.isfinite(c)):
        raise QgpError("Chebyshev coefficients contain NaN or infinity; pass finite numbers")
    scale = float(np.max(np.abs(c)))
    if scale == 0.0:
        return c.copy(), c.size - 1, (c.size - 1) % 2
    big = np.abs(c) > _PARITY_RTOL * scale
    has_even, has_odd = bool(np.any(big[0::2])), bool(np.any(big[1::2]))
    if has_even and has_odd:
        raise QgpError(
            "Chebyshev coefficients mix even and odd terms; QSP needs definite parity — "
            "split f into its even and odd parts and make one phase sequence each"
        )
    parity = 1 if has_odd else 0
    d = c.size - 1 if (c.size - 1) % 2 == parity else c.size - 2  # a trailing zero of the other parity drops
    c = c[: d + 1].copy()
    c[1 - parity :: 2] = 0.0
    return c, d, parity


def _dense_grid(d: int) -> np.ndarray:
    """Chebyshev–Lobatto points cos(πj/(n−1)), n = max(2001, 4d+1): ±1 included."""
    n = max(2001, 4 * d + 1)
    return np.cos(np.linspace(0.0, np.pi, n))


def _max_abs(c: np.ndarray, grid: np.ndarray, f_grid: np.ndarray) -> float:
    """max_{[−1,1]} |f|: the grid's local maxima of |f|, refined by safeguarded Newton steps on f′ = 0.

    A grid of 4d points alone can miss a peak by a few per cent at high degree (a peak between two
    points of a lobe of width π/d in arccos x), which would let through targets with max|f| > 1
    (measured: 1.6 % for random coefficients at d = 2001), and Newton does not converge for those.
    """
    a = np.abs(f_grid)
    peak = float(np.max(a))
    if c.size < 3:  # constant or linear: the maximum is at an end
        return peak
    # In θ = arccos x the grid spacing is ≤ π/(4d) and |g″| ≤ d²·max|g| (Bernstein), so a lobe whose
    # grid maximum is below 0.9·peak cannot top the peak: only the others are refined.
    i = np.flatnonzero((a[1:-1] >= a[:-2]) & (a[1:-1] >= a[2:]) & (a[1:-1] >= 0.9 * peak)) + 1
    lo, hi = grid[i + 1], grid[i - 1]  # the grid runs from +1 down to −1
    x = grid[i].copy()
    c1 = _cheb.chebder(c)
    c2 = _cheb.chebder(c1)
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(6):
            step = _cheb.chebval(x, c1) / _cheb.chebval(x, c2)
            x = np.clip(x - np.where(np.isfinite(step), step, 0.0), lo, hi)
    return max(peak, float(np.max(np.abs(_cheb.chebval(x, c)), initial=0.0)))


def qsp_phases(coefficients, *, tol: float = 1e-13, max_iterations: int = 100) -> PhaseFactors:
    """Symmetric QSP phases Φ with Re⟨0|U(x, Φ)|0⟩ = f(x) = Σ_k c_k T_k(x) on [−1, 1].

    Newton's method on the reduced phases (Dong, Lin, Ni & Wang, SIAM J. Sci. Comput. 46 (2024)),
    started at the linearisation ψ = c/2, with the exact O(d·d̃) Jacobian; see the module docstring.

    Parameters
    ----------
    coefficients : array_like of shape (d+1,)
        Chebyshev coefficients of f, low order first, of one parity (the other parity's entries
        zero; a trailing zero of the other parity is dropped, lowering d by one).
        Needs max_{[−1,1]} |f| < 1.
    tol : float
        Stop when max |F(ψ) − f| at the d̃ Chebyshev nodes is ≤ tol.
    max_iterations : int
        Newton iterations allowed.

    Returns
    -------
    PhaseFactors
        ``phases`` of shape (d+1,), symmetric.

    Raises
    ------
    QgpError
        Empty, non-finite or mixed-parity coefficients, max|f| ≥ 1 on a dense grid, bad ``tol`` or
        ``max_iterations`` (all before any iteration), or no convergence within ``max_iterations``.
    """
    c, d, parity = _check_coefficients(coefficients)
    if isinstance(tol, bool) or not (isinstance(tol, (int, float, np.floating)) and np.isfinite(tol) and tol > 0):
        raise QgpError(f"tol must be a positive number, got {tol!r}")
    if isinstance(max_iterations, bool) or not (isinstance(max_iterations, (int, np.integer)) and max_iterations >= 1):
        raise QgpError(f"max_iterations must be an integer ≥ 1, got {max_iterations!r}")
    grid = _dense_grid(d)
    f_grid = chebyshev_values(c, grid)
    peak = _max_abs(c, grid, f_grid)
    if peak >= 1.0:
        raise QgpError(
            f"max |f| on [−1, 1] is {peak:.6g} ≥ 1, which no QSP sequence reaches; "
            "scale the polynomial down (e.g. by 0.9/max|f|)"
        )

    m = d // 2 + 1  # d̃ = ⌈(d+1)/2⌉
    if peak == 0.0:
        phases = _full_phases(np.zeros(m), d)
        residual = _grid_residual(phases, grid, f_grid)
        return PhaseFactors(phases=phases, degree=d, residual=residual, iterations=0, method="newton")

    nodes = np.cos((2 * np.arange(m) + 1) * np.pi / (4 * m))
    target = chebyshev_values(c, nodes)
    # ψ_k ↔ c_{d−2k}: F(ψ) ≈ Σ 2ψ_k T_{d−2k} (ψ_{d/2} T_0 for the middle phase of even d)
    psi = c[d - 2 * np.arange(m)] / np.where(2 * np.arange(m) == d, 1.0, 2.0)
    err = np.inf
    for it in range(max_iterations + 1):  # it Newton steps taken so far
        res, jac = _residual_and_jacobian(psi, d, nodes, target)
        err = float(np.max(np.abs(res)))
        if err <= tol:
            # one polishing step, kept only if it lowers the residual (one forward pass, no Jacobian)
            try:
                polished = psi - np.linalg.solve(jac, res)
                if np.max(np.abs(_first_row(_full_phases(polished, d), nodes).real - target)) < err:
                    psi = polished
            except np.linalg.LinAlgError:
                pass
            phases = _full_phases(psi, d)
            residual = _grid_residual(phases, grid, f_grid)
            return PhaseFactors(phases=phases, degree=d, residual=residual, iterations=it, method="newton")
        if it == max_iterations or not np.isfinite(err):
            break
        try:
            psi = psi - np.linalg.solve(jac, res)
        except np.linalg.LinAlgError:  # singular Jacobian: only past the range where Newton converges
            break
    raise QgpError(
        f"QSP phase finding (Newton, degree {d}, max|f| = {peak:.6g}) did not converge "
        f"(residual {err:.3g} at the Chebyshev nodes after {it} iterations, tol {tol:g}); "
        "lower max |f| (scale the polynomial down), raise max_iterations or loosen tol"
    )


def _grid_residual(phases: np.ndarray, grid: np.ndarray, f_grid: np.ndarray) -> float:
    return float(np.max(np.abs(qsp_response(phases, grid).real - f_grid)))
