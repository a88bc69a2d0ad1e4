"""The even polynomial, and its QSVT circuit, behind log det A = tr ln A for a positive-definite A.

The eigenvalues of A lie in the a-priori range [λ_lo, λ_hi]; with the block encoding's α they map
to x = λ/α ∈ [a, b], a = λ_lo/α, b = λ_hi/α ≤ 1 (0 < a < b ≤ 1 is required). The target, scaled
into [0, h] on [a, b] (h = ``height``, default 0.9), is

    f(x) = h·ln(b/x)/ln(b/a),     so     ln λ = ln(α·b) − (ln(b/a)/h)·f(λ/α),

and tr f(A/α), estimated by trace estimation of the QSVT block, gives log det A. QSVT needs definite
parity; A is positive definite, so only x > 0 matters and p is taken EVEN, of even degree d, with
|p| ≤ max_abs (default 0.999, `qgp.circuits.qsvt_inversion.QSP_MAX_ABS`) on all of [−1, 1].

Construction: the convex-optimisation route of Dong, Meng, Whaley & Lin, PRA 103, 042419 (2021)
(the target polynomial found as a convex problem over its Chebyshev coefficients), here the
minimax problem as a linear program (scipy.optimize.linprog, HiGHS) over c_0, c_2, …, c_d:

    minimise e   subject to   |p(x_i) − f(x_i)| ≤ e  on a Chebyshev grid of [a, b],
                              |p(x_j)| ≤ max_abs     on a Chebyshev grid of [0, 1] (p is even).

Both grids start with `_LP_POINTS_PER_DEGREE`·(d + 1) points (plus the ends). A grid constraint
leaves p free between points, so the LP is re-solved with the points where the dense check finds
|p − f| > e or |p| > max_abs added (a cutting-plane exchange, at most `_EXCHANGE_ROUNDS` rounds):
this is cheaper than a grid dense enough to need no exchange (measured: 10·(d + 1) points alone
still overshoot max_abs by 1.3e-3 at d = 128–512, and one such LP takes 7 s at d = 256, 90–850 s at
d = 512). Afterwards max|p| on [−1, 1] is MEASURED (dense grid, local refinement;
`qgp.circuits.polynomials._refined_max`) and, if above max_abs, p is scaled down by
max_abs/max|p| (less 1e-10 for rounding; ``rescale``). The exchange stops once the overshoot is
≤ 1e-3·e, so the rescale adds at most that to the error. The uniform error on [a, b] is then MEASURED the same way — it is the
``error`` reported, never an a-priori bound.

Rate. In y = x² the target is analytic on [a², b²] except for the logarithmic branch point at
y = 0, so the unconstrained minimax error falls like ρ^(−d/2), ρ = z + √(z² − 1),
z = (a² + b²)/(b² − a²) (Bernstein); since the LP's feasible set is smaller, its error cannot fall
faster asymptotically. The bound on (0, a), where f climbs past h towards +∞, costs rate: measured,
a = 0.1, b = 0.9 gives ≈ 0.075 per degree against ln ρ/2 = 0.11.

Measured (2 shared cores, cold cache), a = 0.05, b = 0.95, h = 0.9, max_abs = 0.999:

    target log_error   d     error      log_error   search    one fit at d
    1e-2               88    2.98e-3    9.74e-3     2.0 s     0.23 s
    1e-3              144    3.01e-4    9.84e-4     3.9 s     0.66 s
    1e-6              320    2.97e-7    9.71e-7     79 s      ~8 s

Each fit is 3–4 LP solves (the exchange). As the error nears ~1e-7 the LP turns degenerate and
slow (d = 382 here: 200 s, error 7e-8), hence `MIN_TARGET_ERROR`. Wider ranges cost more:
a = 0.01, b = 1 needs d = 676 for log_error 1e-3 (a search of ~7 minutes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.polynomial import chebyshev as _cheb
from qiskit.circuit import QuantumCircuit
from scipy.optimize import linprog

from qgp.circuits.encoding import BlockEncoding, check_matrix
from qgp.circuits.inversion import check_bounds
from qgp.circuits.methods.encodings import get_encoding
from qgp.circuits.phase_estimation import Form
from qgp.circuits.polynomials import _POINTS_PER_DEGREE, _chebyshev_points, _dense_values, _refined_max
from qgp.circuits.qsp import chebyshev_values, qsp_phases
from qgp.circuits.qsvt import qsvt_circuit
from qgp.circuits.qsvt_inversion import QSP_MAX_ABS
from qgp.errors import QgpError
from qgp.settings import CircuitSettings

__all__ = [
    "MAX_DEGREE",
    "MIN_TARGET_ERROR",
    "LogPolynomial",
    "LogCircuit",
    "log_polynomial",
    "build_log_circuit",
]

#: Largest degree accepted: the LP's cost grows steeply with d (see the module docstring).
MAX_DEGREE = 1024
#: Smallest target for ``log_error``: as the error nears ~1e-7 the LP turns degenerate and slow.
MIN_TARGET_ERROR = 1e-6

# Initial LP grid: points per unit of degree on each of [a, b] and [0, 1].
_LP_POINTS_PER_DEGREE = 4
# Exchange: stop once the dense check finds |p − f| ≤ e·(1 + _FIT_SLACK) + _ABS_SLACK on [a, b]
# and |p| ≤ max_abs + _BOUND_SLACK·e + _ABS_SLACK on [0, 1]. A final rescale for an overshoot δ
# adds at most δ to the error, so 1e-3·e is harmless.
_EXCHANGE_ROUNDS = 12
_FIT_SLACK = 1e-3
_BOUND_SLACK = 1e-3
_ABS_SLACK = 1e-10
# Grid maxima this far (relative) below the threshold are refined too; Newton steps per peak.
_PEAK_WINDOW = 2e-2
_NEWTON_STEPS = 8
# Rescaled p stays below max_abs by this relative margin, for rounding.
_BOUND_MARGIN = 1e-10
# Tight tolerances: HiGHS's default 1e-7 would be the error floor. The time limit stops the
# degenerate LPs met when the error nears that floor (d = 512 on [0.05, 0.95] ran > 10 min).
_LP_TIME_LIMIT = 300.0
_HIGHS_OPTIONS = {
    "primal_feasibility_tolerance": 1e-10,
    "dual_feasibility_tolerance": 1e-10,
    "time_limit": _LP_TIME_LIMIT,
}


@dataclass(frozen=True, eq=False)
class LogPolynomial:
    """The even polynomial p ≈ f(x) = h·ln(b/x)/ln(b/a) on [a, b], |p| ≤ max_abs on [−1, 1].

    Attributes
    ----------
    coefficients : ndarray of shape (degree + 1,)
        Chebyshev coefficients c_0 … c_d of p (read-only); odd-index entries are exactly 0.
    degree : int
        d, even.
    lower, upper : float
        a and b, 0 < a < b ≤ 1.
    height : float
        h = f(a).
    max_abs : float
        Measured max |p| on [−1, 1] (after any rescale).
    error : float
        Measured max |p − f| on [a, b].
    rescale : float
        The factor p was scaled down by after the LP (1.0 when the LP's solution kept the bound).
    """

    coefficients: np.ndarray
    degree: int
    lower: float
    upper: float
    height: float
    max_abs: float
    error: float
    rescale: float = 1.0

    def __call__(self, x) -> np.ndarray:
        """p(x) for x of any shape (`qgp.circuits.qsp.chebyshev_values`)."""
        return chebyshev_values(self.coefficients, x)

    def target(self, x) -> np.ndarray:
        """f(|x|) = h·ln(b/|x|)/ln(b/a) (even, like p); +inf at x = 0.

        Parameters
        ----------
        x : array_like of any shape

        Returns
        -------
        ndarray of the shape of x (float)
        """
        return _target(np.asarray(x, dtype=float), self.lower, self.upper, self.height)

    def log_error(self) -> float:
        """error·ln(b/a)/h: the worst error in ln λ of one eigenvalue with λ/α in [a, b]."""
        return float(self.error * math.log(self.upper / self.lower) / self.height)

    def log_eigenvalue(self, p_values, alpha: float) -> np.ndarray:
        """ln λ ≈ ln(α·b) − (ln(b/a)/h)·p(λ/α), the inverse of the normalisation of f.

        Parameters
        ----------
        p_values : array_like of any shape
            Values p(λ/α) (or estimates of them).
        alpha : float
            The block encoding's α.

        Returns
        -------
        ndarray of the shape of p_values (float)
        """
        pv = np.asarray(p_values, dtype=float)
        return math.log(float(alpha) * self.upper) - (math.log(self.upper / self.lower) / self.height) * pv


@dataclass(frozen=True, eq=False)
class LogCircuit:
    """The QSVT circuit whose post-selected block (flag = 1, block = 0) is p(A/α).

    Attributes
    ----------
    circuit : QuantumCircuit
        `qgp.circuits.qsvt.qsvt_circuit`: registers system (m) | flag (1) | block (b + 1).
    polynomial : LogPolynomial
    alpha : float
        The block encoding's α.
    block_encoding : BlockEncoding
    n_system_qubits : int
        m.
    n_block_qubits : int
        The encoding's block qubits + 1 (the signal qubit).
    n_oracle_calls : int
        d: block-encoding calls.
    phase_residual : float
        `qgp.circuits.qsp.PhaseFactors.residual` of the phases.
    form : str
        ``"gate"`` or ``"simulation"``.
    """

    circuit: QuantumCircuit
    polynomial: LogPolynomial
    alpha: float
    block_encoding: BlockEncoding
    n_system_qubits: int
    n_block_qubits: int
    n_oracle_calls: int
    phase_residual: float
    form: str

    def log_eigenvalue(self, p_values) -> np.ndarray:
        """ln λ from values p(λ/α): `LogPolynomial.log_eigenvalue` with this circuit's α.

        Parameters
        ----------
        p_values : array_like of any shape

        Returns
        -------
        ndarray of the shape of p_values (float)
        """
        return self.polynomial.log_eigenvalue(p_values, self.alpha)


# -- public entry points ---------------------------------------------------------------------------


def log_polynomial(
    lower: float,
    upper: float,
    *,
    degree: int | None = None,
    target_error: float | None = None,
    max_abs: float = QSP_MAX_ABS,
    height: float = 0.9,
) -> LogPolynomial:
    """The even LP-minimax polynomial p ≈ h·ln(b/x)/ln(b/a) on [a, b], |p| ≤ max_abs on [−1, 1].

    Parameters
    ----------
    lower, upper : float
        a = λ_lo/α and b = λ_hi/α, 0 < a < b ≤ 1.
    degree : int, optional
        The even degree d, 2 … `MAX_DEGREE`.
    target_error : float, optional
        Wanted worst error in ln λ (`LogPolynomial.log_error`): the smallest even degree meeting
        it (measured) is used, found by doubling and then bisection. Exactly one of ``degree`` and
        ``target_error``.
    max_abs : float
        Bound on |p| over [−1, 1], in (0, 1).
    height : float
        h = f(a), in (0, max_abs].

    Returns
    -------
    LogPolynomial
        Coefficients of shape (d + 1,), read-only; the same object for the same arguments.

    Raises
    ------
    QgpError
        Bad range, degree (or its parity), target_error, max_abs or height; a target needing a
        degree above `MAX_DEGREE`.
    """
    a, b = _check_range(lower, upper)
    bound = _check_unit(max_abs, "max_abs", open_top=True)
    h = _check_unit(height, "height", open_top=False)
    if h > bound:
        raise QgpError(f"height {h:g} exceeds max_abs {bound:g}, so |p| ≤ max_abs cannot reach f(a) = h; lower height")
    if (degree is None) == (target_error is None):
        raise QgpError("give exactly one of degree and target_error, e.g. degree=64 or target_error=1e-3")
    if degree is not None:
        return _fit(a, b, _check_degree(degree), bound, h)
    return _fit(a, b, _degree_for(a, b, _check_target(target_error), bound, h), bound, h)


def build_log_circuit(A, settings: CircuitSettings, bounds: tuple[float, float], *, form: Form = "gate") -> LogCircuit:
    """The QSVT circuit of the log polynomial of A/α (A positive definite).

    Parameters
    ----------
    A : array_like of shape (2^m, 2^m)
        The padded symmetric matrix.
    settings : CircuitSettings
        ``encoding``; ``degree`` (the odd inversion degree: the log polynomial takes degree + 1)
        or ``target_error`` (the target for `LogPolynomial.log_error`).
    bounds : (float, float)
        (λ_lo, λ_hi), a-priori bounds on A's eigenvalues.
    form : {"gate", "simulation"}

    Returns
    -------
    LogCircuit
        Its block (flag = 1, block = 0) is p(A/α), a = λ_lo/α, b = min(λ_hi/α, 1).

    Raises
    ------
    QgpError
        Bad matrix, bounds, encoding, degree or form; neither degree nor target_error.
    """
    mat = check_matrix(A)
    lo, hi = check_bounds(bounds)
    m = mat.shape[0].bit_length() - 1
    be = get_encoding(settings.encoding).build(mat)
    alpha = float(be.alpha)
    a, b = lo / alpha, min(hi / alpha, 1.0)
    if not (0.0 < a < b <= 1.0):
        raise QgpError(
            f"the log polynomial needs 0 < λ_lo < λ_hi ≤ α, got λ_lo = {lo:.6g}, λ_hi = {hi:.6g}, α = {alpha:.6g}; "
            "the eigenvalue bounds must satisfy 0 < λ_lo < λ_hi ≤ α (widen them if they are equal)"
        )
    if settings.degree is not None:
        d = settings.degree
        if not isinstance(d, (int, np.integer)) or isinstance(d, bool) or d % 2 == 0:
            raise QgpError(
                f"[circuit] degree is the inversion polynomial's degree and must be an odd integer, got {d!r}; "
                f"use an odd degree (the log polynomial takes degree + 1)"
            )
        poly = log_polynomial(a, b, degree=int(d) + 1, max_abs=QSP_MAX_ABS)
    elif settings.target_error is not None:
        poly = log_polynomial(a, b, target_error=float(settings.target_error), max_abs=QSP_MAX_ABS)
    else:
        raise QgpError("the log-determinant circuit needs [circuit] target_error or degree; give one")
    phases = qsp_phases(poly.coefficients)
    qc = qsvt_circuit(be, phases.phases, form)
    qc.name = "log-determinant"
    return LogCircuit(
        circuit=qc,
        polynomial=poly,
        alpha=alpha,
        block_encoding=be,
        n_system_qubits=m,
        n_block_qubits=be.n_block_qubits + 1,
        n_oracle_calls=int(phases.degree),
        phase_residual=float(phases.residual),
        form=form,
    )


# -- checks ----------------------------------------------------------------------------------------


def _is_real(x) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, (bool, np.bool_)) and math.isfinite(x)


def _check_range(lower, upper) -> tuple[float, float]:
    if not (_is_real(lower) and _is_real(upper) and 0.0 < float(lower) < float(upper) <= 1.0):
        raise QgpError(
            f"the log polynomial's range needs 0 < lower < upper ≤ 1, got ({lower!r}, {upper!r}); "
            "the eigenvalue bounds must satisfy 0 < λ_lo < λ_hi ≤ α"
        )
    return float(lower), float(upper)


def _check_unit(value, name: str, *, open_top: bool) -> float:
    ok = _is_real(value) and 0.0 < float(value) and (float(value) < 1.0 if open_top else float(value) <= 1.0)
    if not ok:
        interval = "(0, 1)" if open_top else "(0, 1]"
        raise QgpError(f"{name} must be a number in {interval}, got {value!r}; pass e.g. {name}=0.9")
    return float(value)


def _check_degree(degree) -> int:
    if not isinstance(degree, (int, np.integer)) or isinstance(degree, (bool, np.bool_)):
        raise QgpError(f"degree must be an integer, got {degree!r}; pass an even degree, e.g. degree=64")
    d = int(degree)
    if d % 2:
        raise QgpError(f"degree must be even (the log polynomial is even), got {d}; use degree={d + 1}")
    if not (2 <= d <= MAX_DEGREE):
        raise QgpError(f"degree must be between 2 and {MAX_DEGREE}, got {d}; pass an even degree in that range")
    return d


def _check_target(target_error) -> float:
    if not _is_real(target_error) or not float(target_error) > 0.0:
        raise QgpError(f"target_error must be a positive number (error in ln λ), got {target_error!r}; pass e.g. 1e-3")
    eps = float(target_error)
    if eps < MIN_TARGET_ERROR:
        raise QgpError(
            f"target_error {eps:g} is below {MIN_TARGET_ERROR:g}, where the LP's tolerance dominates; "
            f"pass target_error ≥ {MIN_TARGET_ERROR:g}"
        )
    return eps


# -- the target and the LP -------------------------------------------------------------------------


def _target(x: np.ndarray, a: float, b: float, h: float) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return h * (math.log(b) - np.log(np.abs(x))) / math.log(b / a)


def _even_basis(theta: np.ndarray, n: int) -> np.ndarray:
    """T_{2k}(cos θ) = cos(2kθ), k = 0 … n: bounded by 1, so the LP is well scaled."""
    return np.cos(np.outer(theta, 2.0 * np.arange(n + 1)))


def _solve_lp(th_fit: np.ndarray, th_bound: np.ndarray, a: float, b: float, n: int, bound: float, h: float):
    """(even coefficients c_0, c_2, …, c_2n, e) of the grid minimax."""
    f = _target(np.cos(th_fit), a, b, h)
    tf, tb = _even_basis(th_fit, n), _even_basis(th_bound, n)
    ones, zeros = np.ones((tf.shape[0], 1)), np.zeros((tb.shape[0], 1))
    a_ub = np.block([[tf, -ones], [-tf, -ones], [tb, zeros], [-tb, zeros]])
    b_ub = np.concatenate([f, -f, np.full(2 * tb.shape[0], bound)])
    cost = np.zeros(n + 2)
    cost[-1] = 1.0
    res = linprog(
        cost,
        A_ub=a_ub,
        b_ub=b_ub,
        bounds=[(None, None)] * (n + 1) + [(0.0, None)],
        method="highs",
        options=_HIGHS_OPTIONS,
    )
    if res.status != 0 or res.x is None:  # the LP is feasible (p = 0): only the time limit ends here
        raise QgpError(
            f"the log polynomial's LP did not finish at degree {2 * n} ({res.message.strip()}); "
            "its error there is near the solver's floor (~1e-7): use a lower degree or a looser target_error"
        )
    return res.x[:-1], float(res.x[-1])


def _full(even: np.ndarray) -> np.ndarray:
    c = np.zeros(2 * even.size - 1)
    c[0::2] = even
    return c


def _grid(c: np.ndarray, lo: float, hi: float, x_lo: float, x_hi: float):
    """θ ascending in [lo, hi] (x = cos θ ∈ [x_lo, x_hi]) and p there, ≥ 20·(d + 1) points.

    A DCT grid over (0, π) sized for the span, plus Chebyshev points of [x_lo, x_hi] when the
    span is so short that the DCT grid would be capped.
    """
    d = c.size - 1
    need = _POINTS_PER_DEGREE * (d + 1)
    size = int(min(max(math.ceil(need * math.pi / max(hi - lo, 1e-300)) + 64, 4096), 1 << 22))
    theta, p = _dense_values(c, size)
    keep = (theta >= lo) & (theta <= hi)
    th, pv = theta[keep], p[keep]
    if th.size < need:
        xs = 0.5 * (x_lo + x_hi) + 0.5 * (x_hi - x_lo) * _chebyshev_points(need)
        th = np.concatenate([th, np.arccos(xs)])
        pv = np.concatenate([pv, _cheb.chebval(xs, c)])
        order = np.argsort(th)
        th, pv = th[order], pv[order]
    return th, pv


def _peaks(th: np.ndarray, v: np.ndarray, above: float, slope, curvature, value) -> np.ndarray:
    """θ of the local maxima of v (sampled on the ascending grid th) whose true value exceeds ``above``.

    Grid maxima within `_PEAK_WINDOW` below ``above`` are candidates too (a lobe's peak can fall
    between grid points); each is refined by Newton steps on slope(x) = 0, x = cos θ, kept inside
    the bracket of its grid neighbours.
    """
    if th.size < 3:
        return th[v > above]
    i = np.flatnonzero((v[1:-1] >= v[:-2]) & (v[1:-1] >= v[2:]) & (v[1:-1] > (1.0 - _PEAK_WINDOW) * above)) + 1
    x, x_lo, x_hi = np.cos(th[i]), np.cos(th[i + 1]), np.cos(th[i - 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(_NEWTON_STEPS):
            step = slope(x) / curvature(x)
            x = np.clip(x - np.where(np.isfinite(step), step, 0.0), x_lo, x_hi)
    return np.arccos(x[value(x) > above])


def _measure(c: np.ndarray, a: float, b: float, h: float) -> tuple[float, float]:
    """(max |p| on [−1, 1], max |p − f| on [a, b]), dense grids refined at their local maxima."""
    lo, hi = math.acos(b), math.acos(a)

    def abs_p(t):
        return np.abs(_cheb.chebval(np.cos(t), c))

    def err(t):
        return np.abs(_cheb.chebval(np.cos(t), c) - _target(np.cos(t), a, b, h))

    th, pv = _grid(c, 0.0, 0.5 * math.pi, 0.0, 1.0)  # |p| is even
    peak = _refined_max(abs_p, th, np.abs(pv), 0.0, 0.5 * math.pi)
    th, pv = _grid(c, lo, hi, a, b)
    return peak, _refined_max(err, th, np.abs(pv - _target(np.cos(th), a, b, h)), lo, hi)


@lru_cache(maxsize=256)
def _fit(a: float, b: float, d: int, bound: float, h: float) -> LogPolynomial:
    """The LP minimax with grid exchange, then measured (and rescaled if it overshoots)."""
    n = d // 2
    k = _LP_POINTS_PER_DEGREE * (d + 1)
    lo, hi = math.acos(b), math.acos(a)
    log_ba = math.log(b / a)
    # Chebyshev points of [a, b] and the positive half of those of [−1, 1], ends included.
    th_fit = np.concatenate([[lo, hi], np.arccos(0.5 * (a + b) + 0.5 * (b - a) * _chebyshev_points(k))])
    th_bound = np.concatenate([[0.0, 0.5 * math.pi], np.arccos(_chebyshev_points(2 * k)[:k])])
    for _ in range(_EXCHANGE_ROUNDS):
        even, e = _solve_lp(th_fit, th_bound, a, b, n, bound, h)
        c = _full(even)
        tb, pb = _grid(c, 0.0, 0.5 * math.pi, 0.0, 1.0)
        tf, pf = _grid(c, lo, hi, a, b)
        c1, c2 = _cheb.chebder(c), _cheb.chebder(c, 2)
        new_bound = _peaks(
            tb,
            np.abs(pb),
            bound + _BOUND_SLACK * e + _ABS_SLACK,
            lambda x: _cheb.chebval(x, c1),
            lambda x: _cheb.chebval(x, c2),
            lambda x: np.abs(_cheb.chebval(x, c)),
        )
        # f′ = −h/(L·x), f″ = h/(L·x²), L = ln(b/a)
        new_fit = _peaks(
            tf,
            np.abs(pf - _target(np.cos(tf), a, b, h)),
            e * (1.0 + _FIT_SLACK) + _ABS_SLACK,
            lambda x: _cheb.chebval(x, c1) + h / (log_ba * x),
            lambda x: _cheb.chebval(x, c2) - h / (log_ba * x * x),
            lambda x: np.abs(_cheb.chebval(x, c) - _target(x, a, b, h)),
        )
        if new_bound.size == 0 and new_fit.size == 0:
            break
        th_bound = np.concatenate([th_bound, new_bound])
        th_fit = np.concatenate([th_fit, new_fit])
    peak, err = _measure(c, a, b, h)
    scale = 1.0
    if peak > bound:
        scale = bound * (1.0 - _BOUND_MARGIN) / peak
        c = c * scale
        peak, err = _measure(c, a, b, h)
    c.flags.writeable = False
    return LogPolynomial(
        coefficients=c,
        degree=d,
        lower=a,
        upper=b,
        height=h,
        max_abs=float(peak),
        error=float(err),
        rescale=float(scale),
    )


@lru_cache(maxsize=128)
def _degree_for(a: float, b: float, eps: float, bound: float, h: float) -> int:
    """Smallest even d with measured log_error ≤ eps: doubling from 2 (a step capped at 1.1× the
    degree the observed rate predicts), then bisection on even d.

    Bisection assumes the error falls with d, which holds for the exact minimax (the degree-d
    polynomials lie among the degree-(d + 2) ones) and, up to the measurement, for the LP's.
    """

    def log_err(d: int) -> float:
        return _fit(a, b, d, bound, h).log_error()

    lo, d, prev = 0, 2, None  # log_err(lo) > eps (lo = 0: nothing tried)
    while True:
        e = log_err(d)
        if e <= eps:
            break
        if d >= MAX_DEGREE:
            raise QgpError(
                f"log error {eps:g} on [{a:.4g}, {b:.4g}] is not reached below degree {MAX_DEGREE} "
                f"({e:.3g} at {d}); loosen target_error or narrow the eigenvalue bounds"
            )
        # Extrapolate the geometric rate seen since the last degree: give up early when the target
        # is clearly out of reach, and do not step far past the degree it predicts (the LP's
        # cost grows steeply, and near the error floor it turns degenerate).
        nxt = 2 * d
        if prev is not None:
            rate = math.log(prev / e) / (d - lo)
            guess = d + math.log(e / eps) / rate if rate > 0 else math.inf
            if guess > 2 * MAX_DEGREE:
                raise QgpError(
                    f"log error {eps:g} on [{a:.4g}, {b:.4g}] needs a degree far above {MAX_DEGREE} "
                    f"(≈ {guess:.4g}, extrapolated from {e:.3g} at degree {d}); loosen target_error or "
                    "narrow the eigenvalue bounds"
                )
            nxt = min(nxt, max(d + 2, 2 * math.ceil(0.55 * guess)))
        lo, prev, d = d, e, min(nxt, MAX_DEGREE)
    hi = d
    while hi - lo > 2:
        mid = 2 * ((lo + hi) // 4)
        if mid <= lo:
            mid = lo + 2
        if log_err(mid) <= eps:
            hi = mid
        else:
            lo = mid
    return hi
