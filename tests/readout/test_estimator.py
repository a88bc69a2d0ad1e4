"""qgp.QuantumGPRegressor: scikit-learn's estimator conventions, any scikit-learn kernel, pandas names."""

import warnings

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.datasets import load_diabetes
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import RBF as SkRBF
from sklearn.gaussian_process.kernels import ConstantKernel, ExpSineSquared, WhiteKernel
from sklearn.model_selection import GridSearchCV, cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import qgp
from qgp.classical.problem import build_problem
from qgp.errors import QgpError
from qgp.readout.inference import infer


def _data(n=16):
    """scikit-learn's bundled diabetes data (Efron et al. 2004): bmi and blood pressure → progression."""
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    return X[["bmi", "bp"]].iloc[:n] * 10.0, (y.iloc[:n] - y.mean()) / y.std()


SEASONAL = ConstantKernel(1.0) * SkRBF(2.0) + ExpSineSquared(1.0, 3.0) + WhiteKernel(0.05)


def test_exact_predictions_are_scikit_learns_with_a_composed_kernel():
    # Outside reference: scikit-learn's GaussianProcessRegressor with the same (fixed) kernel and alpha = σ²,
    # on the centred targets; mean and latent std to 1e-10.
    X, y = _data()
    gp = qgp.QuantumGPRegressor(kernel=SEASONAL, noise_variance=0.2, clock_qubits=5).fit(X, y)
    Xt = X.iloc[:5] + 0.03
    mean, std = gp.predict_exact(Xt, return_std=True)
    sk = GaussianProcessRegressor(SEASONAL, alpha=0.2, optimizer=None).fit(X.to_numpy(), y - y.mean())
    ref_mean, ref_std = sk.predict(Xt.to_numpy(), return_std=True)
    assert np.max(np.abs(mean - (ref_mean + y.mean()))) < 1e-10
    assert np.max(np.abs(std - ref_std)) < 1e-10


def test_predict_runs_the_circuits_of_the_same_problem():
    # The estimator is glue: its predict is infer's answer on the problem build_problem makes.
    X, y = _data(8)
    gp = qgp.QuantumGPRegressor(kernel=SEASONAL, noise_variance=0.2, clock_qubits=5, evolution="exact").fit(X, y)
    mean, std = gp.predict(X.iloc[:3], return_std=True)
    problem = build_problem(X.to_numpy(), y.to_numpy(), gp.kernel_, noise_variance=0.2, X_test=X.iloc[:3].to_numpy())
    ref = infer(problem, gp.circuit_, gp.readout_, progress=None)
    assert np.array_equal(mean, ref.mean_quantum) and np.allclose(std**2, ref.variance_quantum, rtol=1e-12)
    assert gp.last_result_.problem.inputs == ("bmi", "bp")


def test_clone_params_pipeline_cross_validation_and_grid_search():
    X, y = _data(16)
    gp = qgp.QuantumGPRegressor(kernel=ConstantKernel(1.0) * SkRBF(1.0), target_condition=20.0, clock_qubits=4)
    twin = clone(gp)
    assert twin.get_params().keys() == gp.get_params().keys()
    assert twin.set_params(clock_qubits=6).clock_qubits == 6 and gp.clock_qubits == 4
    pipe = make_pipeline(StandardScaler(), gp).fit(X, y)
    assert pipe.predict(X.iloc[:4]).shape == (4,)
    scores = cross_val_score(gp, X, y, cv=3)
    assert scores.shape == (3,) and np.all(np.isfinite(scores))
    search = GridSearchCV(gp, {"clock_qubits": [3, 6]}, cv=2).fit(X, y)
    means = search.cv_results_["mean_test_score"]
    assert search.best_params_["clock_qubits"] == [3, 6][int(np.argmax(means))]


def test_columns_are_checked_and_bad_settings_refused():
    X, y = _data(8)
    gp = qgp.QuantumGPRegressor(noise_variance=0.2, clock_qubits=4).fit(X, y)
    assert gp.feature_names_in_ == ("bmi", "bp")
    with pytest.raises(QgpError, match="fitted on \\['bmi', 'bp'\\]"):
        gp.predict(X[["bp", "bmi"]])
    with pytest.raises(QgpError, match="exactly one of noise_variance and target_condition"):
        qgp.QuantumGPRegressor().fit(X, y)
    with pytest.raises(QgpError, match="evolution='walker' is not one of"):
        qgp.QuantumGPRegressor(noise_variance=0.1, evolution="walker").fit(X, y)
    with pytest.raises(QgpError, match="not fitted yet"):
        qgp.QuantumGPRegressor(noise_variance=0.1).predict(X)
    with pytest.raises(QgpError, match="expected a scikit-learn kernel"):
        qgp.QuantumGPRegressor(kernel="rbf", noise_variance=0.1).fit(X, y)


def test_nonpositive_variance_is_nan_with_a_warning_not_clipped():
    from qgp.readout.estimator import _std

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = _std(np.array([4.0, -1e-9, 0.0]), "the circuits'")
    assert out[0] == 2.0 and np.isnan(out[1]) and np.isnan(out[2])
    assert any("2 point(s)" in str(w.message) for w in caught)


def test_a_named_target_keeps_its_name_and_label_keys_are_checked():
    X, y = _data(8)
    y = y.rename("progression")
    labels = {"bmi": "body-mass index (×10)", "progression": "disease progression (z)"}
    gp = qgp.QuantumGPRegressor(kernel=ConstantKernel(1.0) * SkRBF(1.0), noise_variance=0.2, clock_qubits=4,
                                labels=labels).fit(X, y)
    gp.predict(X.iloc[:2])
    problem = gp.last_result_.problem
    assert problem.target == "progression" and problem.label("progression") == "disease progression (z)"
    with pytest.raises(QgpError, match=r"labels names column 'progresion' \(did you mean 'progression'\?\)"):
        qgp.QuantumGPRegressor(kernel=SkRBF(1.0), noise_variance=0.2, labels={"progresion": "z"}).fit(X, y)
    assert qgp.QuantumGPRegressor(kernel=SkRBF(1.0), noise_variance=0.2).fit(X.to_numpy(), y.to_numpy()).target_name_ == "y"
