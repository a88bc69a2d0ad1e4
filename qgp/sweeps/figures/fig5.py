"""Fig. 5 (``fig5_taper_sparsity``): sparsity, κ and GP accuracy against the taper radius."""

from __future__ import annotations

from qgp.sweeps.figures.data import (
    _BAND,
    _ORACLE_KEYS,
    _SHOT_KEYS,
    SEED_KEYS,
    SUMMARY,
    _aggregate,
    _dedupe_rows,
    _model_side,
    _one,
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


def _fig5(points) -> _Figure:
    if "kernel.support" not in _varying_axes(points):
        raise _Skip("needs a kernel.support axis (taper radii; {} leaves the kernel untapered)")
    pts = _with(points, SUMMARY["sparsity"])
    consumed = {"kernel.support", *_SHOT_KEYS}
    extras = [k for k in _varying_axes(pts) if k not in consumed and k not in SEED_KEYS and k not in _ORACLE_KEYS]
    x = "config:kernel.support"
    dropped: list[str] = []

    def q(name, with_oracle=True):
        return lambda p: (("quantity", name),) + ((_oracle(p), _shots(p)) if with_oracle else ())

    rows: list[_Row] = []
    gp_extras = _model_side(extras)
    rows += _aggregate(pts, panel="sparsity", x_name=x, y_name=SUMMARY["sparsity"], series=q("s", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="kappa", x_name=x, y_name=SUMMARY["condition_number"], series=q("κ", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name=SUMMARY["test_rmse_exact"], series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="rmse", x_name=x, y_name=SUMMARY["test_rmse_quantum"], series=q("quantum"), extras=extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name=SUMMARY["test_nlpd_exact"], series=q("exact GP", False), extras=gp_extras, dropped=dropped)
    rows += _aggregate(pts, panel="nlpd", x_name=x, y_name=SUMMARY["test_nlpd_quantum"], series=q("quantum"), extras=extras, dropped=dropped)
    rows = _dedupe_rows(rows)
    if not any(r.x is not None for r in rows):
        raise _Skip("needs at least one tapered point (a kernel.support value)")
    ns = sorted({int(point_value(p, SUMMARY["n_train"])) for p in pts})
    xs = sorted({r.x for r in rows if r.x is not None})
    for n in ns:
        rows += [_one("sparsity", (("quantity", f"n = {n} (dense)"),), x, r, f"reference:n_train = {n}", n, "reference") for r in xs]
    panels = [
        _Panel("sparsity", "taper radius (kernel.support)", "sparsity s", "log2", "linear", integer_y=True),
        _Panel("kappa", "taper radius (kernel.support)", "condition number κ", "log2", "log"),
        _Panel("rmse", "taper radius (kernel.support)", "test RMSE", "log2", "linear"),
        _Panel("nlpd", "taper radius (kernel.support)", "test NLPD", "log2", "linear"),
    ]
    caption = (
        "The sparsity lever: the kernel multiplied by the compactly supported Wendland taper φ₃,₁(r/radius) "
        "(Furrer, Genton & Nychka 2006). (a) sparsity s of A (largest count of non-zeros in a row; dotted: n, the dense "
        "value), (b) κ, (c) test RMSE and (d) test NLPD of the exact GP and of the quantum estimates, against the taper "
        f"radius; dotted horizontal lines: the untapered kernel. {_BAND}"
    )
    return _Figure("fig5_taper_sparsity", rows, panels, (4, 1), (SINGLE_COLUMN[0], 6.2), caption, dropped, legend="figure",
                   setting=_setting(pts))
