"""Growth-law fits (qgp.scale.growth) against statsmodels' OLS and exact power laws."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qgp.errors import QgpError
from qgp.scale.growth import GrowthFit, fit_growth, growth_value


def _assert_close(ours, ref, rtol, what):
    ours, ref = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    rel = np.abs(ours - ref) / np.abs(ref)
    worst = int(np.argmax(rel))
    assert rel.flat[worst] <= rtol, (
        f"{what}: worst relative residual {rel.flat[worst]:.3e} at {worst} "
        f"(ours {float(ours.flat[worst])!r}, statsmodels {float(ref.flat[worst])!r}, allowed {rtol:.0e})"
    )


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_slope_interval_and_prefactor_match_statsmodels_ols(confidence):
    # Reference: statsmodels OLS of log value on [1, log n]: params and conf_int(alpha) (Student t).
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(2)
    n = 2.0 ** np.arange(6, 15)
    v = 3.0 * n**1.1 * np.exp(rng.normal(0.0, 0.05, n.size))
    fit = fit_growth(n, v, quantity="condition_number", confidence=confidence)
    ols = sm.OLS(np.log(v), sm.add_constant(np.log(n))).fit()
    lo, hi = ols.conf_int(alpha=1.0 - confidence)[1]
    _assert_close(
        [fit.exponent, fit.ci_low, fit.ci_high, fit.prefactor],
        [ols.params[1], lo, hi, np.exp(ols.params[0])],
        1e-10,
        "[exponent, ci_low, ci_high, prefactor]",
    )
    assert (fit.n_points, fit.n_min, fit.n_max) == (9, 64, 16384)


def test_only_usable_points_enter_the_fit():
    # Reference: statsmodels OLS on the points left after dropping None, nan, ≤ 0 and n < n_min by hand.
    sm = pytest.importorskip("statsmodels.api")
    n = np.array([32, 64, 128, 256, 512, 1024, 2048, 4096])
    v = [5.0, 7.0, None, 31.0, -1.0, 130.0, np.inf, 520.0]
    fit = fit_growth(n, v, quantity="sparsity", n_min=64)
    keep_n = np.array([64, 256, 1024, 4096.0])
    keep_v = np.array([7.0, 31.0, 130.0, 520.0])
    ols = sm.OLS(np.log(keep_v), sm.add_constant(np.log(keep_n))).fit()
    lo, hi = ols.conf_int(alpha=0.05)[1]
    _assert_close([fit.exponent, fit.ci_low, fit.ci_high], [ols.params[1], lo, hi], 1e-10, "filtered fit")
    assert (fit.n_points, fit.n_min, fit.n_max) == (4, 64, 4096)


@settings(max_examples=60, deadline=None)
@given(exponent=st.floats(-2.0, 3.0), prefactor=st.floats(1e-3, 1e3), first=st.integers(1, 8), count=st.integers(3, 10))
def test_an_exact_power_law_is_recovered(exponent, prefactor, first, count):
    # Reference: the power law itself — exact data must give back its exponent and prefactor.
    n = 2.0 ** np.arange(first, first + count)
    fit = fit_growth(n, prefactor * n**exponent, quantity="q")
    assert abs(fit.exponent - exponent) <= 1e-9, f"exponent residual {fit.exponent - exponent:.3e}"
    assert abs(fit.prefactor / prefactor - 1.0) <= 1e-9, f"prefactor relative residual {fit.prefactor / prefactor - 1:.3e}"
    # Exact data: the interval collapses onto the exponent (up to round-off in the residuals).
    assert fit.ci_high - fit.ci_low <= 1e-9, f"interval width {fit.ci_high - fit.ci_low:.3e} on exact data"
    grid = np.array([[3.0, 700.0], [1e5, 12.0]])
    values = growth_value(fit, grid)
    assert values.shape == grid.shape
    _assert_close(values, prefactor * grid**exponent, 1e-8, "growth_value on a 2-D grid")


def test_as_dict_is_plain_json():
    fit = fit_growth([64, 128, 256, 512], [1.0, 2.1, 3.9, 8.2], quantity="norm_frobenius")
    back = json.loads(json.dumps(fit.as_dict(), allow_nan=False))
    assert GrowthFit(**back) == fit


def test_refusals_name_the_problem():
    n = [64, 128, 256, 512]
    with pytest.raises(QgpError, match="at least 3 points"):
        fit_growth(n, [1.0, None, np.nan, 4.0], quantity="κ")
    with pytest.raises(QgpError, match="at least 3 points"):
        fit_growth(n, [1.0, 2.0, 4.0, 8.0], quantity="κ", n_min=256)
    with pytest.raises(QgpError, match="every usable point"):
        fit_growth([64, 64, 64], [1.0, 2.0, 3.0], quantity="κ")
    with pytest.raises(QgpError, match="one value per n"):
        fit_growth(n, [1.0, 2.0, 3.0], quantity="κ")
    with pytest.raises(QgpError, match=r"confidence must be a number in \(0, 1\)"):
        fit_growth(n, [1.0, 2.0, 4.0, 8.0], quantity="κ", confidence=95)
