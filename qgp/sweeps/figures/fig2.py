"""Fig. 2 (``fig2_error_vs_condition``): error of the mean and of the variance against the condition number κ."""

from __future__ import annotations

from qgp.sweeps.figures.data import (
    _BAND,
    _NOISE_KEYS,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _distinct,
    _noise_axis,
    _oracle,
    _setting,
    _shots,
    _Skip,
    _varying_axes,
    _with,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel


def _fig2(points) -> _Figure:
    pts = _with(points, SUMMARY["condition_number"])
    if _noise_axis(pts) is None or len(_distinct(pts, SUMMARY["condition_number"])) < 2:
        raise _Skip("needs a noise axis (noise.target_condition or noise.variance) giving two or more condition numbers")
    consumed = {*_NOISE_KEYS, *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p), _shots(p))  # noqa: E731
    dropped: list[str] = []
    rows = _aggregate(pts, panel="mean", x_name=SUMMARY["condition_number"], y_name=SUMMARY["mean_rel_rmse"],
                      series=series, extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="variance", x_name=SUMMARY["condition_number"], y_name=SUMMARY["variance_rel_rmse"],
                       series=series, extras=extras, dropped=dropped)
    panels = [
        _Panel("mean", "condition number κ of A = K + σ²I", "mean: relative RMSE", "log", "log"),
        _Panel("variance", "condition number κ of A = K + σ²I", "variance: relative RMSE", "log", "log", legend=False),
    ]
    caption = (
        "Error of the quantum mean and latent variance (relative RMSE against the exact GP) against the condition "
        f"number κ, set through the noise variance σ². {_BAND}"
    )
    return _Figure("fig2_error_vs_condition", rows, panels, (2, 1), (SINGLE_COLUMN[0], 3.9), caption, dropped, legend="figure",
                   setting=_setting(pts, {"noise"}))
