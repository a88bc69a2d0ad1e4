"""Fig. 4 (``fig4_noise_tradeoff``): κ, the quantum error and the GP's test RMSE and NLPD against σ²."""

from __future__ import annotations

from qgp.sweeps.figures.data import (
    _BAND,
    _NOISE_KEYS,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _dedupe_rows,
    _distinct,
    _finite,
    _model_side,
    _noise_axis,
    _oracle,
    _Row,
    _setting,
    _shots,
    _Skip,
    _varying_axes,
    _with,
    point_value,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel


def _fig4(points) -> _Figure:
    pts = _with(points, SUMMARY["noise_variance"])
    if _noise_axis(pts) is None or len(_distinct(pts, SUMMARY["noise_variance"])) < 2:
        raise _Skip("needs a noise axis (noise.variance or noise.target_condition) giving two or more σ²")
    if not any(_finite(point_value(p, SUMMARY["test_rmse_exact"])) for p in pts):
        raise _Skip("needs test targets ([data] test with the target column) for test RMSE and NLPD")
    consumed = {*_NOISE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS and k not in _ORACLE_KEYS]
    x = SUMMARY["noise_variance"]
    dropped: list[str] = []
    rows: list[_Row] = []

    def q(name, with_oracle=True):
        return lambda p: (("quantity", name),) + ((_oracle(p), _shots(p)) if with_oracle else ())

    gp_extras = _model_side(extras)
    rows += _aggregate(pts, panel="kappa", x_name=x, y_name=SUMMARY["condition_number"], series=q("κ", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="quantum error", x_name=x, y_name=SUMMARY["mean_rel_rmse"], series=q("mean"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="quantum error", x_name=x, y_name=SUMMARY["variance_rel_rmse"], series=q("variance"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name=SUMMARY["test_rmse_exact"], series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name=SUMMARY["test_rmse_quantum"], series=q("quantum"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name=SUMMARY["test_nlpd_exact"], series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name=SUMMARY["test_nlpd_quantum"], series=q("quantum"), extras=extras, dropped=dropped)
    kept = _dedupe_rows(rows)
    sigma = "noise variance σ²"
    panels = [
        _Panel("kappa", sigma, "condition number κ", "log", "log"),
        _Panel("quantum error", sigma, "quantum vs exact:\nrelative RMSE", "log", "log"),
        _Panel("rmse", sigma, "test RMSE", "log", "linear"),
        _Panel("nlpd", sigma, "test NLPD", "log", "linear"),
    ]
    caption = (
        "The conditioning–accuracy trade-off: against the noise variance σ² of A = K + σ²I, (a) κ, (b) the circuits' "
        "error against the exact GP (relative RMSE of mean and latent variance), (c) test RMSE and (d) test negative "
        "log predictive density (NLPD, predictive variance = latent + σ²) of the exact GP and of the quantum estimates, "
        "on the held-out test targets. Raising σ² lowers κ (helps the circuit) and moves the GP away from its best fit "
        f"(hurts the model). {_BAND}"
    )
    return _Figure("fig4_noise_tradeoff", kept, panels, (4, 1), (SINGLE_COLUMN[0], 6.2), caption, dropped, legend="figure",
                   setting=_setting(pts, {"noise"}))
