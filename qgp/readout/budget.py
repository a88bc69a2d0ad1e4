"""The error budget (one imperfection added at a time) and the shots a target standard error needs."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["max_abs", "rel_rmse", "budget_stage", "error_budget", "shots_needed"]


def max_abs(x: np.ndarray) -> float:
    """Largest absolute entry of ``x``."""
    return float(np.max(np.abs(x)))


def rel_rmse(err: np.ndarray, ref: np.ndarray) -> float:
    """RMSE relative to the RMS of the reference (the centred mean: what the circuit estimates)."""
    scale = math.sqrt(float(np.mean(ref**2)))
    return math.sqrt(float(np.mean(err**2))) / scale if scale > 0 else math.inf


def budget_stage(mean, var, mean_ref, var_ref) -> dict:
    return {
        "mean_max_abs_error": max_abs(mean - mean_ref),
        "mean_rmse": math.sqrt(float(np.mean((mean - mean_ref) ** 2))),
        "variance_max_abs_error": max_abs(var - var_ref),
        "variance_rmse": math.sqrt(float(np.mean((var - var_ref) ** 2))),
    }


def error_budget(stages: list[tuple[str, dict]]) -> dict:
    """Errors after each added imperfection and the increments, which add up to the total."""
    out = {"order": [name for name, _ in stages], "stages": {}, "increments": {}}
    prev = None
    for name, metrics in stages:
        out["stages"][name] = metrics
        out["increments"][name] = {k: v - (prev[k] if prev else 0.0) for k, v in metrics.items()}
        prev = metrics
    out["total"] = prev
    out["note"] = (
        "ideal 1/λ on the exact spectrum (the exact GP, error 0) → phase-estimation resolution and filtering "
        "with the exact oracle (closed-form filter model) → the chosen oracle (circuit, exact probabilities) "
        "→ gate noise ([gate_noise], when given: the gate form under depolarising noise) → shot noise; each increment is the change in the metric when that imperfection is added"
    )
    return out


def shots_needed(problem, p0, p1, pf, y_norm, k_norms, inv, inv_sqrt, mean_exact, var_exact) -> dict:
    """Shots for a standard error of 1% of max|μ − prior mean| (mean) and of max prior variance.

    Plain sampling: N = scale²·Var/ε² (~1/ε²). Amplitude estimation (Brassard, Høyer, Mosca & Tapp
    2002, Thm 12: error ≈ π√(p(1−p))/M after M oracle calls) needs M ≈ scale·π·Σ√(p(1−p))/ε
    (~1/ε) — an estimate, not a simulation.
    """
    eps_mean = 0.01 * max_abs(mean_exact - problem.y_offset)
    scale_m = y_norm * k_norms / inv.scale
    d = p0 - p1
    var_d = np.clip(p0 + p1 - d**2, 0.0, None)
    eps_var = 0.01 * float(np.max(problem.k_star_star))
    scale_v = k_norms**2 / inv_sqrt.scale
    plain_mean = float(np.max(scale_m**2 * var_d)) / eps_mean**2 if eps_mean > 0 else None
    ae_mean = (
        float(np.max(scale_m * math.pi * (np.sqrt(p0 * (1 - p0)) + np.sqrt(p1 * (1 - p1))))) / eps_mean
        if eps_mean > 0
        else None
    )
    plain_var = float(np.max(scale_v**2 * pf * (1 - pf))) / eps_var**2
    ae_var = float(np.max(scale_v * math.pi * np.sqrt(pf * (1 - pf)))) / eps_var
    return {
        "mean_target_se": eps_mean,
        "mean_shots_plain": _ceil(plain_mean),
        "mean_oracle_calls_amplitude_estimation": _ceil(ae_mean),
        "variance_target_se": eps_var,
        "variance_shots_plain": _ceil(plain_var),
        "variance_oracle_calls_amplitude_estimation": _ceil(ae_var),
        "note": "per test point, worst case over test points; mean target = 1% of max|μ − prior mean|, "
        "variance target = 1% of the largest prior variance k(x*, x*); amplitude-estimation counts are "
        "estimates (Brassard et al. 2002), not simulated",
    }


def _ceil(x):
    return None if x is None or not math.isfinite(x) else int(math.ceil(x))
