"""The physics behind fig. 7: the closed-form filter model of the ideal circuits, for any n.

The clock grid, α and the oracle's label come from the inversion-method registry
(qgp.circuits.methods); the function the inversion applies is qgp.readout.filter_model's.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from qgp.errors import QgpError
from qgp.readout.budget import rel_rmse

__all__ = [
    "MEAN_TARGET",
    "VARIANCE_TARGET",
    "MODEL_MAX_N",
    "MODEL_MAX_CLOCK",
    "config_from_document",
    "model_errors",
    "scaling_model",
]


#: The target errors of fig. 7: relative RMSE (summary: mean_rel_rmse, variance_rel_rmse) ≤ 1%.
MEAN_TARGET = 0.01
VARIANCE_TARGET = 0.01
#: Largest n and clock register the closed-form model of fig. 7 evaluates.
MODEL_MAX_N = 1024
MODEL_MAX_CLOCK = 16


def config_from_document(doc: Mapping[str, Any]):
    """The `qgp.settings.Config` of a stored config document (qgp.reports.run.config_document)."""
    from qgp.settings import (
        CircuitSettings,
        Config,
        DataSpec,
        KernelSpec,
        NoiseSpec,
        ReadoutSettings,
    )

    d, k, nz, c, r = (dict(doc.get(s) or {}) for s in ("data", "kernel", "noise", "circuit", "readout"))
    d["train"] = Path(d["train"])
    if d.get("test") is not None:
        d["test"] = Path(d["test"])
    if isinstance(k.get("lengthscale"), list):
        k["lengthscale"] = tuple(k["lengthscale"])
    return Config(
        data=DataSpec(**d),
        kernel=KernelSpec(**k),
        noise=NoiseSpec(**nz),
        circuit=CircuitSettings(**c),
        readout=ReadoutSettings(**r),
    )


def _model_inversion(lam_bounds, alpha, settings, rotation: str):
    """The constants of `qgp.circuits.inversion.build_inversion` without building a circuit (any n).

    The registry's `clock_model` (qgp.circuits.methods): the method's clock grid (t derived from
    λ_hi unless set, or α), floor max(λ_lo − one bin, λ_lo/2), admitted = positive and ≥ floor,
    C = smallest admitted λ̃; None where no clock value is admitted at this clock size.
    tests/sweeps/test_sweep_figures.py checks it against build_inversion.
    """
    from qgp.circuits.methods import clock_model

    try:
        return clock_model(settings, rotation, lam_bounds, alpha)
    except QgpError:  # no clock value decodes to an eigenvalue at or above the floor
        return None


def _response(inv, lam: np.ndarray, chunk_entries: int = 1 << 21) -> np.ndarray:
    """`qgp.readout.filter_model.filter_response` in chunks of eigenvalues (the weights are n × 2^c)."""
    from qgp.readout.filter_model import filter_response

    step = max(1, chunk_entries >> inv.settings.clock_qubits)
    return np.concatenate([filter_response(inv, lam[i : i + step]) for i in range(0, lam.size, step)])


class _FilterModel:
    """A problem's padded A eigendecomposed once, and the ideal circuits' answers for any clock size.

    With A = V diag(λ) Vᵀ (padded), f the inverse and h the inverse_sqrt response of
    qgp.readout.filter_model, C and C′ their scales, m the prior mean and ŷ, k̂* the unit inputs:

        μ − m = k*ᵀ V diag(f/C) Vᵀ y,     v = k** − k*ᵀ V diag(h/C′) Vᵀ k*,
        P_inv = Σᵢ f(λᵢ)² (vᵢᵀŷ)²,        P_var = minₜ Σᵢ h(λᵢ) (vᵢᵀk̂*ₜ)²,

    which is what `qgp.readout.inference.infer` estimates from the circuits with exact probabilities.
    """

    def __init__(self, problem, circuit):
        from qgp.circuits.methods import BUDGET_REFERENCE, has_closed_form_model, method_alpha
        from qgp.classical.system import eigenvalue_bounds

        self.problem = problem
        # A method without a closed-form model (a product formula) is modelled by the reference method's.
        self.oracle = circuit.evolution if has_closed_form_model(circuit) else BUDGET_REFERENCE
        self.circuit = replace(circuit, evolution=self.oracle)
        A = problem.A_padded
        self.lam, V = np.linalg.eigh(A)
        self.bounds = eigenvalue_bounds(A, problem.noise_variance)
        self.alpha = method_alpha(A, self.circuit, float(self.lam[-1]))
        y = problem.padded(problem.y_centered)
        ks = problem.padded(problem.k_star)
        self.ks, self.V = ks, V
        self.vy = V.T @ y
        self.vk = V.T @ ks
        self.k_norm2 = np.sum(ks**2, axis=0)
        y_norm = float(np.linalg.norm(y))
        self.y_hat = self.vy / y_norm if y_norm > 0 else self.vy
        exact = problem.exact.predict(problem.X_test)
        self.mean_ref = exact.mean - problem.y_offset
        self.var_ref = exact.variance_latent

    def mean(self, clock_qubits: int) -> tuple[float, float] | None:
        """(relative RMSE of the mean, P_inv) at c clock qubits; None if every clock value is filtered."""
        inv = _model_inversion(self.bounds, self.alpha, replace(self.circuit, clock_qubits=clock_qubits), "inverse")
        if inv is None:
            return None
        f = _response(inv, self.lam)
        err = self.ks.T @ (self.V @ (f / inv.scale * self.vy)) - self.mean_ref
        return rel_rmse(err, self.mean_ref), float(np.sum(f**2 * self.y_hat**2))

    def variance(self, clock_qubits: int) -> tuple[float, float] | None:
        """(relative RMSE of the latent variance, smallest P_var over test points) at c clock qubits."""
        inv = _model_inversion(self.bounds, self.alpha, replace(self.circuit, clock_qubits=clock_qubits), "inverse_sqrt")
        if inv is None:
            return None
        h = _response(inv, self.lam)
        quad = np.einsum("it,i,it->t", self.vk, h, self.vk)
        err = self.problem.k_star_star - quad / inv.scale - self.var_ref
        ok = self.k_norm2 > 0
        return rel_rmse(err, self.var_ref), float(np.min(quad[ok] / self.k_norm2[ok]))


def model_errors(problem, circuit) -> dict[str, float | None]:
    """What the closed-form filter model predicts for ``problem`` and ``circuit`` with exact probabilities.

    Keys as in summary.json: mean_rel_rmse, variance_rel_rmse, success_probability_inversion,
    success_probability_variance_min. Exact for the methods with a closed-form model (the exact and
    walk oracles: qgp.circuits.methods.has_closed_form_model); any other (a Trotter oracle) is
    modelled by the reference method (qgp.circuits.methods.BUDGET_REFERENCE, the exact oracle).
    """
    m = _FilterModel(problem, circuit)
    mean, var = m.mean(circuit.clock_qubits), m.variance(circuit.clock_qubits)
    return {
        "mean_rel_rmse": None if mean is None else mean[0],
        "variance_rel_rmse": None if var is None else var[0],
        "success_probability_inversion": None if mean is None else mean[1],
        "success_probability_variance_min": None if var is None else var[1],
    }


def scaling_model(cfg, n_values: Iterable[int], *, max_clock: int = MODEL_MAX_CLOCK,
                  mean_target: float = MEAN_TARGET, variance_target: float = VARIANCE_TARGET) -> list[dict[str, Any]]:
    """Closed-form scaling of the ideal circuits with the training-set size n (fig. 7).

    For each n (a nested subsample, `[data] n_train`, at ``cfg``'s fixed hyperparameters): A's
    diagnostics (κ, sparsity s, ‖A‖_F/‖A‖) and, from the filter model (`model_errors`), the
    smallest c in [2, ``max_clock``] at which the mean (resp. latent variance) has relative RMSE
    ≤ the target, with the success probability at that c (None where not reached).
    """
    from qgp.classical.problem import problem_from_config

    out = []
    for n in n_values:
        problem = problem_from_config(replace(cfg, data=replace(cfg.data, n_train=int(n))))
        d = problem.diagnostics
        model = _FilterModel(problem, cfg.circuit)
        rec: dict[str, Any] = {
            "n": int(n),
            "condition_number": d.condition_number,
            "sparsity": d.sparsity,
            "frobenius_ratio": d.frobenius_norm / d.spectral_norm,
            "noise_variance": problem.noise_variance,
            "oracle": model.oracle,
            "clock_for_mean": None,
            "clock_for_variance": None,
            "success_inversion": None,
            "success_variance": None,
        }
        for c in range(2, max_clock + 1):
            if rec["clock_for_mean"] is None:
                got = model.mean(c)
                if got is not None and got[0] <= mean_target:
                    rec["clock_for_mean"], rec["success_inversion"] = c, got[1]
            if rec["clock_for_variance"] is None:
                got = model.variance(c)
                if got is not None and got[0] <= variance_target:
                    rec["clock_for_variance"], rec["success_variance"] = c, got[1]
            if rec["clock_for_mean"] is not None and rec["clock_for_variance"] is not None:
                break
        out.append(rec)
    return out
