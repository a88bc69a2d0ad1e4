"""Reading a result store for the figures: points, the values a CSV names, aggregation over seeds,
series labels and the caption's shared settings.

A value reference is "summary:key.sub" (the summary document), "config:section.key" (the stored
config) or "axes:key" (the point's axis value). The summary columns the store keeps
(`qgp.sweeps.store.SUMMARY_COLUMNS`) are named through `SUMMARY`, built from that one table.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from qgp.circuits.algorithms import algorithm_of
from qgp.errors import QgpError
from qgp.settings import CircuitSettings
from qgp.readout.summary import summary_key
from qgp.sweeps.store import SUMMARY_COLUMNS

__all__ = ["SEED_KEYS", "SUMMARY", "load_points", "point_value"]

#: Store column → its value reference "summary:a.b" (the path in summary.json), read from the store's column table.
SUMMARY: dict[str, str] = {column: "summary:" + ".".join(path) for column, _, path in SUMMARY_COLUMNS}
#: Axes aggregated over (mean, sample std and min–max band); every other axis separates points.
SEED_KEYS = ("readout.seed",)
_NOISE_KEYS = ("noise.target_condition", "noise.variance")
_ORACLE_KEYS = (
    "circuit.method",
    "circuit.evolution",
    "circuit.encoding",
    "circuit.trotter_steps",
    "circuit.trotter_order",
    "circuit.target_error",
    "circuit.degree",
)
_SHOT_KEYS = ("readout.shots",)
_BAND = "Lines: mean over readout seeds; bands (where a seed axis varies): min–max over seeds."


# -- reading points ------------------------------------------------------------------------------


def load_points(source) -> tuple[list, str]:
    """(done points, a description) from a store path, or from a sequence of StoredPoint-likes."""
    if isinstance(source, (str, Path)):
        from qgp.sweeps.store import open_store

        with open_store(source) as store:
            points = store.points("done")
            failed = len(store.points("failed"))
            size = store.meta.get("grid_size")
        extra = f", {failed} failed and left out" if failed else ""
        return points, f"store {Path(source).name} ({len(points)} of {size} grid points done{extra})"
    points = [p for p in source if getattr(p, "status", "done") == "done" and p.summary is not None]
    return points, f"{len(points)} points"


def _dig(doc: Any, dotted: str) -> Any:
    cur = doc
    for key in dotted.split("."):
        if not isinstance(cur, Mapping) or key not in cur:
            return None
        cur = cur[key]
    return cur


def point_value(point, ref: str) -> Any:
    """The value a CSV ``x_name``/``y_name`` names: "summary:a.b", "config:section.key" or "axes:key"."""
    where, _, path = ref.partition(":")
    if where == "summary":
        summary_key(path.split(".", 1)[0])  # a reference to a key summary.json never has is a bug, not a gap
        return _dig(point.summary, path)
    if where == "config":
        return _dig(point.config, path)
    if where == "axes":
        return point.axes.get(path)
    raise QgpError(f"unknown value reference {ref!r}; use summary:…, config:… or axes:…")


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _varying_axes(points) -> list[str]:
    """Axis keys whose value differs between points, in first-seen order."""
    keys: list[str] = []
    for p in points:
        for k in p.axes:
            if k not in keys:
                keys.append(k)
    out = []
    for k in keys:
        vals = {repr(p.axes.get(k)) for p in points}
        if len(vals) > 1:
            out.append(k)
    return out


def _distinct(points, ref: str) -> list:
    vals = []
    for p in points:
        v = point_value(p, ref)
        if v is not None and v not in vals:
            vals.append(v)
    return vals


def _with(points, ref: str) -> list:
    return [p for p in points if _finite(point_value(p, ref))]


def _noise_axis(points) -> str | None:
    varying = _varying_axes(points)
    for k in _NOISE_KEYS:
        if k in varying:
            return k
    return None


def _model_side(extras: Sequence[str]) -> list[str]:
    """The extras that change A or the GP (not the circuit or read-out): for κ, s and the exact GP."""
    return [k for k in extras if not k.startswith(("circuit.", "readout."))]


class _Skip(Exception):
    """The store holds no data for this figure; the message says what is missing."""


# -- rows and aggregation ----------------------------------------------------------------------


@dataclass(frozen=True)
class _Row:
    panel: str
    series: tuple[tuple[str, str], ...]  # (part name, text); the label is built from the parts that vary
    x_name: str
    x: float | None
    y_name: str
    y: float
    y_std: float
    y_min: float
    y_max: float
    n: int
    source: str
    grid_indices: tuple[int, ...] = ()


def _stats(values: Sequence[float]) -> tuple[float, float, float, float]:
    """(mean, sample std (0 for one value), min, max); mean = fsum/n so a reader can recompute it exactly."""
    n = len(values)
    mean = math.fsum(values) / n
    std = math.sqrt(math.fsum((v - mean) ** 2 for v in values) / (n - 1)) if n > 1 else 0.0
    return mean, std, min(values), max(values)


def _one(panel, series, x_name, x, y_name, y, source, grid_indices=()) -> _Row:
    y = float(y)
    return _Row(panel, tuple(series), x_name, x, y_name, y, 0.0, y, y, 1, source, tuple(grid_indices))


def _aggregate(
    points,
    *,
    panel: str,
    x_name: str,
    y_name: str,
    series: Callable[[Any], Sequence[tuple[str, str]]],
    extras: Sequence[str],
    dropped: list[str],
) -> list[_Row]:
    """One row per (series, x, non-seed axes): the stored ``y_name`` over the seeds.

    Points are merged only when their axes differ in `SEED_KEYS` alone. ``extras`` are varying
    axes the figure does not consume; they become series parts so no two settings share a line.
    Points whose value is missing or not finite are left out and counted in ``dropped``.
    """
    groups: dict[tuple, list] = {}
    for p in points:
        x = point_value(p, x_name)
        y = point_value(p, y_name)
        if not _finite(y) or (x is not None and not _finite(x)):
            dropped.append(y_name)
            continue
        parts = tuple(series(p)) + tuple((k, f"{_short(k)} = {_fmt(p.axes.get(k))}") for k in extras)
        others = tuple(sorted((k, repr(v)) for k, v in p.axes.items() if k not in SEED_KEYS))
        groups.setdefault((parts, x, others), []).append(p)
    rows = []
    for (parts, x, _), pts in groups.items():
        vals = [float(point_value(p, y_name)) for p in pts]
        mean, std, lo, hi = _stats(vals)
        rows.append(_Row(panel, parts, x_name, x, y_name, mean, std, lo, hi, len(vals), "store", tuple(p.grid_index for p in pts)))
    return rows


def _dedupe_rows(rows: list[_Row]) -> list[_Row]:
    """Keep the first row per (panel, series, x, y_name).

    Oracle-independent quantities (κ, s, the exact GP) carry no oracle part, so a sweep over
    oracles repeats them once per oracle with the same value; one line is drawn, from the first.
    """
    seen: set = set()
    out = []
    for r in rows:
        key = (r.panel, r.series, r.x, r.y_name)
        if key not in seen:
            seen.add(key)
            out.append(r)
    return out


_SHORT = {
    "circuit.clock_qubits": "c",
    "data.n_train": "n",
    "noise.variance": "σ²",
    "noise.target_condition": "target κ",
    "kernel.support": "taper radius",
    "readout.shots": "shots",
}


def _short(key: str) -> str:
    return _SHORT.get(key, key.split(".", 1)[-1])


def _fmt(v) -> str:
    if v is None:
        return "unset"
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


# -- series labels and the caption's setting -----------------------------------------------------


def _oracle(p) -> tuple[str, str]:
    """The inversion method as one series part: its label (qgp.circuits.algorithms), with the
    polynomial's target error or degree for a method without a clock (QSVT)."""
    method = point_value(p, "summary:method") or "phase_estimation"
    settings = CircuitSettings(
        method=method,
        evolution=point_value(p, SUMMARY["evolution"]) or CircuitSettings().evolution,
        encoding=point_value(p, SUMMARY["encoding"]) or CircuitSettings().encoding,
        trotter_steps=point_value(p, "config:circuit.trotter_steps"),
        trotter_order=point_value(p, "config:circuit.trotter_order"),
    )
    algorithm = algorithm_of(settings)
    label = algorithm.label(settings)
    if not algorithm.uses_clock:
        target = point_value(p, "config:circuit.target_error")
        label += f", ε = {target:g}" if target is not None else f", degree {point_value(p, 'config:circuit.degree')}"
    return ("oracle", label)


def _shots(p) -> tuple[str, str]:
    n = point_value(p, SUMMARY["shots"])
    return ("shots", "exact probabilities" if not n else f"{int(n):,} shots")


def _labels(rows: Sequence[_Row]) -> tuple[dict[tuple, str], list[str]]:
    """Label each series by its parts that vary over the figure; return the constant parts too."""
    names: list[str] = []
    texts: dict[str, set] = {}
    for r in rows:
        for name, text in r.series:
            if name not in names:
                names.append(name)
            texts.setdefault(name, set()).add(text)
    varying = [n for n in names if len(texts[n]) > 1]
    constant = [next(iter(texts[n])) for n in names if len(texts[n]) == 1 and n not in ("quantity",)]
    labels = {}
    for r in rows:
        parts = dict(r.series)
        shown = [parts[n] for n in varying if n in parts]
        if not shown:  # nothing varies: the quantity (or the only part) names the line
            shown = [parts.get("quantity", next(iter(parts.values()), "data"))]
        label = ", ".join(shown)
        if r.source == "model":
            label += " (model)"
        labels[(r.series, r.source)] = label
    return labels, constant


def _setting(points, skip: Iterable[str] = ()) -> str:
    """The settings all ``points`` share, as caption text: n, c, kernel, noise (minus ``skip``)."""
    def same(ref):
        vals = {repr(point_value(p, ref)) for p in points}
        return point_value(points[0], ref) if len(vals) == 1 else None

    parts = []
    if "n" not in skip and same(SUMMARY["n_train"]) is not None:
        parts.append(f"n = {same(SUMMARY['n_train'])} training points")
    if "c" not in skip and same(SUMMARY["clock_qubits"]) is not None:
        parts.append(f"c = {same(SUMMARY['clock_qubits'])} clock qubits")
    if "kernel" not in skip:
        fam, ls = (same(f"config:kernel.{k}") for k in ("family", "lengthscale"))
        # Stores written before the rename hold the signal variance under its old key, "amplitude".
        s2 = same("config:kernel.signal_variance") or same("config:kernel.amplitude")
        if fam is not None and ls is not None and s2 is not None:
            sup = same("config:kernel.support")
            parts.append(f"{fam} kernel, lengthscale {_fmt(ls)}, signal variance {_fmt(s2)}" + (f", taper radius {_fmt(sup)}" if sup else ""))
    if "noise" not in skip:
        tc, var = same("config:noise.target_condition"), same("config:noise.variance")
        if tc is not None:
            parts.append(f"σ² set for κ = {_fmt(tc)}")
        elif var is not None:
            parts.append(f"σ² = {_fmt(var)}")
    return "; ".join(parts)
