"""The log marginal likelihood from the circuits (qgp.readout.likelihood), term by term."""

import math

import numpy as np
import pytest
from scipy.stats import binomtest, chi2
from sklearn.datasets import load_diabetes
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF as SkRBF
from sklearn.gaussian_process.kernels import ConstantKernel

from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem
from qgp.errors import QgpError
from qgp.readout.likelihood import estimate_log_marginal_likelihood, exact_terms, hutchinson_variance
from qgp.settings import CircuitSettings, ReadoutSettings

EXACT = ReadoutSettings(shots=0)


def _diabetes(n: int, noise: float = 0.05):
    """n rows of scikit-learn's bundled diabetes data (Efron et al. 2004): body-mass index → progression,
    the target scaled to unit variance over the whole set."""
    X, y = load_diabetes(return_X_y=True)
    x = X[:n, 2:3] * 10.0  # bmi, standardised by the package to norm 1 per column; ×10 for a unit-ish range
    t = (y[:n] - y.mean()) / y.std()
    return build_problem(x, t, RBF(signal_variance=1.0, lengthscale=0.3), noise_variance=noise)


def _relative(a, b):
    return abs(a - b) / max(abs(b), 1e-300)


def test_exact_lml_is_scikit_learns():
    # Outside reference: scikit-learn's GaussianProcessRegressor.log_marginal_likelihood (R&W eq. 2.30)
    # with the same kernel a·RBF(ℓ), alpha = σ², on the centred targets.
    p = _diabetes(24, noise=0.3)
    fit, logdet = exact_terms(p)
    ours = -0.5 * fit - 0.5 * logdet - 0.5 * p.n_train * math.log(2 * math.pi)
    gpr = GaussianProcessRegressor(ConstantKernel(1.0, "fixed") * SkRBF(0.3, "fixed"), alpha=0.3, optimizer=None)
    gpr.fit(p.X, p.y_centered)
    ref = gpr.log_marginal_likelihood_value_
    assert _relative(ours, ref) < 1e-12, f"ours {ours!r} vs scikit-learn {ref!r}"
    assert _relative(ours, p.exact.log_marginal_likelihood) < 1e-12


@pytest.mark.parametrize("evolution", ["exact", "walk"])
def test_circuits_equal_the_closed_form_model(evolution):
    # The circuits' exact-probability terms equal the closed-form filter model (Fejér-kernel clock
    # distribution, Nielsen & Chuang §5.2.1, applied to A's eigenvalues): numpy reference, to round-off.
    p = _diabetes(8, noise=0.1)
    est = estimate_log_marginal_likelihood(p, CircuitSettings(clock_qubits=6, evolution=evolution), EXACT)
    for name, term in (("data fit", est.data_fit), ("log det", est.log_determinant)):
        assert term.model is not None
        assert abs(term.quantum - term.model) <= 1e-9 * max(1.0, abs(term.model)), (
            f"{name}: circuit {term.quantum!r} vs model {term.model!r}, residual {term.quantum - term.model:.3g}"
        )
    assert est.quantum_se is None


def test_log_determinant_converges_with_the_clock():
    # As c grows the clock distribution concentrates on λ (Fejér kernel of width 2^-c) and the decoded
    # log λ̃ tends to log λ: the error shrinks; at every c it is the model's (checked above).
    p = _diabetes(8, noise=0.1)
    errors = {}
    for c in (4, 7, 10):
        est = estimate_log_marginal_likelihood(p, CircuitSettings(clock_qubits=c, evolution="exact"), EXACT)
        errors[c] = (abs(est.data_fit.error), abs(est.log_determinant.error))
    for k in (0, 1):
        assert errors[10][k] < errors[7][k] < errors[4][k], errors
    # Each decoded eigenvalue is off by at most a few bins; at c = 10 the bin is ~1e-3 of λ_hi.
    assert errors[10][1] < 0.05 * p.n_train, errors


def test_shot_standard_errors_cover_the_exact_probability_value():
    # Plug-in binomial/multinomial standard errors: |estimate − exact-probability value| ≤ 1.96 SE in
    # ≈ 95% of seeds (normal approximation, common practice); checked with a two-sided binomial test.
    p = _diabetes(8, noise=0.1)
    circuit = CircuitSettings(clock_qubits=5, evolution="exact")
    exact = estimate_log_marginal_likelihood(p, circuit, EXACT)
    trials = 300
    hits = {"fit": 0, "logdet": 0}
    for seed in range(trials):
        est = estimate_log_marginal_likelihood(p, circuit, ReadoutSettings(shots=4000, seed=seed))
        hits["fit"] += abs(est.data_fit.quantum - exact.data_fit.quantum) <= 1.96 * est.data_fit.quantum_se
        hits["logdet"] += abs(est.log_determinant.quantum - exact.log_determinant.quantum) <= 1.96 * est.log_determinant.quantum_se
    for name, k in hits.items():
        assert binomtest(k, trials, 0.95).pvalue > 1e-3, f"{name}: {k}/{trials} covered"


def test_rademacher_probes_follow_hutchinson():
    # Hutchinson (1990): Rademacher probes are unbiased for the trace, with variance 2(‖F‖²_F − Σ F_ii²)
    # (Avron & Toledo 2011, from memory). Sample variance of R probes: (R−1)s²/σ² ~ χ²(R−1) only for
    # Gaussian values; the 1e-4 quantiles of χ² are used as a loose band, and the mean within 4 SE.
    p = _diabetes(8, noise=0.1)
    circuit = CircuitSettings(clock_qubits=6, evolution="walk")
    mixed = estimate_log_marginal_likelihood(p, circuit, EXACT)
    R = 400
    est = estimate_log_marginal_likelihood(p, circuit, EXACT, probes=R)
    assert est.trace_estimator == "rademacher" and est.probes == R
    assert abs(est.log_determinant.quantum - mixed.log_determinant.quantum) <= 4 * est.log_determinant.quantum_se
    ratio = est.trace_variance / est.trace_variance_formula
    lo, hi = chi2.ppf([1e-4, 1 - 1e-4], R - 1) / (R - 1)
    assert lo / 1.5 < ratio < hi * 1.5, f"sample/formula variance {ratio:.3f}"


def test_hutchinson_variance_formula_by_enumeration():
    # All 2^n sign vectors of a small matrix: the exact variance of zᵀFz (enumeration, numpy reference).
    rng = np.random.default_rng(3)
    F = rng.normal(size=(5, 5))
    signs = np.array(np.meshgrid(*[[-1.0, 1.0]] * 5)).reshape(5, -1)
    q = np.einsum("ir,ij,jr->r", signs, F, signs)
    assert abs(np.var(q) - hutchinson_variance(F)) < 1e-10 * np.var(q)
    assert abs(np.mean(q) - np.trace(F)) < 1e-10


def test_qsvt_log_determinant_within_the_polynomial_bound():
    # QSVT applies p(A/α) (GSLW 2019, Thm 17): the circuit's value equals the polynomial on A's exact
    # eigenvalues (numpy reference), and its error is within n × the measured per-eigenvalue bound.
    from qgp.circuits.log_polynomial import build_log_circuit
    from qgp.classical.system import eigenvalue_bounds

    p = _diabetes(8, noise=0.1)
    circuit = CircuitSettings(method="qsvt", clock_qubits=0, degree=41, encoding="dilation")
    est = estimate_log_marginal_likelihood(p, circuit, EXACT)
    lc = build_log_circuit(p.A_padded, circuit, eigenvalue_bounds(p.A_padded, p.noise_variance))
    assert est.size_name == "degree" and est.size == lc.polynomial.degree
    term = est.log_determinant
    assert abs(term.quantum - term.model) <= 1e-8 * abs(term.model), f"residual {term.quantum - term.model:.3g}"
    assert abs(term.error) <= p.n_train * lc.polynomial.log_error() * (1 + 1e-9)
    assert abs(est.data_fit.quantum - est.data_fit.model) <= 1e-8 * abs(est.data_fit.model)


def test_bad_probes_are_refused():
    p = _diabetes(8)
    with pytest.raises(QgpError, match="probes must be an integer"):
        estimate_log_marginal_likelihood(p, CircuitSettings(clock_qubits=4), EXACT, probes=-1)


@pytest.mark.parametrize("circuit, cap", [(CircuitSettings(clock_qubits=5, evolution="exact"), 24 * 1024),
                                          (CircuitSettings(method="qsvt", clock_qubits=0, degree=21), 4 * 1024)])
def test_split_reference_register_gives_the_same_terms(circuit, cap):
    # Under a memory cap too small for one reference-register run, the register is split into runs of
    # fewer columns: the same linear map, column block by column block (equal to round-off).
    from qgp.readout.builds import clear_caches

    p = _diabetes(8, noise=0.1)
    whole = estimate_log_marginal_likelihood(p, circuit, EXACT)
    clear_caches()
    messages = []
    # The data fit by per-test-point circuits (hybrid), which fit under any cap the log-det's split does.
    readout = ReadoutSettings(memory_cap_bytes=cap, strategy="hybrid")
    split = estimate_log_marginal_likelihood(p, circuit, readout, progress=messages.append)
    assert any("split into" in m for m in messages), messages
    for a, b in ((whole.data_fit, split.data_fit), (whole.log_determinant, split.log_determinant)):
        assert abs(a.quantum - b.quantum) <= 1e-10 * abs(a.quantum), (a.quantum, b.quantum)
