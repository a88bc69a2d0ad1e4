"""The log-determinant's trace estimators side by side (the numbers behind the issue-16 closing note).

For the demo transect and scikit-learn's diabetes data (the configs of experiments/fit_*_{walk,qsvt}.toml
at their own hyperparameters): log det A from the maximally mixed state (exact probabilities, and
10⁴ shots) and from R = 200 Rademacher probes (Hutchinson), with the probes' sample variance beside
Hutchinson's variance of the operator the circuit applies.

    python experiments/fit_trace_estimators.py
"""

from pathlib import Path

from qgp.classical.problem import problem_from_config
from qgp.config import load_config
from qgp.readout.likelihood import estimate_log_marginal_likelihood
from qgp.settings import ReadoutSettings

HERE = Path(__file__).parent


def main() -> None:
    print("data      circuit                 estimator        log det (exact)   circuit ± SE          probe var / Hutchinson var")
    for data in ("demo", "diabetes"):
        for method in ("walk", "qsvt"):
            cfg = load_config(HERE / f"fit_{data}_{method}.toml")
            problem = problem_from_config(cfg)
            runs = (
                ("mixed, exact", ReadoutSettings(shots=0), 0),
                ("mixed, 1e4 shots", ReadoutSettings(shots=10_000, seed=1), 0),
                ("200 Rademacher", ReadoutSettings(shots=0, seed=1), 200),
            )
            for name, readout, probes in runs:
                est = estimate_log_marginal_likelihood(problem, cfg.circuit, readout, probes=probes)
                t = est.log_determinant
                se = "" if t.quantum_se is None else f" ± {t.quantum_se:.3f}"
                var = "" if est.trace_variance is None else f"{est.trace_variance:.4g} / {est.trace_variance_formula:.4g}"
                print(f"{data:9} {est.label + ' ' + str(est.size):23} {name:16} {t.exact:12.4f}   {t.quantum:10.4f}{se:10}   {var}")


if __name__ == "__main__":
    main()
