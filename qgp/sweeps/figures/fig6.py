"""Fig. 6 (``fig6_circuit_cost``): CX count and depth of the 1/λ circuit against system and clock qubits."""

from __future__ import annotations

from typing import Any

from qgp.readout.summary import summary_ref
from qgp.sweeps.figures.data import (
    _NOISE_KEYS,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _distinct,
    _finite,
    _oracle,
    _Row,
    _setting,
    _Skip,
    _varying_axes,
    _with,
    point_value,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel

_CX = summary_ref("resources", "inverse", "gate_counts", "u_cx", "cx")
_DEPTH = summary_ref("resources", "inverse", "gate_counts", "u_cx", "depth")
_SKIPPED = summary_ref("resources", "inverse", "gate_level_skipped")
_DEPENDENT = summary_ref("resources", "inverse", "synthesis_dependent")
_CX_LABEL = "CX count (gates)"
_DEPTH_LABEL = "depth (gate layers)"
#: Drawn under the figure: every symbol its axes and legend use.
FOOTNOTE = "\n".join((
    r"$m$: system qubits, $m = \lceil\log_2 n\rceil$ for $n$ training points ($A$ padded to $2^m\times2^m$).",
    r"$c$: clock qubits of phase estimation.",
    r"†: synthesis-dependent count: a dense controlled unitary (the exact $e^{iAt}$ oracle, the dilation encoding) "
    r"decomposed by qiskit's generic synthesis; it says how a generic matrix compiles, not what the algorithm needs.",
    r"CX count and depth: after transpiling to the {u, cx} basis at optimisation level 0.",
))


def _most_common_slice(points, fixed: str, varied: str):
    """The value of ``fixed`` at which ``varied`` takes the most distinct values.

    Ties go to the value with the most points (so the most oracles share the slice), then the largest.
    """
    counts: dict[Any, set] = {}
    sizes: dict[Any, int] = {}
    for p in points:
        v = point_value(p, fixed)
        counts.setdefault(v, set()).add(point_value(p, varied))
        sizes[v] = sizes.get(v, 0) + 1
    return max(counts, key=lambda v: (len(counts[v]), sizes[v], v))


def _fig6(points) -> _Figure:
    pts = [p for p in _with(points, _CX) if _finite(point_value(p, _DEPTH))]
    skipped = [p for p in points if point_value(p, _SKIPPED)]
    notes = [f"gate counts skipped at {len(skipped)} point(s) (over the synthesis limit)"] if skipped else []
    if not pts:
        raise _Skip("needs gate counts (summary resources.inverse.gate_counts) at some points")
    m_values = _distinct(pts, SUMMARY["system_qubits"])
    c_values = _distinct(pts, SUMMARY["clock_qubits"])
    if len(m_values) < 2 and len(c_values) < 2:
        raise _Skip("needs two or more system sizes (data.n_train axis) or clock-qubit counts (circuit.clock_qubits axis)")
    consumed = {"data.n_train", "circuit.clock_qubits", *_ORACLE_KEYS, *_SHOT_KEYS, *_NOISE_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]

    def series(p):
        oracle = _oracle(p)
        dependent = bool(point_value(p, _DEPENDENT))
        return ((oracle[0], oracle[1] + (" †" if dependent else "")),)

    rows: list[_Row] = []
    panels: list[_Panel] = []
    dropped: list[str] = []
    if len(m_values) >= 2:
        c_ref = _most_common_slice(pts, SUMMARY["clock_qubits"], SUMMARY["system_qubits"])
        sl = [p for p in pts if point_value(p, SUMMARY["clock_qubits"]) == c_ref]
        for key, y, lab in (("cx vs m", _CX, _CX_LABEL), ("depth vs m", _DEPTH, _DEPTH_LABEL)):
            rows += _aggregate(sl, panel=key, x_name=SUMMARY["system_qubits"], y_name=y, series=series, extras=extras, dropped=dropped)
            panels.append(_Panel(key, f"system qubits $m$ ($c$ = {c_ref})", lab, "linear", "log", integer_x=True, legend=key == "cx vs m"))
    if len(c_values) >= 2:
        m_ref = _most_common_slice(pts, SUMMARY["system_qubits"], SUMMARY["clock_qubits"])
        sl = [p for p in pts if point_value(p, SUMMARY["system_qubits"]) == m_ref]
        for key, y, lab in (("cx vs c", _CX, _CX_LABEL), ("depth vs c", _DEPTH, _DEPTH_LABEL)):
            rows += _aggregate(sl, panel=key, x_name=SUMMARY["clock_qubits"], y_name=y, series=series, extras=extras, dropped=dropped)
            panels.append(_Panel(key, f"clock qubits $c$ ($m$ = {m_ref})", lab, "linear", "log", integer_x=True,
                                 legend=key == "cx vs c" and len(m_values) < 2))
    order = ["cx vs m", "cx vs c", "depth vs m", "depth vs c"]
    panels.sort(key=lambda p: order.index(p.key))
    grid = (2, 2) if len(panels) == 4 else (2, 1)
    caption = (
        "Circuit cost of the 1/λ inversion circuit (phase estimation, rotation, uncompute; the mean's circuit): "
        "CX count and depth after transpiling to the ['u', 'cx'] basis at optimisation level 0 (qgp.circuits.resources), against "
        "system qubits m and clock qubits c, per phase oracle and block encoding. Symbols (also defined on the figure): "
        "m = ⌈log₂ n⌉ system qubits for n training points (A padded to 2^m × 2^m); c clock qubits of phase estimation; "
        "† marks synthesis-dependent counts (dense controlled unitaries: the exact e^(iAt) oracle and the dilation "
        "encoding), which say how qiskit decomposes a generic matrix, not what an algorithm needs; depth in gate layers."
    )
    return _Figure("fig6_circuit_cost", rows, panels, grid, (SINGLE_COLUMN[0], 3.5 if grid == (2, 2) else 3.3), caption,
                   notes + dropped, legend="below", setting=_setting(pts, {"n", "c", "noise", "kernel"}), footnote=FOOTNOTE)
