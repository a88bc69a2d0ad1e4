"""Fig. 9 (``fig9_gate_noise``): how much gate noise quantum GP inference tolerates.

One line per inversion method and accuracy setting (phase estimation at a clock size c, QSVT at a
target error ε or polynomial degree), one colour per line in every panel. (a) The mean's relative
RMSE against the two-qubit depolarising parameter p (p > 0 only, log–log); the line's p = 0 run, its
noiseless floor, as a dotted horizontal line in its colour (``derived``); the 1% target and the
exact GP's own posterior spread in the same metric (RMS of √variance_exact over RMS of the centred
exact mean, recomputed from the stored config: ``classical``). Hollow markers: p*, where the line
first crosses 1%, interpolated log–log between the two stored rates around the crossing
(``derived``). (b) The same for the latent variance, without p*. (c) p* against the two-qubit gates
of the Hadamard-test circuit, beside p = 1/gates (about one error per run) and p = 0.01/gates (one
run in a hundred hit), both unfitted (``reference``).

One row of three panels at double-column width: every panel shares the legend under the figure, and
the p axes span six decades, which stay legible at about two inches.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.errors import QgpError
from qgp.readout.summary import summary_ref
from qgp.settings import CircuitSettings
from qgp.sweeps.figures.data import (
    _ORACLE_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _fmt,
    _one,
    _Row,
    _setting,
    _short,
    _Skip,
    _varying_axes,
    _with,
    point_value,
)
from qgp.sweeps.figures.model import MEAN_TARGET, VARIANCE_TARGET, config_from_document
from qgp.sweeps.figures.style import _Figure, _Panel

#: The swept rate: depolarising λ after each two-qubit gate (the axis and its summary value).
AXIS = "gate_noise.two_qubit"
_P = summary_ref("gate_noise", "two_qubit")
_GATES = summary_ref("gate_noise", "two_qubit_gates_mean_circuit")
_NOISE_METHOD = summary_ref("gate_noise", "method")
_TRAJECTORIES = summary_ref("gate_noise", "trajectories")
_ONE_QUBIT = summary_ref("gate_noise", "one_qubit")
_READOUT = summary_ref("gate_noise", "readout")
_METHOD = summary_ref("method")
_DEGREE = summary_ref("polynomial_degree")
_PRIOR_MEAN = summary_ref("prior_mean")
_MEAN = SUMMARY["mean_rel_rmse"]
_VARIANCE = SUMMARY["variance_rel_rmse"]
_N_TEST = SUMMARY["n_test"]
#: Settings a line's label names (method, oracle, precision knob) and the swept rate: not extras.
_CONSUMED = (AXIS, "circuit.clock_qubits", *_ORACLE_KEYS)
#: Double-column width (inches): three panels in one row.
DOUBLE_COLUMN_WIDTH = 7.0
#: The rules of thumb of panel (c) are drawn from a third of the smallest gate count to three times the largest.
_REFERENCE_MARGIN = 3.0
_REFERENCE_POINTS = 8
_PSTAR = "p*"
#: Legend labels of the references begin with a digit or a capital before Q, so the figure legend
#: (sorted naturally, style._draw) lists them before the methods' lines.
_GP_LABEL = "GP posterior sd / RMS centred mean (exact GP)"
_FLOOR = "noiseless floor (p = 0)"
_PSTAR_RULE = (
    f"derived:{_MEAN} = {MEAN_TARGET!r} (the target) at x = p*, its first crossing: the smallest stored p > 0 with "
    f"{_MEAN} > {MEAN_TARGET!r} (p₂, error e₂) and the next smaller stored p > 0 (p₁, e₁ <= {MEAN_TARGET!r}), "
    f"log–log linear interpolation log p* = log p₁ + (log {MEAN_TARGET!r} − log e₁)(log p₂ − log p₁)/(log e₂ − log e₁) "
    "(means over seeds; the listed points are the two rates)"
)
_PSTAR_C_RULE = (
    f"derived:p*, the {AXIS} at which {_MEAN} first crosses {MEAN_TARGET!r} (panel mean, log–log interpolation "
    "between the two listed rates), against the line's two-qubit gate count"
)
_GP_RULE = (
    "classical:RMS over test points of √variance_exact / RMS over test points of (mean_exact − prior_mean): the "
    "exact GP's posterior standard deviation in the units of mean_rel_rmse, recomputed from the stored config "
    "(qgp.classical, Rasmussen & Williams Alg. 2.1); drawn across the panel"
)
#: Panel (c)'s rules of thumb, p = scale/gates: legend text, formula (y_name), scale. The 1% line first, so it
#: is dotted like the 1% targets of (a) and (b) (style._draw cycles the reference line styles per panel).
_RULES = (
    (f"{MEAN_TARGET:.0%} of runs hit: p = {MEAN_TARGET:g}/gates",
     (f"reference:p = {MEAN_TARGET!r}/x, x = {_GATES} (about {MEAN_TARGET:.0%} of runs with a two-qubit error; "
      "not fitted)"), MEAN_TARGET),
    ("One error per run: p = 1/gates (rule of thumb)",
     f"reference:p = 1/x, x = {_GATES} (rule of thumb: about one error per run; not fitted)", 1.0),
)
_NOISE_MODELS = {
    "effective": "the effective per-block model (qgp.readout.noise_effective: a depolarising channel after each "
                 "block of the gate form, sampled by trajectories, the error-free part weighted exactly)",
    "trajectories": "gate-level trajectories of the gate form",
    "density_matrix": "the exact density matrix of the gate form",
}


# -- what a point is -----------------------------------------------------------------------------


def _settings(p) -> CircuitSettings:
    """The point's circuit settings, as far as its algorithm and label need them (from its summary)."""
    default = CircuitSettings()
    return CircuitSettings(
        method=point_value(p, _METHOD) or default.method,
        evolution=point_value(p, SUMMARY["evolution"]) or default.evolution,
        encoding=point_value(p, SUMMARY["encoding"]) or default.encoding,
        trotter_steps=point_value(p, "config:circuit.trotter_steps"),
        trotter_order=point_value(p, "config:circuit.trotter_order"),
    )


def _line(p) -> tuple[str, str]:
    """The line as one series part: the method's label and its accuracy setting — the clock size for an
    algorithm with a clock register, else the polynomial's target error (or its degree)."""
    s = _settings(p)
    algorithm = algorithm_of(s)
    label = algorithm.label(s)
    if algorithm.uses_clock:
        label += f", c = {point_value(p, SUMMARY['clock_qubits'])}"
    else:
        target = point_value(p, "config:circuit.target_error")
        label += f", ε = {target:g}" if target is not None else f", degree {point_value(p, _DEGREE)}"
    return ("line", label)


def _extras_parts(p, extras: Sequence[str]) -> tuple:
    """The varying axes the figure does not consume, as series parts: no two settings share a line."""
    return tuple((k, f"{_short(k)} = {_fmt(p.axes.get(k))}") for k in extras)


# -- p* ------------------------------------------------------------------------------------------


def loglog_crossing(p1: float, e1: float, p2: float, e2: float, target: float) -> float:
    """The p at which the straight line through (log p₁, log e₁) and (log p₂, log e₂) reaches ``target``."""
    t = (math.log(target) - math.log(e1)) / (math.log(e2) - math.log(e1))
    return math.exp(math.log(p1) + t * (math.log(p2) - math.log(p1)))


def _crossing(rows: Sequence[_Row], target: float) -> tuple[_Row, _Row] | str:
    """The two measured rows (p > 0, sorted by p) around the first crossing of ``target``, or why there is none."""
    above = [i for i, r in enumerate(rows) if r.y > target]
    if not above:
        return f"within {target:.0%} up to p = {rows[-1].x:g}"
    i = above[0]
    if i == 0:
        return f"above {target:.0%} already at the smallest simulated p = {rows[0].x:g}"
    if rows[i - 1].y <= 0:
        return f"error 0 at p = {rows[i - 1].x:g}: no log–log interpolation"
    return rows[i - 1], rows[i]


# -- the exact GP's own spread -------------------------------------------------------------------


def _gp_spread(pts) -> tuple[float, list[int]] | str:
    """(RMS √variance_exact / RMS(mean_exact − prior_mean), grid indices) of the exact GP the points share,
    recomputed from their stored config; or why it is left out."""
    groups: dict[str, list] = {}
    for p in pts:
        key = json.dumps({s: p.config.get(s) for s in ("data", "kernel", "noise")}, sort_keys=True, default=str)
        groups.setdefault(key, []).append(p)
    if len(groups) != 1:
        return f"the points describe {len(groups)} different GP problems"
    from qgp.classical.problem import problem_from_config

    try:
        problem = problem_from_config(config_from_document(pts[0].config))
        exact = problem.exact.predict(problem.X_test)
    except (QgpError, OSError, KeyError, TypeError, ValueError) as exc:
        return f"cannot reload the data the store names ({exc})"
    centred = exact.mean - problem.y_offset
    for p in pts:  # the recomputed GP is the one the runs compared against
        prior, n_test = point_value(p, _PRIOR_MEAN), point_value(p, _N_TEST)
        if n_test != problem.n_test or prior is None or not math.isclose(prior, problem.y_offset, rel_tol=1e-9, abs_tol=1e-12):
            return "the recomputed exact GP differs from the stored runs' (data files changed?)"
    value = math.sqrt(float(np.mean(exact.variance_latent))) / math.sqrt(float(np.mean(centred**2)))
    return value, [p.grid_index for p in pts]


# -- the figure ----------------------------------------------------------------------------------


def _flat(panel: str, series, y_name: str, y: float, x_lo: float, x_hi: float, source: str, indices=()) -> list[_Row]:
    """A horizontal line over [x_lo, x_hi] as its two end rows."""
    return [_one(panel, series, _P, x, y_name, y, source, indices) for x in (x_lo, x_hi)]


def _caption_rates(pts) -> str:
    methods = {point_value(p, _NOISE_METHOD) for p in pts}
    trajectories = {point_value(p, _TRAJECTORIES) for p in pts}
    model = "; ".join(_NOISE_MODELS.get(m, f"noise method {m}") for m in sorted(methods, key=str))
    if methods <= {"effective", "trajectories"} and len(trajectories) == 1:
        model += f", {next(iter(trajectories))} trajectories per circuit"
    others = {(point_value(p, _ONE_QUBIT) or 0.0, point_value(p, _READOUT) or 0.0) for p in pts}
    if others == {(0.0, 0.0)}:
        what = "two-qubit depolarising noise only (one-qubit gates and read-out error-free)"
    else:
        what = "two-qubit depolarising noise swept, with one-qubit/read-out error rates " + ", ".join(
            f"{a:g}/{b:g}" for a, b in sorted(others))
    n_test = {point_value(p, _N_TEST) for p in pts}
    tests = f"{next(iter(n_test))} test points" if len(n_test) == 1 else "test points per run as stored"
    return f"Simulated with {model}; {what}; {tests}."


def _fig9(points) -> _Figure:
    pts = [p for p in _with(points, _MEAN) if point_value(p, _P) is not None and point_value(p, _METHOD)]
    rates = {float(p.axes[AXIS]) for p in pts if isinstance(p.axes.get(AXIS), (int, float)) and p.axes[AXIS] > 0}
    if AXIS not in _varying_axes(pts) or len(rates) < 2:
        raise _Skip(f"needs a {AXIS} axis with at least two positive rates ([gate_noise] in the config) and "
                    "mean_rel_rmse in the summary")
    extras = [k for k in _varying_axes(pts) if k not in _CONSUMED and k not in SEED_KEYS]

    def line(p) -> tuple:
        return (_line(p),) + _extras_parts(p, extras)

    noisy = [p for p in pts if point_value(p, _P) > 0]
    clean = [p for p in pts if point_value(p, _P) == 0]
    x_lo, x_hi = min(point_value(p, _P) for p in noisy), max(point_value(p, _P) for p in noisy)
    dropped: list[str] = []
    notes: list[str] = []

    def measured(panel, y_name):
        return _aggregate(noisy, panel=panel, x_name=_P, y_name=y_name, series=line, extras=(), dropped=dropped)

    def floors(panel, y_name):
        rows = _aggregate(clean, panel=panel, x_name=_P, y_name=y_name, series=line, extras=(), dropped=dropped)
        rule = f"derived:{y_name} at {_P} = 0 (the line's noiseless floor; mean over seeds), drawn across the panel"
        return [replace(r, series=r.series + (("quantity", _FLOOR),), x=None, y_name=rule, source="derived") for r in rows]

    # Row order sets the styles (style._Styles, first seen first): a line (solid, filled), then its p*
    # (hollow), then its floor (a dotted horizontal line in the line's colour).
    lines_mean = measured("mean", _MEAN)
    by_line: dict[tuple, list[_Row]] = {}
    for r in lines_mean:
        by_line.setdefault(r.series, []).append(r)
    floor_mean = {r.series[:-1]: r for r in floors("mean", _MEAN)}
    marks, marks_c, no_mark = [], [], []
    for series, rows in by_line.items():
        rows.sort(key=lambda r: r.x)
        name = dict(series)["line"]
        floor = floor_mean.get(series)
        if floor is not None and floor.y > MEAN_TARGET:
            no_mark.append(f"{name} (noiseless floor {floor.y:.2%} above {MEAN_TARGET:.0%})")
            continue
        around = _crossing(rows, MEAN_TARGET)
        if isinstance(around, str):
            no_mark.append(f"{name} ({around})")
            continue
        lo, hi = around
        pstar = loglog_crossing(lo.x, lo.y, hi.x, hi.y, MEAN_TARGET)
        indices = lo.grid_indices + hi.grid_indices
        mark_series = series + (("quantity", _PSTAR),)
        marks.append(_one("mean", mark_series, _P, pstar, _PSTAR_RULE, MEAN_TARGET, "derived", indices))
        gates = {point_value(p, _GATES) for p in pts if p.grid_index in indices}
        if len(gates) != 1 or None in gates:
            notes.append(f"{name}: two-qubit gate counts {sorted(gates, key=str)} differ around p*; left out of panel (c)")
            continue
        marks_c.append(_one("pstar", mark_series, _GATES, float(next(iter(gates))), _PSTAR_C_RULE, pstar, "derived", indices))

    rows: list[_Row] = lines_mean + marks + list(floor_mean.values())
    rows += _flat("mean", (("quantity", f"{MEAN_TARGET:.0%} target"),),
                  f"reference:y = {MEAN_TARGET!r} (the target relative RMSE of the mean)", MEAN_TARGET, x_lo, x_hi, "reference")
    gp = _gp_spread(pts)
    if isinstance(gp, str):
        notes.append(f"the exact GP's posterior spread is not drawn: {gp}")
    else:
        rows += _flat("mean", (("quantity", _GP_LABEL),), _GP_RULE, gp[0],
                      x_lo, x_hi, "classical", gp[1])
    rows += measured("variance", _VARIANCE) + floors("variance", _VARIANCE)
    rows += _flat("variance", (("quantity", f"{VARIANCE_TARGET:.0%} target"),),
                  f"reference:y = {VARIANCE_TARGET!r} (the target relative RMSE of the variance)", VARIANCE_TARGET,
                  x_lo, x_hi, "reference")
    panels = [
        _Panel("mean", "two-qubit depolarising p", "mean: relative RMSE", "log", "log"),
        _Panel("variance", "two-qubit depolarising p", "latent variance: relative RMSE", "log", "log"),
    ]
    if marks_c:
        all_gates = [float(g) for g in (point_value(p, _GATES) for p in pts) if g]
        grid = [float(x) for x in np.geomspace(min(all_gates) / _REFERENCE_MARGIN, max(all_gates) * _REFERENCE_MARGIN,
                                               _REFERENCE_POINTS)]
        rows += marks_c
        for text, y_name, scale in _RULES:
            rows += [_one("pstar", (("quantity", text),), _GATES, x, y_name, scale / x, "reference") for x in grid]
        panels.append(_Panel("pstar", "two-qubit gates, Hadamard-test circuit", f"p* (mean error = {MEAN_TARGET:.0%})",
                             "log", "log"))
    else:
        notes.append(f"no line crosses {MEAN_TARGET:.0%}: panel (c) left out")
    if no_mark:
        notes.append(f"no p* (mean error crossing {MEAN_TARGET:.0%}) for {'; '.join(no_mark)}")

    products = "; ".join(f"{dict(r.series)['line']}: p* = {r.y:.2g}, p*·gates = {r.x * r.y:.2g}" for r in marks_c)
    gp_text = (" The solid line without markers in (a) is the exact GP's own posterior spread in the same "
               "metric: RMS over test points of the exact posterior standard deviation √variance_exact over the RMS of "
               "the centred exact mean (recomputed from the stored config).") if not isinstance(gp, str) else (
               " The exact GP's posterior spread is not drawn (see notes).")
    caption = (
        "How much gate noise quantum GP inference tolerates: the relative RMSE against the exact GP of (a) the quantum "
        "mean and (b) the latent variance, against the depolarising parameter p after each two-qubit gate "
        "(ρ → (1 − p)ρ + p·I/4), one line per inversion method and accuracy setting (c: clock qubits of phase "
        "estimation; ε: QSVT's target polynomial error), p > 0 on the log axes. Dotted horizontal lines in a line's "
        "colour: its noiseless floor, the same circuits at p = 0. Grey: the 1% target." + gp_text + " Hollow markers: "
        "p*, where a line first crosses 1%, interpolated log–log between the two simulated rates around the crossing"
        + (f" ({products})" if products else "")
        + ("; lines without one are listed in the notes" if no_mark else "")
        + ". (c) p* against the two-qubit gate count of the Hadamard-test circuit of the mean (summary "
        "two_qubit_gates_mean_circuit), beside p = 1/gates (rule of thumb: about one error per run) and p = 0.01/gates "
        "(about 1% of runs hit by an error), neither fitted. " + _caption_rates(pts) + " Trajectory sampling error is not "
        "drawn (one noise seed per point; each run's largest per-test-point standard error is in its summary, "
        "gate_noise.mean_trajectory_se_max). These are classical simulations of noisy circuits, not hardware runs."
    )
    size = (DOUBLE_COLUMN_WIDTH, 3.4)
    return _Figure("fig9_gate_noise", rows, panels, (1, len(panels)), size, caption, notes + dropped, legend="figure",
                   setting=_setting(pts, {"c"}))
