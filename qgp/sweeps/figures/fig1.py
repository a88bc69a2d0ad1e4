"""Fig. 1 (``fig1_error_vs_qubits``): error of the mean and of the variance against total and clock qubits."""

from __future__ import annotations

from qgp.sweeps.figures.data import (
    _BAND,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _distinct,
    _oracle,
    _Row,
    _setting,
    _shots,
    _Skip,
    _varying_axes,
    _with,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel


def _fig1(points) -> _Figure:
    pts = _with(points, SUMMARY["mean_rel_rmse"])
    if len(_distinct(pts, SUMMARY["clock_qubits"])) < 2:
        raise _Skip("needs points at two or more clock-qubit counts (a circuit.clock_qubits axis)")
    consumed = {"circuit.clock_qubits", *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p), _shots(p))  # noqa: E731
    rows: list[_Row] = []
    dropped: list[str] = []
    for q, y in (("mean", SUMMARY["mean_rel_rmse"]), ("variance", SUMMARY["variance_rel_rmse"])):
        for xkey, x in (("total", SUMMARY["total_qubits"]), ("clock", SUMMARY["clock_qubits"])):
            rows += _aggregate(pts, panel=f"{q} vs {xkey}", x_name=x, y_name=y, series=series, extras=extras, dropped=dropped)
    panels = [
        _Panel("mean vs total", "total qubits", "mean: relative RMSE", yscale="log", integer_x=True),
        _Panel("mean vs clock", "clock qubits c", "mean: relative RMSE", yscale="log", integer_x=True, legend=False),
        _Panel("variance vs total", "total qubits", "variance: relative RMSE", yscale="log", integer_x=True, legend=False),
        _Panel("variance vs clock", "clock qubits c", "variance: relative RMSE", yscale="log", integer_x=True, legend=False),
    ]
    caption = (
        "Error of the quantum predictive mean and latent variance against the exact GP (relative RMSE over the test "
        "points: RMSE of quantum − exact over the RMS of the exact centred mean, resp. exact variance), against total "
        f"qubits (system + clock + flag + block) and clock qubits, one line per phase oracle. {_BAND}"
    )
    return _Figure("fig1_error_vs_qubits", rows, panels, (2, 2), (SINGLE_COLUMN[0], 3.9), caption, dropped, legend="figure",
                   setting=_setting(pts, {"c"}))
