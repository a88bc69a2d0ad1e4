"""Fig. 8 (``fig8_qsvt_vs_phase_estimation``): QSVT against phase estimation on the same GP problems.

One row of two panels per condition number κ of A, one colour per inversion method in the store
(phase estimation with each phase oracle, QSVT). Left: the mean's relative error against total
qubits. Right: the relative error of the mean and of the latent variance against the oracle
(block-encoding) calls of the 1/λ circuit, beside the closed-form query models — phase estimation
calls ~ κ/ε, QSVT calls ~ κ·ln(κ/ε) — written as ε against calls with no constant fitted
(``reference``). Hollow markers in both: per method, the point with the fewest stored calls at
which the mean is within 1% (``derived``).

Small multiples per κ rather than one line per (method, κ): the query models depend on κ, and with
every κ in one panel twelve measured lines and eight grey guides cross over the same call range.
Rows rather than columns: at double-column width the qubit axis gets one tick per qubit count.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.readout.summary import summary_ref
from qgp.settings import CircuitSettings
from qgp.sweeps.figures.data import (
    _BAND,
    _NOISE_KEYS,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _fmt,
    _one,
    _Row,
    _setting,
    _short,
    _shots,
    _Skip,
    _varying_axes,
    _with,
    point_value,
)
from qgp.sweeps.figures.model import MEAN_TARGET
from qgp.sweeps.figures.style import _Figure, _Panel

_CALLS = summary_ref("block_encoding_calls")
_METHOD = summary_ref("method")
_KAPPA_EFF = summary_ref("effective_condition_number")
_KAPPA = SUMMARY["condition_number"]
_MEAN = SUMMARY["mean_rel_rmse"]
_VARIANCE = SUMMARY["variance_rel_rmse"]
_QUBITS = SUMMARY["total_qubits"]
#: Circuit settings that name a method or are its precision knob: they run along a method's line.
_CIRCUIT_KEYS = ("circuit.method", "circuit.clock_qubits", "circuit.target_error", "circuit.degree", *_ORACLE_KEYS)
#: One row of two panels per κ (style._draw letters at most eight panels).
MAX_CONDITION_NUMBERS = 4
#: Double-column width (inches): two panels side by side, wide enough for one tick per qubit count.
DOUBLE_COLUMN_WIDTH = 7.0
#: The query models are drawn over their panel's call range, from ε = 1 down to this fraction of its smallest error.
_REFERENCE_FLOOR = 0.3
_REFERENCE_POINTS = 24
_MARK = f"fewest calls with mean ≤ {MEAN_TARGET:.0%}"
_MARK_RULE = f"derived:{_MEAN} at the fewest {_CALLS} with {_MEAN} <= {MEAN_TARGET!r} (every seed)"


def _eps_phase_estimation(calls: float, kappa: float) -> float:
    return kappa / calls


def _eps_qsvt(calls: float, kappa: float) -> float:
    return kappa * math.exp(-calls / kappa)


#: The closed-form query model of each kind of algorithm, keyed by whether it has a clock register
#: (qgp.circuits.algorithms.Algorithm.uses_clock): legend text, the formula (y_name), ε at (calls, κ).
_MODELS: dict[bool, tuple[str, str, Callable[[float, float], float]]] = {
    True: ("κ/ε query model (phase estimation)",
           "ε = κ_eff/calls (phase estimation: calls ~ κ/ε, constant 1, not fitted)", _eps_phase_estimation),
    False: ("κ ln(κ/ε) query model (QSVT)",
            "ε = κ_eff·exp(−calls/κ_eff) (QSVT: calls ~ κ·ln(κ/ε), constant 1, not fitted)", _eps_qsvt),
}


# -- what a point is -----------------------------------------------------------------------------


def _settings(p) -> CircuitSettings:
    """The point's circuit settings, as far as its algorithm and label need them (from its summary)."""
    return CircuitSettings(
        method=point_value(p, _METHOD),
        evolution=point_value(p, SUMMARY["evolution"]),
        encoding=point_value(p, SUMMARY["encoding"]),
        trotter_steps=point_value(p, "config:circuit.trotter_steps"),
        trotter_order=point_value(p, "config:circuit.trotter_order"),
    )


def _uses_clock(p) -> bool:
    """Phase estimation (a clock register) or not (QSVT), read from the stored method."""
    return algorithm_of(_settings(p)).uses_clock


def _method(p) -> tuple[str, str]:
    """The inversion method as one series part, its figure label: "exact e^(iAt)", "QSVT + dilation", …"""
    s = _settings(p)
    return ("method", algorithm_of(s).label(s))


def _kappa_text(kappa: float) -> str:
    return f"κ = {kappa:g}"


def _by_kappa(pts) -> dict[float, list]:
    """Points by the condition number κ of A (summary condition_number, to 3 significant digits)."""
    out: dict[float, list] = {}
    for p in pts:
        out.setdefault(float(f"{point_value(p, _KAPPA):.3g}"), []).append(p)
    return dict(sorted(out.items()))


# -- rows -----------------------------------------------------------------------------------------


def _series_of(extras: Sequence[str]) -> Callable[[object, str], tuple]:
    """(point, quantity) → series parts: method, quantity, shots and the axes the figure does not consume."""
    def series(p, quantity: str) -> tuple:
        parts = (_method(p), ("quantity", quantity), _shots(p))
        return parts + tuple((k, f"{_short(k)} = {_fmt(p.axes.get(k))}") for k in extras)
    return series


def _mark(line: list, series: tuple, panel: str, x_name: str) -> _Row | None:
    """The point of one line with the fewest stored calls at which every seed's mean error is within `MEAN_TARGET`.

    x: its ``x_name`` value; y: its mean error (mean over seeds); grid_indices: the whole line.
    """
    by_calls: dict[float, list] = {}
    for p in line:
        by_calls.setdefault(point_value(p, _CALLS), []).append(p)
    ok = sorted(c for c, ps in by_calls.items() if max(point_value(p, _MEAN) for p in ps) <= MEAN_TARGET)
    if not ok:
        return None
    at = by_calls[ok[0]]
    y = math.fsum(point_value(p, _MEAN) for p in at) / len(at)
    return _one(panel, series, x_name, point_value(at[0], x_name), _MARK_RULE, y, "derived", [p.grid_index for p in line])


def _references(group, panel: str, measured: Sequence[_Row]) -> list[_Row]:
    """Each kind of algorithm's query model as ε against calls, over the panel's measured call range."""
    calls = [r.x for r in measured]
    errors = [r.y_min for r in measured if r.y_min > 0]
    if not calls or not errors:
        return []
    floor = _REFERENCE_FLOOR * min(errors)
    grid = [float(x) for x in np.geomspace(min(calls), max(calls), _REFERENCE_POINTS)]
    rows = []
    for clock in sorted({_uses_clock(p) for p in group}, reverse=True):
        text, formula, eps = _MODELS[clock]
        kind = [p for p in group if _uses_clock(p) == clock]
        kappa = max(float(point_value(p, _KAPPA_EFF)) for p in kind)
        y_name = f"reference:{formula}; κ_eff = {kappa!r}, the largest {_KAPPA_EFF} of the listed points"
        for x in grid:
            y = eps(x, kappa)
            if floor <= y <= 1.0:
                rows.append(_one(panel, (("model", text),), _CALLS, x, y_name, y, "reference", [p.grid_index for p in kind]))
    return rows


def _row(group, kappa: float, series, dropped: list[str], unreached: dict[str, list[str]]) -> tuple[list[_Row], list[_Panel]]:
    """The two panels of one κ: the mean's error against total qubits; mean and variance error and the
    query models against calls; the 1% marks in both."""
    kt = _kappa_text(kappa)
    qubits, calls = f"qubits, {kt}", f"calls, {kt}"
    lines: dict[tuple, list] = {}
    for p in group:
        lines.setdefault(series(p, _MARK), []).append(p)
    marks: dict[str, list[_Row]] = {qubits: [], calls: []}
    for parts, line in lines.items():
        if _mark(line, parts, calls, _CALLS) is None:
            unreached.setdefault(dict(parts)["method"], []).append(f"{kt} (≤ {max(point_value(p, _CALLS) for p in line)} calls)")
            continue
        for panel, x_name in ((qubits, _QUBITS), (calls, _CALLS)):
            marks[panel].append(_mark(line, parts, panel, x_name))

    def measured(panel, x_name, y_name, quantity):
        return _aggregate(group, panel=panel, x_name=x_name, y_name=y_name, series=lambda p: series(p, quantity), extras=(), dropped=dropped)

    # Row order sets the styles (style._Styles, first seen first): the qubits panel, drawn first, gives a
    # method's mean line its first variant (solid, filled) and its mark the second (hollow); the variance,
    # first met in the calls panel, gets the third (dash-dot, filled) and is drawn before the marks, which
    # stay visible on top where mean and variance errors coincide.
    rows = measured(qubits, _QUBITS, _MEAN, "mean") + marks[qubits]
    on_calls = measured(calls, _CALLS, _MEAN, "mean") + measured(calls, _CALLS, _VARIANCE, "variance")
    rows += on_calls + marks[calls] + _references(group, calls, on_calls)
    panels = [
        _Panel(qubits, f"total qubits ({kt})", "mean: relative RMSE", "linear", "log", integer_x=True),
        _Panel(calls, f"block-encoding calls ({kt})", "relative RMSE", "log", "log"),
    ]
    return rows, panels


def _marks_text(rows: Sequence[_Row]) -> str:
    """"κ = 5: exact e^(iAt) 62, …; κ = 10: …" from the mark rows."""
    out: dict[str, list[str]] = {}
    for r in rows:
        if r.source == "derived" and r.x_name == _CALLS:
            out.setdefault(r.panel.split(", ", 1)[1], []).append(f"{dict(r.series)['method']} {r.x:g}")
    return "; ".join(f"{k}: {', '.join(v)}" for k, v in out.items())


def _fig8(points) -> _Figure:
    pts = [p for p in _with(points, _MEAN) if point_value(p, _CALLS) and point_value(p, _METHOD)]
    if {_uses_clock(p) for p in pts} != {True, False}:
        raise _Skip("needs both phase-estimation points and QSVT points ([circuit] method = \"qsvt\") with "
                    "block_encoding_calls and mean_rel_rmse in their summary")
    groups = _by_kappa(pts)
    if len(groups) > MAX_CONDITION_NUMBERS:
        raise _Skip(f"needs at most {MAX_CONDITION_NUMBERS} condition numbers (one row of panels each); "
                    f"the store has {len(groups)}")
    consumed = {*_CIRCUIT_KEYS, *_NOISE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = _series_of(extras)
    rows: list[_Row] = []
    panels: list[_Panel] = []
    dropped: list[str] = []
    unreached: dict[str, list[str]] = {}
    for kappa, group in groups.items():
        r, p = _row(group, kappa, series, dropped, unreached)
        rows += r
        panels += p
    notes = [f"{m}: mean ≤ {MEAN_TARGET:.0%} not reached at {', '.join(where)}" for m, where in unreached.items()]
    marks = _marks_text(rows)
    caption = (
        "QSVT against phase estimation on the same GP problems, one row per condition number κ of A = K + σ²I. "
        "Left: relative RMSE of the quantum mean against the exact GP, against total qubits of the 1/λ circuit "
        "(system, clock, block-encoding and flag qubits). Right: relative RMSE of the mean (solid) and of the latent "
        "variance (dash-dot) against the oracle calls of the 1/λ circuit (summary block_encoding_calls: controlled "
        "e^(iAt) for the exact oracle, the idealised reference, or walk steps, uncompute included; calls of the block "
        "encoding, the polynomial degree, for QSVT); the variance is drawn at the same calls, which for QSVT "
        "overstate its 1/√λ circuit's own polynomial (polynomial_degree_inverse_sqrt, about half the degree). Hollow "
        f"markers: per method, the point with the fewest simulated calls at which the mean is within {MEAN_TARGET:.0%}"
        + (f" (calls: {marks})" if marks else "") + ". Grey: the closed-form query models, phase estimation calls "
        "~ κ/ε and QSVT calls ~ κ·ln(κ/ε), with ε the relative error and κ the points' effective condition number "
        "(summary effective_condition_number), drawn as ε against calls with every constant set to 1 — none fitted: "
        f"they show how the calls scale with ε and κ, not their level. {_BAND}"
    )
    size = (DOUBLE_COLUMN_WIDTH, 1.45 * len(groups) + 1.2)
    return _Figure("fig8_qsvt_vs_phase_estimation", rows, panels, (len(groups), 2), size, caption,
                   notes + dropped, legend="figure", setting=_setting(pts, {"c", "noise"}))
