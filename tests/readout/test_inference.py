"""Quantum GP inference end to end: estimators, strategies, read-out, error budget, CLI."""

from dataclasses import dataclass, replace
from math import pi

import numpy as np
import pytest
from qiskit.quantum_info import SparsePauliOp
from scipy.stats import binomtest

from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.errors import QgpError
from qgp.readout.estimators import sample_hadamard, sample_variance
from qgp.readout.inference import infer, shot_estimates
from qgp.classical.kernels import RBF, Kernel
from qgp.classical.problem import build_problem, problem_from_config
from qgp.settings import CircuitSettings, ReadoutSettings

EXACT = ReadoutSettings(shots=0)


@dataclass(frozen=True)
class _FixedMatrix(Kernel):
    """Test-only kernel: inputs are row indices into a fixed PSD matrix."""

    matrix: tuple = ()

    def __call__(self, X1, X2=None):
        M = np.asarray(self.matrix)
        X2 = X1 if X2 is None else X2
        return M[np.asarray(X1, int)[:, 0][:, None], np.asarray(X2, int)[:, 0][None, :]]

    def diag(self, X):
        return np.diag(np.asarray(self.matrix))[np.asarray(X, int)[:, 0]]

    @property
    def support_radius(self):
        return None

    def _pair_values(self, X1, X2, rows, cols):
        raise NotImplementedError

    def theta_gradient(self, X):
        raise NotImplementedError


def _cao_matrix():
    # Cao, Daskin, Frankel & Kais, Mol. Phys. 110, 1675 (2012): the 4×4 example matrix, entered
    # from its Pauli form 3.75·II + 1.25·XZ + 0.75·YY + 2.25·ZX (qiskit label order).
    A = SparsePauliOp.from_list([("II", 3.75), ("XZ", 1.25), ("YY", 0.75), ("ZX", 2.25)]).to_matrix()
    assert np.allclose(A.imag, 0)
    A = A.real
    np.testing.assert_allclose(np.linalg.eigvalsh(A), [1, 2, 4, 8], atol=1e-12)
    return A


def _demo():
    cfg = load_config(demo_config_path())
    return cfg, problem_from_config(cfg)


def test_cao_example_as_a_gp_is_exact():
    A = _cao_matrix()
    s2 = 0.5
    K = A - s2 * np.eye(4)
    kern = _FixedMatrix(signal_variance=1.0, lengthscale=1.0, matrix=tuple(map(tuple, K)))
    y = np.array([1.0, 2.0, -1.0, 0.5])
    p = build_problem(np.arange(4.0), y, kern, noise_variance=s2, X_test=np.array([0.0, 2.0, 3.0]), center=False)
    np.testing.assert_allclose(p.A, A, atol=1e-15)
    # c = 4, t = 2π/16: eigenphases λ/16 are exact 4-bit fractions (Cao et al. 2012), so the
    # circuit applies A⁻¹ exactly (C = 1, the smallest eigenvalue); floor set below λmin = 1.
    circuit = CircuitSettings(clock_qubits=4, evolution="exact", evolution_time=2 * pi / 16, filter_floor=0.5)
    r = infer(p, circuit, EXACT, progress=None)
    ks = K[:, [0, 2, 3]]
    mean_ref = ks.T @ np.linalg.solve(A, y)
    quad_ref = np.einsum("ij,ij->j", ks, np.linalg.solve(A, ks))
    err_mean = np.max(np.abs(r.mean_quantum - mean_ref))
    err_quad = np.max(np.abs((p.k_star_star - r.variance_quantum) - quad_ref))
    assert err_mean < 1e-10, f"worst mean residual {err_mean:.3g}"
    assert err_quad < 1e-10, f"worst k*ᵀA⁻¹k* residual {err_quad:.3g}"
    assert r.inverse.scale == pytest.approx(1.0, abs=1e-12)


def test_exact_columns_match_scikit_learn():
    # Reference: scikit-learn's GaussianProcessRegressor (optimizer=None, alpha = σ²), same kernel.
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import RBF as SkRBF
    from sklearn.gaussian_process.kernels import ConstantKernel

    cfg, p = _demo()
    r = infer(p, replace(cfg.circuit, clock_qubits=4), EXACT, progress=None)
    gpr = GaussianProcessRegressor(
        ConstantKernel(p.kernel.signal_variance, "fixed") * SkRBF(p.kernel.lengthscale, "fixed"),
        alpha=p.noise_variance,
        optimizer=None,
    ).fit(p.X, p.y - p.y.mean())
    mu, sd = gpr.predict(p.X_test, return_std=True)
    rel_mean = np.max(np.abs(r.mean_exact - (mu + p.y.mean())) / np.abs(mu + p.y.mean()))
    rel_var = np.max(np.abs(r.variance_exact - sd**2) / sd**2)
    assert rel_mean < 1e-8 and rel_var < 1e-8, (rel_mean, rel_var)


def _random_problem(seed=3, n=6):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 5, size=(n, 2))
    y = np.sin(X[:, 0]) + 0.3 * X[:, 1]
    Xs = rng.uniform(0, 5, size=(5, 2))
    return build_problem(X, y, RBF(signal_variance=1.0, lengthscale=1.3), target_condition=8.0, X_test=Xs)


@pytest.mark.parametrize(
    "circuit",
    [
        CircuitSettings(clock_qubits=4, evolution="walk", encoding="dilation"),
        CircuitSettings(clock_qubits=3, evolution="walk", encoding="lcu"),
        CircuitSettings(clock_qubits=4, evolution="exact"),
        CircuitSettings(clock_qubits=4, evolution="trotter", trotter_steps=2, trotter_order=1),
    ],
    ids=["walk-dilation", "walk-lcu", "exact", "trotter"],
)
def test_strategies_agree(circuit):
    # Both strategies simulate the same circuits; amortised reads them through linearity
    # (Choi–Jamiołkowski), so outcome probabilities agree to round-off (common practice: 1e-9).
    p = _random_problem()
    a = infer(p, circuit, ReadoutSettings(strategy="amortised"), progress=None)
    b = infer(p, circuit, ReadoutSettings(strategy="per-point"), progress=None)
    for name in ("p0", "p1", "p_flag"):
        worst = np.max(np.abs(getattr(a, name) - getattr(b, name)))
        assert worst < 1e-9, f"{name}: worst difference {worst:.3g}"
    worst = np.max(np.abs(a.variance_quantum_hadamard - b.variance_quantum_hadamard))
    assert worst < 1e-9
    assert abs(a.success_probability_inversion - b.success_probability_inversion) < 1e-9


def test_strategies_agree_on_demo():
    cfg, p = _demo()
    circuit = replace(cfg.circuit, clock_qubits=4)
    a = infer(p, circuit, ReadoutSettings(strategy="amortised"), progress=None)
    b = infer(p, circuit, ReadoutSettings(strategy="per-point"), progress=None)
    worst = max(np.max(np.abs(getattr(a, k) - getattr(b, k))) for k in ("p0", "p1", "p_flag"))
    assert worst < 1e-9, f"worst probability difference {worst:.3g}"


@pytest.mark.parametrize("evolution", ["exact", "walk"])
def test_both_estimators_see_the_same_inverse(evolution):
    # With C′ and C the same smallest admitted λ̃, M/C′ = B/C: both circuits apply the same Ã⁻¹
    # (qgp.readout.filter_model: h(λ)/C′ = f(λ)/C for every λ).
    p = _random_problem(seed=8)
    r = infer(p, CircuitSettings(clock_qubits=5, evolution=evolution), EXACT, progress=None)
    ops = r.operators
    assert ops.scale_inverse == ops.scale_inverse_sqrt
    worst = np.max(np.abs(ops.M / ops.scale_inverse_sqrt - np.real(ops.B) / ops.scale_inverse))
    assert worst < 1e-10, f"worst |M/C′ − B/C| = {worst:.3g}"


def test_filter_model_matches_circuits():
    # The closed-form model (Fejér-kernel weights × rotation) is exact for the exact oracle and
    # for the walk with its cosine decoding (Low & Chuang 2019): 1e-12 on the operators.
    p = _random_problem(seed=4)
    for circuit in (CircuitSettings(clock_qubits=5, evolution="exact"), CircuitSettings(clock_qubits=5)):
        r = infer(p, circuit, EXACT, progress=None)
        assert r.filter_model_max_abs_difference < 1e-12, (circuit.evolution, r.filter_model_max_abs_difference)


@pytest.mark.parametrize(
    "circuit",
    [
        CircuitSettings(evolution="walk", encoding="dilation"),
        CircuitSettings(evolution="exact"),
        # A product formula's per-step error is multiplied by 2^j in the controlled powers, so c = 8
        # beats c = 4 only with enough steps (measured: 1 second-order step gets worse with c).
        CircuitSettings(evolution="trotter", trotter_steps=16, trotter_order=2),
    ],
    ids=["walk", "exact", "trotter"],
)
@pytest.mark.parametrize("which", ["demo", "random"])
def test_more_clock_qubits_help(circuit, which):
    p = _demo()[1] if which == "demo" else _random_problem(seed=11, n=8)
    lo = infer(p, replace(circuit, clock_qubits=4), EXACT, progress=None).summary()
    hi_r = infer(p, replace(circuit, clock_qubits=8), EXACT, progress=None)
    hi = hi_r.summary()
    assert hi["mean_max_abs_error"] < lo["mean_max_abs_error"], (hi["mean_max_abs_error"], lo["mean_max_abs_error"])
    assert hi["variance_max_abs_error"] < lo["variance_max_abs_error"]
    # The mean error at c = 8 is within the filter model's prediction for the exact oracle
    # (phase-estimation resolution and filtering) plus the chosen oracle's own increment.
    # For the exact oracle the model stage (closed-form filter model, numpy) and the simulated
    # circuit (Aer) are independent computations of the same error.
    budget = hi["error_budget"]
    model_err = budget["stages"]["phase_estimation_and_filter"]["mean_max_abs_error"]
    if circuit.evolution in ("exact",):
        assert abs(hi["mean_max_abs_error"] - model_err) < 1e-9, abs(hi["mean_max_abs_error"] - model_err)


def test_shots_reproducible_and_error_budget_adds_up():
    cfg, p = _demo()
    circuit = replace(cfg.circuit, clock_qubits=5)
    ro = ReadoutSettings(shots=20_000, seed=5)
    a = infer(p, circuit, ro, progress=None)
    b = infer(p, circuit, ro, progress=None)
    assert np.array_equal(a.mean_quantum, b.mean_quantum) and np.array_equal(a.variance_quantum, b.variance_quantum)
    c = infer(p, circuit, replace(ro, seed=6), progress=None)
    assert not np.array_equal(a.mean_quantum, c.mean_quantum)
    s = a.summary()
    assert s["post_selection_failures"] > 0
    assert s["error_budget"]["order"] == ["phase_estimation_and_filter", "oracle", "shots"]
    # The shot stage adds what the standard errors say it should (issue 10: the old check, that the
    # increments sum to the total, held by construction). (estimate − exact-probability estimate)/SE
    # is ~N(0, 1) per test point (normal approximation to the multinomial), so over the 41 points
    # its RMS is √(χ²₄₁/41): in [0.6, 1.5] with probability > 1 − 1e-4 (scipy.stats.chi2).
    exact_probs = infer(p, circuit, EXACT, progress=None)
    for est, ref, se in (
        (a.mean_quantum, exact_probs.mean_quantum, a.mean_quantum_se),
        (a.variance_quantum, exact_probs.variance_quantum, a.variance_quantum_se),
    ):
        rms = float(np.sqrt(np.mean(((est - ref) / se) ** 2)))
        assert 0.6 <= rms <= 1.5, f"RMS of (shot estimate − exact)/SE = {rms:.3f} over {p.n_test} points"


def test_shot_confidence_intervals_cover_at_the_stated_rate():
    # Over many seeds, μ̂ ± 1.96·SE must cover the exact-probability answer ~95% of the time
    # (normal approximation to the multinomial; D̂ = (n₀ − n₁)/N has Var = (P₀ + P₁ − D²)/N).
    # Checked with an exact binomial test (scipy.stats.binomtest), not a single draw.
    cfg, p = _demo()
    r = infer(p, replace(cfg.circuit, clock_qubits=5), EXACT, progress=None)
    shots, trials = 4000, 400
    rng = np.random.default_rng(2026)
    hits_mean = hits_var = total = 0
    for _ in range(trials):
        n0, n1 = sample_hadamard(r.p0, r.p1, shots, rng)
        nf = sample_variance(r.p_flag, shots, rng)
        est = shot_estimates(r, n0, n1, nf, shots)
        hits_mean += int(np.sum(np.abs(est.mean - r.mean_quantum) <= 1.96 * est.mean_se))
        hits_var += int(np.sum(np.abs(est.variance - r.variance_quantum) <= 1.96 * est.variance_se))
        total += p.n_test
    # Test points share a draw only through the seed stream; each interval is its own Bernoulli trial.
    for hits in (hits_mean, hits_var):
        test = binomtest(hits, total, 0.95)
        assert test.pvalue > 1e-3, f"coverage {hits / total:.4f} over {total} intervals (p = {test.pvalue:.2g})"


def test_aer_sampled_confidence_intervals_cover_at_the_stated_rate():
    # The per-point strategy draws its counts from Aer's own sampler (measured circuits), not numpy:
    # its intervals must cover the exact-probability answer ~95% of the time too (binomial test as
    # above; 60 seeds × 8 test points = 480 intervals per quantity).
    rng = np.random.default_rng(3)  # the inputs of _random_problem, with 8 test points
    X = rng.uniform(0, 5, size=(6, 2))
    p = build_problem(X, np.sin(X[:, 0]) + 0.3 * X[:, 1], RBF(signal_variance=1.0, lengthscale=1.3),
                      target_condition=8.0, X_test=rng.uniform(0, 5, size=(8, 2)))
    circuit = CircuitSettings(clock_qubits=4, evolution="exact")
    ref = infer(p, circuit, ReadoutSettings(strategy="per-point"), progress=None)
    hits_mean = hits_var = total = 0
    for seed in range(60):
        r = infer(p, circuit, ReadoutSettings(strategy="per-point", shots=4000, seed=seed), progress=None)
        hits_mean += int(np.sum(np.abs(r.mean_quantum - ref.mean_quantum) <= 1.96 * r.mean_quantum_se))
        hits_var += int(np.sum(np.abs(r.variance_quantum - ref.variance_quantum) <= 1.96 * r.variance_quantum_se))
        total += p.n_test
    for hits in (hits_mean, hits_var):
        test = binomtest(hits, total, 0.95)
        assert test.pvalue > 1e-3, f"coverage {hits / total:.4f} over {total} intervals (p = {test.pvalue:.2g})"


def test_bad_circuit_settings_fail_before_simulating():
    p = _random_problem()
    with pytest.raises(QgpError, match="clock"):
        infer(p, CircuitSettings(clock_qubits=0), EXACT, progress=None)
    with pytest.raises(QgpError, match="encoding"):
        infer(p, CircuitSettings(evolution="walk", encoding=None), EXACT, progress=None)
    with pytest.raises(QgpError, match="above the memory cap"):
        infer(p, CircuitSettings(clock_qubits=20), ReadoutSettings(memory_cap_bytes=2**20), progress=None)
