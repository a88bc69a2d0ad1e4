"""Fig. 1 (``fig1_error_vs_qubits``): error of the mean and of the variance against clock qubits.

Total qubits are clock qubits plus a constant per oracle and problem (system + flag + block
qubits), so they get no panel of their own: the constant is written beside each oracle in the
legend and in the caption (from the total-qubit rows the CSV keeps). Where the condition number
κ varies (a noise axis), or another numeric setting does, its series are coloured along a
sequential colour ramp (style.RAMP_CMAP) and the oracle keeps marker and line style.
"""

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
    _fmt,
    _noise_axis,
    _oracle,
    _Row,
    _setting,
    _short,
    _shots,
    _Skip,
    _varying_axes,
    _with,
    point_value,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel, _Ramp

#: The series part that carries κ when a noise axis varies (coloured along the ramp).
KAPPA_PART = "κ"


def _kappa_text(kappa: float) -> str:
    return f"κ = {kappa:.3g}"


def _offsets(rows: list[_Row]) -> dict[str, list[int]]:
    """Oracle label → the sorted qubits beyond the clock (total − clock), from the CSV's own rows:
    each total-qubit row against the clock-qubit row of the same grid points."""
    clock = {(r.panel.split(" vs ")[0], r.grid_indices): r for r in rows if r.panel.endswith("vs clock")}
    out: dict[str, set[int]] = {}
    for r in rows:
        if r.panel.endswith("vs total"):
            c = clock.get((r.panel.split(" vs ")[0], r.grid_indices))
            if c is not None and r.x is not None and c.x is not None:
                out.setdefault(dict(r.series)["oracle"], set()).add(int(round(r.x - c.x)))
    return {k: sorted(v) for k, v in out.items()}


def _offset_text(values: list[int]) -> str:
    """The legend's note (mathtext): "total $c + 4$", or "total $c + 2$ to $c + 5$" where it varies (n)."""
    return f"total $c + {values[0]}$" if len(values) == 1 else f"total $c + {values[0]}$ to $c + {values[-1]}$"


def _fig1(points) -> _Figure:
    pts = _with(points, SUMMARY["mean_rel_rmse"])
    if len(_distinct(pts, SUMMARY["clock_qubits"])) < 2:
        raise _Skip("needs points at two or more clock-qubit counts (a circuit.clock_qubits axis)")
    noise = _noise_axis(pts)
    consumed = {"circuit.clock_qubits", *_ORACLE_KEYS, *_SHOT_KEYS, *(_NOISE_KEYS if noise else ())}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    ramp: _Ramp | None = None
    if noise is not None:  # the condition number names the noise setting (κ from the stored A)
        kappa = {_kappa_text(point_value(p, SUMMARY["condition_number"])): float(f"{point_value(p, SUMMARY['condition_number']):.3g}")
                 for p in pts}
        ramp = _Ramp(KAPPA_PART, r"condition number $\kappa$", kappa)

        def series(p):
            return (_oracle(p), _shots(p), (KAPPA_PART, _kappa_text(point_value(p, SUMMARY["condition_number"]))))
    else:
        def series(p):
            return (_oracle(p), _shots(p))

        numeric = [k for k in extras if all(isinstance(p.axes.get(k), (int, float)) and not isinstance(p.axes.get(k), bool) for p in pts)]
        if numeric:  # another ordered setting (e.g. the training-set size n): the same ramp
            k = numeric[0]
            ramp = _Ramp(k, {"data.n_train": "training points $n$"}.get(k, _short(k)),
                         {f"{_short(k)} = {_fmt(p.axes[k])}": float(p.axes[k]) for p in pts})
    rows: list[_Row] = []
    dropped: list[str] = []
    for q, y in (("mean", SUMMARY["mean_rel_rmse"]), ("variance", SUMMARY["variance_rel_rmse"])):
        for xkey, x in (("total", SUMMARY["total_qubits"]), ("clock", SUMMARY["clock_qubits"])):
            rows += _aggregate(pts, panel=f"{q} vs {xkey}", x_name=x, y_name=y, series=series, extras=extras, dropped=dropped)
    offsets = _offsets(rows)
    clock = r"clock qubits $c$"
    panels = [
        _Panel("mean vs clock", clock, "mean: relative RMSE", yscale="log", integer_x=True, title="predictive mean"),
        _Panel("variance vs clock", clock, "variance: relative RMSE", yscale="log", integer_x=True, title="latent variance"),
        # Kept in the CSV (the total-qubit numbers, and the constants the legend states), not drawn.
        _Panel("mean vs total", "total qubits", "mean: relative RMSE", yscale="log", integer_x=True, drawn=False),
        _Panel("variance vs total", "total qubits", "variance: relative RMSE", yscale="log", integer_x=True, drawn=False),
    ]
    totals = "; ".join(f"{_offset_text(v).replace('total ', 'total = ').replace('$', '')} for {oracle}" for oracle, v in sorted(offsets.items()))
    kappa_text = (
        " Colour: the condition number κ of A = K + σ²I along a sequential (viridis) ramp, darkest at the smallest κ; "
        "marker and line style: the oracle." if ramp is not None and ramp.part == KAPPA_PART else
        f" Colour: {ramp.part} along a sequential (viridis) ramp; marker and line style: the oracle." if ramp is not None else ""
    )
    caption = (
        "Error of the quantum predictive mean (a) and latent variance (b) against the exact GP (relative RMSE over the "
        "test points: RMSE of quantum − exact over the RMS of the exact centred mean, resp. exact variance), against the "
        "clock qubits c, one line per phase oracle. Total qubits are c plus a constant per oracle (system + flag + block "
        f"qubits), stated in the legend rather than drawn as a second axis: {totals}.{kappa_text} "
        f"The total-qubit rows stay in the CSV (panels 'mean vs total', 'variance vs total'). {_BAND}"
    )
    return _Figure("fig1_error_vs_qubits", rows, panels, (2, 1), (SINGLE_COLUMN[0], 3.3), caption, dropped, legend="below",
                   setting=_setting(pts, {"c", "noise"} if noise else {"c"}), ramp=ramp,
                   label_notes={oracle: _offset_text(v) for oracle, v in offsets.items()})
