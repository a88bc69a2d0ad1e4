"""docs/example_co2.md runs as written, top to bottom, and its results agree with outside references.

References: scikit-learn's ``GaussianProcessRegressor`` (the exact GP with a fixed kernel and alpha = σ²)
and a direct numpy solve of Rasmussen & Williams (2006) eqs. 2.25–2.26; the Mauna Loa record itself
(Keeling & Whorf 2004, as shipped in statsmodels) for the held-out months.
"""

import re
import shutil
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pandas")
pytest.importorskip("statsmodels")
pytest.importorskip("sklearn")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

from matplotlib.figure import Figure  # noqa: E402

DOC = Path(__file__).resolve().parents[1] / "docs" / "example_co2.md"


@pytest.fixture(scope="module")
def example():
    """Every ```python block of the page, in order, executed in one namespace (as a notebook would)."""
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), flags=re.S)
    assert len(blocks) >= 8, "the example should hold its notebook cells"
    namespace: dict = {"__name__": "example_co2"}
    try:
        for i, block in enumerate(blocks):
            exec(compile(block, f"{DOC.name} (cell {i + 1})", "exec"), namespace)
        yield namespace
    finally:
        outdir = namespace.get("outdir")
        if outdir is not None and Path(outdir).name.startswith("qgp-co2-"):
            shutil.rmtree(outdir, ignore_errors=True)


def test_data_subset_is_small_and_named(example):
    X_train, X_test, y_test = example["X_train"], example["X_test"], example["y_test"]
    assert list(X_train.columns) == ["year"] and len(X_train) <= 32
    assert len(X_test) > 0 and not set(X_train["year"]) & set(X_test["year"])
    # The column name flows through to the circuits' result.
    assert example["qgpr"].last_result_.problem.inputs == ("year",)
    # Monthly means of the statsmodels record: Mauna Loa in 1995–1999 lies between 355 and 375 ppm.
    assert np.all((y_test > 355) & (y_test < 375))


def test_exact_predictions_are_scikit_learns(example):
    # Reference library: scikit-learn's GP with the same fixed kernel, alpha = σ², on the centred targets
    # (qgp's center=True), plus a direct solve of R&W eqs. 2.25–2.26.
    from sklearn.gaussian_process import GaussianProcessRegressor

    qgpr, signal, sigma2 = example["qgpr"], example["signal"], example["noise_variance"]
    X_train, y_train, X_test = example["X_train"], example["y_train"], example["X_test"]
    mean, std = qgpr.predict_exact(X_test, return_std=True)

    ybar = float(np.mean(y_train))
    sk = GaussianProcessRegressor(signal, alpha=sigma2, optimizer=None).fit(X_train.to_numpy(), y_train.to_numpy() - ybar)
    ref_mean, ref_std = sk.predict(X_test.to_numpy(), return_std=True)
    np.testing.assert_allclose(mean, ref_mean + ybar, rtol=1e-8)
    np.testing.assert_allclose(std, ref_std, rtol=1e-6, atol=1e-8)

    Xa, Xs = X_train.to_numpy(), X_test.to_numpy()
    A = signal(Xa) + sigma2 * np.eye(len(Xa))
    Ks = signal(Xa, Xs)
    np.testing.assert_allclose(mean, ybar + Ks.T @ np.linalg.solve(A, y_train.to_numpy() - ybar), rtol=1e-8)
    var = signal.diag(Xs) - np.einsum("ij,ij->j", Ks, np.linalg.solve(A, Ks))
    np.testing.assert_allclose(std**2, var, rtol=1e-6, atol=1e-8)
    # The ML-II fit of the page: the noise is passed as σ², not left inside the kernel.
    assert sigma2 == pytest.approx(example["ml2"].kernel_.k2.noise_level) and qgpr.noise_variance_ == sigma2


def test_circuit_mean_within_its_own_error_budget(example):
    result = example["result"]
    mean_q, mean_e = example["mean_q"], example["mean_e"]
    assert np.array_equal(mean_q, result.mean_quantum) and np.array_equal(mean_e, result.mean_exact)
    assert result.mean_quantum_se is not None and np.all(result.mean_quantum_se > 0)
    # As tests/test_readme.py: a few shot standard errors plus the error the budget reports for the
    # noiseless circuits (exact outcome probabilities, before shots) — a sanity bound, not a target.
    stages = result.error_budget["stages"]
    assert result.error_budget["order"][-1] == "shots"
    bound = 5 * result.mean_quantum_se + stages["oracle"]["mean_max_abs_error"]
    assert np.all(np.abs(mean_q - mean_e) <= bound)
    # And both are predictions of the real record: the exact GP within 1 ppm RMS of the held-out months
    # (the seasonal swing is ~ ±3 ppm), the circuits within 2 ppm.
    y_test = example["y_test"].to_numpy()
    assert np.sqrt(np.mean((mean_e - y_test) ** 2)) < 1.0
    assert np.sqrt(np.mean((mean_q - y_test) ** 2)) < 2.0


def test_cross_validation_scores(example):
    folds = example["folds"]
    for scores in (example["cv_quantum"], example["cv_exact"]):
        assert scores.shape == (folds.get_n_splits(),) and np.all(np.isfinite(scores))
    # The exact GP with the ML-II kernel explains most of the variance in every fold.
    assert np.all(example["cv_exact"] > 0.5)


def test_figure_is_restyled_and_saved_outside_the_repo(example):
    fig = example["fig"]
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    main_ax, resid_ax = fig.axes
    assert resid_ax.get_ylabel().startswith("circuits − exact")  # restyled by the page
    assert main_ax.get_title().startswith("Mauna Loa") and main_ax.get_ylabel() == "CO₂ at Mauna Loa (ppm)"
    labels = [text.get_text() for legend in fig.legends for text in legend.get_texts()]
    assert "held-out targets" in labels and "training data" in labels
    # The residual panel plots quantum − exact at the held-out months.
    x = np.concatenate([np.asarray(line.get_xdata(), float) for line in resid_ax.get_lines() if len(line.get_xdata()) > 2])
    np.testing.assert_allclose(np.sort(x), np.sort(example["X_test"]["year"].to_numpy()))
    repo = DOC.parents[1]
    for path in example["paths"]:
        assert path.is_file() and path.stat().st_size > 0
        assert repo not in path.resolve().parents
