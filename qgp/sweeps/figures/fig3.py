"""Fig. 3 (``fig3_success_probability``): post-selection success probability against κ, beside 1/κ² and 1/κ."""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np

from qgp.sweeps.figures.data import (
    _NOISE_KEYS,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _distinct,
    _noise_axis,
    _one,
    _oracle,
    _Row,
    _setting,
    _Skip,
    _varying_axes,
    _with,
)
from qgp.sweeps.figures.style import SINGLE_COLUMN, _Figure, _Panel


def _references(kappas: Iterable[float], panel: str, power: int) -> list[_Row]:
    name = "1/κ² bound (HHL 2009)" if power == 2 else "1/κ bound"
    return [
        _one(panel, (("quantity", name),), SUMMARY["condition_number"], k, f"reference:1/kappa^{power}", 1.0 / k**power, "reference")
        for k in sorted(set(kappas))
    ]


def loglog_slope(x: Sequence[float], y: Sequence[float]) -> float | None:
    """Least-squares slope of log y against log x over the positive pairs (None with fewer than 2)."""
    pairs = [(a, b) for a, b in zip(x, y) if a is not None and b is not None and a > 0 and b > 0]
    if len({a for a, _ in pairs}) < 2:
        return None
    lx, ly = np.log([a for a, _ in pairs]), np.log([b for _, b in pairs])
    return float(np.polyfit(lx, ly, 1)[0])


def _slopes_text(rows: Sequence[_Row]) -> str:
    """'−0.75 (inversion, exact …), …' for every plotted series of measured points."""
    groups: dict[tuple, list[_Row]] = {}
    for r in rows:
        if r.source != "reference":
            groups.setdefault((r.panel, r.series), []).append(r)
    parts = []
    for (panel, series), rs in groups.items():
        slope = loglog_slope([r.x for r in rs], [r.y for r in rs])
        if slope is not None:
            label = ", ".join(text for _, text in series)
            parts.append(f"{slope:.2f} ({panel}, {label})")
    return "; ".join(parts) if parts else "not available (one κ per series)"


def _fig3(points) -> _Figure:
    pts = _with(points, SUMMARY["condition_number"])
    if _noise_axis(pts) is None or len(_distinct(pts, SUMMARY["condition_number"])) < 2:
        raise _Skip("needs a noise axis (noise.target_condition or noise.variance) giving two or more condition numbers")
    consumed = {*_NOISE_KEYS, *_ORACLE_KEYS, *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS]
    series = lambda p: (_oracle(p),)  # noqa: E731
    dropped: list[str] = []
    x = SUMMARY["condition_number"]
    rows = _aggregate(pts, panel="inversion", x_name=x, y_name=SUMMARY["success_probability_inversion"],
                      series=series, extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="variance", x_name=x, y_name=SUMMARY["success_probability_variance_min"],
                       series=series, extras=extras, dropped=dropped)
    kappas = [r.x for r in rows]
    measured = list(rows)
    rows += _references(kappas, "inversion", 2) + _references(kappas, "variance", 1)
    panels = [
        _Panel("inversion", "condition number κ", "P(success), 1/λ circuit", "log", "log"),
        _Panel("variance", "condition number κ", "P(flag = 1), 1/√λ circuit", "log", "log"),
    ]
    caption = (
        "Post-selection success probability against κ: (a) the 1/λ inversion circuit on the normalised targets ŷ, "
        "P = ‖C·Ã⁻¹ŷ‖² with C the smallest admitted eigenvalue estimate, beside 1/κ² (Harrow, Hassidim & Lloyd 2009); "
        "(b) the 1/√λ variance circuit, P(flag = 1) = C·k̂*ᵀÃ⁻¹k̂*, smallest over the test points, beside 1/κ. "
        "1/κ² and 1/κ are worst-case bounds (ŷ or k̂* wholly on the largest eigenvalue; C is near the a-priori lower "
        "bound on λ_min, so they are not strict), not the expected rate: GP vectors also weigh the small eigenvalues, "
        f"and the fitted log–log slopes of the plotted points are {_slopes_text(measured)}. "
        "Where λ_min falls below what the clock resolves, C is set by the clock grid instead (qgp.circuits.inversion's filter floor) "
        "and P levels off; the error pays instead (fig. 2). Exact outcome probabilities."
    )
    return _Figure("fig3_success_probability", rows, panels, (2, 1), (SINGLE_COLUMN[0], 3.9), caption, dropped,
                   setting=_setting(pts, {"noise"}))
