"""`qgp sweep --dry-run`: what a sweep would simulate, before anything runs.

For every grid point: its config is validated and its problem built (data, kernel, σ²; no circuit),
and the simulation plan (`qgp.readout.plan.simulation_plan`) gives the strategy ``auto`` would
choose, the widest simulation's qubits, the largest memory held at once, whether it fits under the
memory cap, and the plan's cost model's seconds of simulation (a model whose constants were measured
with the numpy engine; building circuits, gate noise and resource counts are not in it). Points the
memory guard would refuse are listed with its one-line reason.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from qgp.config import parse_config
from qgp.errors import QgpError
from qgp.sweeps.grid import Sweep

__all__ = ["PointEstimate", "dry_run", "format_dry_run"]


@dataclass(frozen=True)
class PointEstimate:
    """One grid point's plan: ``refused`` is the memory guard's (or the config's) one-line reason,
    None when the point would run."""

    grid_index: int
    axes: dict
    strategy: str | None
    qubits: int | None
    bytes: int | None
    seconds: float | None
    gate_noise: bool
    refused: str | None


def dry_run(sweep: Sweep) -> list[PointEstimate]:
    """The plan of every point of ``sweep`` (nothing is simulated, no store is touched).

    Parameters
    ----------
    sweep : Sweep

    Returns
    -------
    list of PointEstimate, one per grid point in grid order
    """
    from qgp.classical.problem import problem_from_config
    from qgp.readout.plan import check_clock_qubits, simulation_plan

    out = []
    for point in sweep.points:
        estimate = None
        try:
            cfg = parse_config(dict(point.config), base_dir=Path.cwd(), source=None)
            check_clock_qubits(cfg.circuit)
            plan = simulation_plan(problem_from_config(cfg), cfg.circuit, cfg.readout)
            estimate = PointEstimate(
                point.grid_index, dict(point.axes), plan.strategy, plan.widest(), max(r.bytes for r in plan.runs()),
                plan.estimated_seconds(), cfg.gate_noise is not None, None,
            )
            plan.require()
        except QgpError as exc:
            base = estimate or PointEstimate(point.grid_index, dict(point.axes), None, None, None, None, False, None)
            estimate = replace(base, refused=str(exc))
        out.append(estimate)
    return out


def _bytes(n: int | None) -> str:
    if n is None:
        return "—"
    for unit, size in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if n >= size:
            return f"{n / size:.3g} {unit}"
    return f"{n} B"


def format_dry_run(estimates: list[PointEstimate], workers: int) -> str:
    """The table `qgp sweep --dry-run` prints: one line per point, then the totals."""
    lines = [f"{'point':>5}  {'strategy':<9} {'qubits':>6} {'memory':>10} {'est. s':>8}  axes"]
    for e in estimates:
        axes = ", ".join(f"{k}={'default' if v is None else v}" for k, v in e.axes.items())
        seconds = "—" if e.seconds is None else f"{e.seconds:.3g}" + ("+" if e.gate_noise else "")
        lines.append(
            f"{e.grid_index:>5}  {e.strategy or '—':<9} {e.qubits if e.qubits is not None else '—':>6} "
            f"{_bytes(e.bytes):>10} {seconds:>8}  {axes}" + ("  REFUSED" if e.refused else "")
        )
    run = [e for e in estimates if e.refused is None]
    total = sum(e.seconds for e in run)
    lines.append(
        f"{len(estimates)} points: {len(run)} would run, {len(estimates) - len(run)} refused; "
        f"≈ {total:.3g} s of simulation by the cost model (≈ {total / max(workers, 1):.3g} s on {workers} worker(s)); "
        "the model leaves out circuit building, resource counts and gate noise (marked +)"
    )
    if run:
        widest = max(run, key=lambda e: e.qubits)
        lines.append(f"widest point {widest.grid_index}: {widest.qubits} qubits, {_bytes(widest.bytes)} at once")
    for e in estimates:
        if e.refused:
            lines.append(f"refused point {e.grid_index}: {e.refused}")
    return "\n".join(lines)
