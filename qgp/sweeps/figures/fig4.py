"""Fig. 4 (``fig4_noise_tradeoff``): the noise trade-off as a Pareto view.

One point per noise variance σ²: the circuits' error against the exact GP (y) against the exact
GP's test NLPD (x), per method and clock size, each point labelled with its σ², the points no
other σ² beats in both (style.pareto_front) filled and joined. The CSV also keeps the earlier
per-σ² rows (κ, quantum error, test RMSE and NLPD against σ²), not drawn, so nothing is lost.
"""

from __future__ import annotations

from qgp.sweeps.figures.data import (
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
from qgp.sweeps.figures.style import DOUBLE_COLUMN, _Figure, _Panel


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
    # The Pareto view: x = the exact GP's test NLPD (the same for every seed and circuit at one σ²),
    # y = the circuits' error (mean over seeds, min–max as a bar).
    pareto_series = lambda p: (_oracle(p), _shots(p))  # noqa: E731
    nlpd = SUMMARY["test_nlpd_exact"]
    rows += _aggregate(pts, panel="pareto mean", x_name=nlpd, y_name=SUMMARY["mean_rel_rmse"], series=pareto_series, extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="pareto variance", x_name=nlpd, y_name=SUMMARY["variance_rel_rmse"], series=pareto_series, extras=extras, dropped=dropped)
    kept = _dedupe_rows(rows)
    sigma = "noise variance σ²"
    nlpd_label = "exact GP: test NLPD (nats)"
    ann = r"$\sigma^2={:.3g}$"
    panels = [
        _Panel("pareto mean", nlpd_label, "quantum vs exact mean:\nrelative RMSE", "log", "log", pareto=True,
               annotate="quantum error", annotate_format=ann, title="predictive mean"),
        _Panel("pareto variance", nlpd_label, "quantum vs exact variance:\nrelative RMSE", "log", "log", pareto=True,
               annotate="quantum error", annotate_format=ann, title="latent variance"),
        # The earlier four-panel view against σ², kept in the CSV (the annotations' σ² come from "quantum error").
        _Panel("kappa", sigma, "condition number κ", "log", "log", drawn=False),
        _Panel("quantum error", sigma, "quantum vs exact:\nrelative RMSE", "log", "log", drawn=False),
        _Panel("rmse", sigma, "test RMSE", "log", "linear", drawn=False),
        _Panel("nlpd", sigma, "test NLPD", "log", "linear", drawn=False),
    ]
    caption = (
        "The conditioning–accuracy trade-off of the noise variance σ² in A = K + σ²I, as a Pareto view: one point per σ² "
        "(labelled), the circuits' error against the exact GP (relative RMSE of (a) the predictive mean and (b) the latent "
        "variance) against the exact GP's test negative log predictive density (NLPD, mean over the held-out test targets, "
        "predictive variance = latent + σ², in nats), one series per method and clock size. Lower is better on both axes: "
        "raising σ² lowers κ (helps the circuit) and moves the GP away from its best fit (hurts the model). Filled and "
        "joined: the Pareto front of each series, the σ² no other σ² of that series beats in both NLPD and error; hollow: "
        "dominated. The exact GP's NLPD does not depend on the circuit, so the points of one σ² line up vertically and "
        "their σ² is written once, beside the highest. The CSV also keeps κ, the errors, test RMSE and NLPD (exact GP and "
        "quantum) against σ² (panels kappa, quantum error, rmse, nlpd), not drawn. Points: mean over readout seeds; "
        "bars (where a seed axis varies): min–max over seeds."
    )
    return _Figure("fig4_noise_tradeoff", kept, panels, (1, 2), (DOUBLE_COLUMN, 2.7), caption, dropped, legend="below",
                   setting=_setting(pts, {"noise"}))
