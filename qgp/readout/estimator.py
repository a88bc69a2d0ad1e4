"""A scikit-learn-style estimator: fit on (X, y), predict with the circuits or with the exact GP.

    from sklearn.gaussian_process.kernels import ExpSineSquared, RBF
    gp = qgp.QuantumGPRegressor(kernel=RBF(50.0) + ExpSineSquared(1.0, 12.0), noise_variance=0.1,
                                clock_qubits=8)
    gp.fit(X, y)
    mean, std = gp.predict(X_test, return_std=True)          # the circuits' answer (simulated)
    mean_exact, std_exact = gp.predict_exact(X_test, return_std=True)   # the classical GP's

scikit-learn's conventions: keyword-only constructor arguments stored unchanged (``get_params`` /
``set_params``, so ``clone``, ``Pipeline``, ``cross_val_score`` and ``GridSearchCV`` work), fitted
attributes end in ``_``, ``score`` is R² of the circuits' mean. ``kernel`` is one of qgp's kernels or
any scikit-learn kernel object (evaluated through scikit-learn, `qgp.classical.sklearn_kernel`).
``std`` is that of the latent f (as scikit-learn's ``predict``; a ``WhiteKernel`` in the kernel adds its
noise to it). A pandas DataFrame's column names are kept (``feature_names_in_``) and checked at
predict. scikit-learn is optional: without it the class still works, with the same methods.
Every ``predict`` simulates the circuits (`qgp.readout.inference.infer`, exact probabilities unless
``shots``); ``last_result_`` keeps the whole `InferenceResult` of the last one.
"""

from __future__ import annotations

import inspect
import warnings

import numpy as np

from qgp.classical.kernels import RBF
from qgp.classical.problem import build_problem, validate_arrays
from qgp.classical.sklearn_kernel import as_kernel
from qgp.errors import QgpError, did_you_mean
from qgp.readout.inference import infer
from qgp.settings import CircuitSettings, Encoding, Engine, Evolution, Method, ReadoutSettings, Strategy, choices

__all__ = ["QuantumGPRegressor"]

try:  # scikit-learn's own bases when it is installed (tags, repr, clone checks); else the same methods here
    from sklearn.base import BaseEstimator as _Base
    from sklearn.base import RegressorMixin as _Mixin
except ImportError:  # pragma: no cover - exercised only without the optional extra

    class _Base:
        @classmethod
        def _get_param_names(cls):
            sig = inspect.signature(cls.__init__)
            return sorted(p.name for p in sig.parameters.values() if p.name != "self" and p.kind == p.KEYWORD_ONLY)

        def get_params(self, deep: bool = True) -> dict:
            return {name: getattr(self, name) for name in self._get_param_names()}

        def set_params(self, **params):
            valid = self._get_param_names()
            for key, value in params.items():
                if key not in valid:
                    raise ValueError(f"invalid parameter {key!r} for {type(self).__name__}; valid: {valid}")
                setattr(self, key, value)
            return self

    class _Mixin:
        def score(self, X, y, sample_weight=None) -> float:
            y = np.asarray(y, dtype=float)
            w = np.ones_like(y) if sample_weight is None else np.asarray(sample_weight, dtype=float)
            pred = self.predict(X)
            ss_res = float(np.sum(w * (y - pred) ** 2))
            ss_tot = float(np.sum(w * (y - np.average(y, weights=w)) ** 2))
            return 1.0 - ss_res / ss_tot if ss_tot > 0 else 0.0


def _columns(X):
    cols = getattr(X, "columns", None)
    return None if cols is None else tuple(str(c) for c in cols)


class QuantumGPRegressor(_Mixin, _Base):
    """GP regression whose predictive mean and latent variance come from simulated circuits.

    Parameters
    ----------
    kernel : qgp Kernel or scikit-learn kernel, optional
        Default ``RBF(signal_variance=1, lengthscale=1)``.
    noise_variance, target_condition : float, optional
        σ², or the κ of A = K + σ²I that sets it (exactly one).
    method, clock_qubits, evolution, encoding, degree, target_error, trotter_steps :
        The inversion circuit (``[circuit]`` keys of docs/config.md).
    shots, seed, strategy, engine :
        The read-out (``[readout]`` keys); ``shots = 0`` means exact outcome probabilities.
    center : bool
        Use the training mean of y as the prior mean.
    labels : dict, optional
        Column name → "label (unit)" for figure axes (``[data] labels``).
    """

    def __init__(
        self,
        *,
        kernel=None,
        noise_variance: float | None = None,
        target_condition: float | None = None,
        method: str = "phase_estimation",
        clock_qubits: int = 8,
        evolution: str = "walk",
        encoding: str = "dilation",
        degree: int | None = None,
        target_error: float | None = None,
        trotter_steps: int = 4,
        shots: int = 0,
        seed: int = 20261202,
        strategy: str = "auto",
        engine: str = "auto",
        center: bool = True,
        labels: dict | None = None,
    ):
        self.kernel = kernel
        self.noise_variance = noise_variance
        self.target_condition = target_condition
        self.method = method
        self.clock_qubits = clock_qubits
        self.evolution = evolution
        self.encoding = encoding
        self.degree = degree
        self.target_error = target_error
        self.trotter_steps = trotter_steps
        self.shots = shots
        self.seed = seed
        self.strategy = strategy
        self.engine = engine
        self.center = center
        self.labels = labels

    # -- the settings, checked once at fit ------------------------------------------------------

    def _settings(self) -> tuple[CircuitSettings, ReadoutSettings]:
        for name, literal in (("method", Method), ("evolution", Evolution), ("encoding", Encoding),
                              ("strategy", Strategy), ("engine", Engine)):
            value = getattr(self, name)
            if value not in choices(literal):
                raise QgpError(f"{name}={value!r} is not one of {choices(literal)}; pick one of those")
        if (self.noise_variance is None) == (self.target_condition is None):
            raise QgpError("give exactly one of noise_variance and target_condition")
        if not (isinstance(self.shots, (int, np.integer)) and self.shots >= 0):
            raise QgpError(f"shots={self.shots!r} must be an integer ≥ 0 (0: exact outcome probabilities)")
        qsvt = self.method == "qsvt"
        if qsvt and (self.degree is None) == (self.target_error is None):
            raise QgpError('method="qsvt" needs exactly one of degree (odd) and target_error; give one')
        circuit = CircuitSettings(
            clock_qubits=0 if qsvt else int(self.clock_qubits),
            encoding=self.encoding,
            evolution=self.evolution,
            trotter_steps=int(self.trotter_steps),
            method=self.method,
            target_error=self.target_error,
            degree=self.degree,
        )
        readout = ReadoutSettings(shots=int(self.shots), seed=int(self.seed), strategy=self.strategy, engine=self.engine)
        return circuit, readout

    # -- scikit-learn's API --------------------------------------------------------------------

    def fit(self, X, y):
        """Condition on the training data; checks the settings and that A is positive definite.

        Parameters
        ----------
        X : array-like or DataFrame of shape (n, d)
        y : array-like of shape (n,)

        Returns
        -------
        self
        """
        self.circuit_, self.readout_ = self._settings()
        self.kernel_ = as_kernel(RBF(signal_variance=1.0, lengthscale=1.0) if self.kernel is None else self.kernel)
        self.feature_names_in_ = _columns(X)
        # A pandas Series keeps its name as the target's (tables, figure labels); else "y".
        name = getattr(y, "name", None)
        self.target_name_ = str(name) if name is not None and str(name) else "y"
        X_, y_, _, _ = validate_arrays(np.asarray(X, dtype=float), np.asarray(y, dtype=float).ravel())
        self.n_features_in_ = X_.shape[1]
        self._check_labels(X_.shape[1])
        problem = build_problem(
            X_, y_, self.kernel_, noise_variance=self.noise_variance, target_condition=self.target_condition,
            X_test=X_[:1], center=self.center, **self._names(),
        )
        self.X_train_, self.y_train_ = X_, y_
        self.noise_variance_ = problem.noise_variance
        self.condition_number_ = problem.diagnostics.condition_number
        return self

    def _names(self) -> dict:
        return {"inputs": self.feature_names_in_ or (), "target": self.target_name_, "labels": self.labels or ()}

    def _check_labels(self, n_inputs: int) -> None:
        """Every ``labels`` key must name an input column or the target: a typo is an error, not ignored."""
        columns = (*(self.feature_names_in_ or [f"x{i}" for i in range(n_inputs)]), self.target_name_)
        for column in dict(self.labels or {}):
            if column not in columns:
                raise QgpError(
                    f"labels names column {column!r}{did_you_mean(column, columns)}, which is not an input column or "
                    f"the target ({', '.join(map(repr, columns))}); key each label by one of those"
                )

    def _problem(self, X):
        if not hasattr(self, "X_train_"):
            raise QgpError(f"this {type(self).__name__} is not fitted yet; call fit(X, y) first")
        cols = _columns(X)
        if self.feature_names_in_ is not None and cols is not None and cols != self.feature_names_in_:
            raise QgpError(f"X has columns {list(cols)} but the model was fitted on {list(self.feature_names_in_)}; "
                           "pass the same columns in the same order")
        Xs = np.asarray(X, dtype=float)
        if Xs.ndim == 1:
            Xs = Xs[:, None]
        if Xs.shape[1] != self.n_features_in_:
            raise QgpError(f"X has {Xs.shape[1]} feature(s) but the model was fitted on {self.n_features_in_}")
        return build_problem(
            self.X_train_, self.y_train_, self.kernel_, noise_variance=self.noise_variance_, X_test=Xs,
            center=self.center, **self._names(),
        )

    def predict(self, X, return_std: bool = False):
        """The circuits' predictive mean (and latent std) at the rows of X (simulated).

        Returns
        -------
        mean : ndarray of shape (m,)
        std : ndarray of shape (m,), with ``return_std``; NaN where the circuits' variance is ≤ 0
        """
        problem = self._problem(X)
        result = infer(problem, self.circuit_, self.readout_, progress=None)
        self.last_result_ = result
        if not return_std:
            return result.mean_quantum
        return result.mean_quantum, _std(result.variance_quantum, "the circuits'")

    def predict_exact(self, X, return_std: bool = False):
        """The exact classical GP's mean (and latent std) at the rows of X (Cholesky, R&W Alg. 2.1)."""
        problem = self._problem(X)
        pred = problem.exact.predict(problem.X_test)
        if not return_std:
            return pred.mean
        return pred.mean, _std(pred.variance_latent, "the exact GP's")


def _std(variance: np.ndarray, whose: str) -> np.ndarray:
    """√variance, NaN (with a warning naming how many) where it is ≤ 0: never clipped silently."""
    variance = np.asarray(variance, dtype=float)
    bad = ~(variance > 0)
    if bad.any():
        warnings.warn(f"{whose} latent variance is ≤ 0 at {int(bad.sum())} point(s); their std is NaN", stacklevel=3)
    with np.errstate(invalid="ignore"):
        return np.where(bad, np.nan, np.sqrt(np.where(bad, 0.0, variance)))
