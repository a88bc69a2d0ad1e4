"""Growth-law fits (qgp.scale.growth) against statsmodels' OLS and exact power laws."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from qgp.errors import QgpError
from qgp.scale.growth import fit_growth, growth_value


def test_slope_and_interval_match_statsmodels_ols():
    # Reference: statsmodels OLS on (log n, log value) and its conf_int (Student t).
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(2)
    n = 2.0 ** np.arange(6, 14)
    v = 3.0 * n**1.1 * np.exp(rng.normal(0, 0.05, n.size))
    fit = fit_growth(n, v, quantity="κ", confidence=0.9)
    ols = sm.OLS(np.log(v), sm.add_constant(np.log(n))).fit()
    lo, hi = ols.conf_int(alpha=0.1)[1]
    assert fit.exponent == pytest.approx(ols.params[1], rel=1e-12)
    assert (fit.ci_low, fit.ci_high) == pytest.approx((lo, hi), rel=1e-10)
    assert fit.prefactor == pytest.approx(np.exp(ols.params[0]), rel=1e-10)


@settings(max_examples=40, deadline=None)
@given(beta=st.floats(-2.0, 3.0), c=st.floats(1e-3, 1e3))
def test_an_exact_power_law_is_recovered(beta, c):
    n = 2.0 ** np.arange(6, 12)
    fit = fit_growth(n, c * n**beta, quantity="q")
    assert fit.exponent == pytest.approx(beta, abs=1e-9)
    assert fit.prefactor == pytest.approx(c, rel=1e-9)
    assert np.allclose(growth_value(fit, n), c * n**beta, rtol=1e-9)


def test_unusable_points_are_left_out_and_too_few_refused():
    n = np.array([64, 128, 256, 512, 1024.0])
    v = np.array([1.0, np.nan, 4.0, -1.0, 16.0])
    fit = fit_growth(n, v, quantity="q")
    assert fit.n_points == 3 and fit.exponent == pytest.approx(1.0)
    with pytest.raises(QgpError, match="at least 3"):
        fit_growth(n, v, quantity="q", n_min=256)
