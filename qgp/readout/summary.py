"""The summary document's schema: every key of ``summary.json``, its type, its meaning, the sweep
store's column that keeps it and whether the tidy CSV of ``qgp results`` carries it.

One table, read by `InferenceResult.summary` (which checks its output against it), the report that
adds provenance, resources and versions (`qgp.reports.run.summary_document`), the store's columns
(`qgp.sweeps.store.SUMMARY_COLUMNS`), the tidy CSV (`qgp.sweeps.export`) and the figures' value
references (``"summary:a.b"``, checked by `summary_ref`). ``docs/summary.md`` is generated from it
(`schema_markdown`) and a test keeps the two equal.
"""

from __future__ import annotations

import numbers
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from qgp.errors import QgpError

__all__ = [
    "SummaryKey",
    "SUMMARY_KEYS",
    "summary_key",
    "summary_ref",
    "store_columns",
    "table_leaves",
    "check_summary",
    "schema_markdown",
]

Kind = Literal["int", "float", "str", "bool", "record", "list"]
Stage = Literal["inference", "report"]

_SQL: dict[str, str] = {"int": "INTEGER", "float": "REAL", "str": "TEXT", "bool": "INTEGER"}
_PYTHON: dict[str, tuple[type, ...]] = {
    "int": (numbers.Integral,),
    "float": (numbers.Real,),
    "str": (str,),
    "bool": (bool, np.bool_),
    "record": (Mapping,),
    "list": (list, tuple),
}


@dataclass(frozen=True)
class SummaryKey:
    """One key of ``summary.json``.

    ``path`` is its place in the document (a leaf of a record has two parts); ``column`` the sweep
    store's column that copies it (None: only in the stored document); ``table`` whether the tidy
    CSV carries it (a record is flattened to ``key.sub`` columns, leaving out the names in
    ``table_skip`` at any depth); ``optional`` keys appear only when their condition holds
    (``when``); ``nullable`` keys may be null; ``stage`` says who writes it (inference or the report
    around it).
    """

    path: tuple[str, ...]
    kind: Kind
    doc: str
    column: str | None = None
    table: bool = True
    table_skip: frozenset[str] = frozenset()
    optional: bool = False
    when: str = ""
    nullable: bool = False
    stage: Stage = "inference"

    @property
    def name(self) -> str:
        return ".".join(self.path)

    @property
    def sql_type(self) -> str:
        if self.kind not in _SQL:
            raise QgpError(f"summary key {self.name} is a {self.kind}; only scalars have a store column")
        return _SQL[self.kind]

    def accepts(self, value: Any) -> bool:
        """Whether ``value`` has this key's type (bool is not an int here; null where nullable)."""
        if value is None:
            return self.nullable
        if isinstance(value, (bool, np.bool_)) and self.kind != "bool":
            return False
        return isinstance(value, _PYTHON[self.kind])


def _k(path: str, kind: Kind, doc: str, **kw) -> SummaryKey:
    return SummaryKey(tuple(path.split(".")), kind, doc, **kw)


_TESTS = "the config gives test targets ([data] test with a target column)"
_NOISE = "the config has a [gate_noise] section"

#: Every key of summary.json, in the document's order. Leaves of a record follow the record.
SUMMARY_KEYS: tuple[SummaryKey, ...] = (
    _k("n_train", "int", "training points n", column="n_train"),
    _k("n_test", "int", "test points", column="n_test"),
    _k("system_qubits", "int", "system register m = ⌈log₂ n⌉", column="system_qubits"),
    _k("clock_qubits", "int", "clock register c of phase estimation (0 for QSVT)", column="clock_qubits"),
    _k("ancilla_qubits", "int", "flag qubit plus block-encoding qubits", column="ancilla_qubits"),
    _k("block_qubits", "int", "block-encoding ancillas (0 without a block encoding)"),
    _k("total_qubits", "int", "qubits of the inversion circuit", column="total_qubits"),
    _k("condition_number", "float", "κ of A = K + σ²I (exact)", column="condition_number"),
    _k("condition_number_bound", "float", "the a-priori bound on κ the circuit is built for"),
    _k("effective_condition_number", "float", "κ seen through the phase oracle's eigenvalue scale (QSVT: κ_b = α/λ_lo, "
       "what the polynomial is built for)"),
    _k("sparsity", "int", "largest count of non-zeros in a row of A", column="sparsity"),
    _k("noise_variance", "float", "σ² used", column="noise_variance"),
    _k("noise_source", "str", "where σ² came from (config value or target condition number)"),
    _k("encoding", "str", "block encoding used (null: the method uses none)", column="encoding", nullable=True),
    _k("evolution", "str", "phase oracle (registry key; null: the method has no phase estimation)", column="evolution",
       nullable=True),
    _k("method", "str", "inversion algorithm: phase_estimation or qsvt ([circuit] method)"),
    _k("polynomial_degree", "int", "degree of the QSVT inversion polynomial (null: phase estimation)", nullable=True),
    _k("polynomial_degree_inverse_sqrt", "int", "degree of the QSVT variance polynomial (null: phase estimation)",
       nullable=True),
    _k("block_encoding_calls", "int", "oracle calls of the inverse circuit: block-encoding calls (QSVT) or "
       "controlled oracle applications, uncompute included (phase estimation)"),
    _k("polynomial_max_error", "float", "measured relative error of the inversion polynomial on the a-priori range "
       "(null: phase estimation)", nullable=True),
    _k("polynomial_scale", "float", "s: the inversion polynomial is ≈ s·λ_lo/λ on the a-priori range "
       "(null: phase estimation)", nullable=True),
    _k("shots", "int", "shots per estimated probability (0: exact probabilities)", column="shots"),
    _k("seed", "int", "seed of the shot sampler", column="seed"),
    _k("strategy", "str", "simulation strategy that ran (amortised, per-point or hybrid)", column="strategy"),
    _k("strategy_reason", "str", "why: the config's choice, or what auto's cost model chose over the others",
       table=False),
    _k("simulated_form", "str", "which form of the circuits was simulated"),
    _k("engine", "str", "statevector engine that ran: numpy, aer or numpy+aer (shots are Aer's)"),
    _k("prior_mean", "float", "constant subtracted from the targets before inference"),
    _k("prior_mean_note", "str", "what prior_mean means", table=False),
    _k("variance_kind", "str", "variances are latent (of f)", table=False),
    _k("mean_max_abs_error", "float", "max |mean_quantum − mean_exact|", column="mean_max_abs_error"),
    _k("variance_max_abs_error", "float", "max |variance_quantum − variance_exact|", column="variance_max_abs_error"),
    _k("variance_hadamard_max_abs_error", "float", "the same for the Hadamard-test variance"),
    _k("mean_rel_rmse", "float", "RMSE of the mean error over RMS of the centred exact mean", column="mean_rel_rmse"),
    _k("variance_rel_rmse", "float", "RMSE of the variance error over RMS of the exact variance",
       column="variance_rel_rmse"),
    _k("negative_variances", "int", "test points whose quantum variance is ≤ 0", column="negative_variances"),
    _k("success_probability_min", "float", "least Hadamard-test success probability over test points",
       column="success_probability_min"),
    _k("success_probability_mean", "float", "mean Hadamard-test success probability",
       column="success_probability_mean"),
    _k("success_probability_inversion", "float", "P(flag = 1) of the inversion on the training targets",
       column="success_probability_inversion"),
    _k("success_probability_variance_min", "float", "least P(flag = 1) of the variance circuit",
       column="success_probability_variance_min"),
    _k("success_probability_variance_mean", "float", "mean P(flag = 1) of the variance circuit",
       column="success_probability_variance_mean"),
    _k("post_selection_failures", "int", "shot batches with no post-selected outcome (null without shots)",
       nullable=True),
    _k("scale_inverse", "float", "factor that turns the inverse circuit's amplitude into A⁻¹"),
    _k("scale_inverse_sqrt", "float", "the same for the inverse-square-root circuit"),
    _k("alpha", "float", "subnormalisation α of the block encoding (null: the method uses none)", nullable=True),
    _k("evolution_time", "float", "phase-estimation time t (null for the walk)", nullable=True),
    _k("filter_floor", "float", "smallest eigenvalue the filter inverts (QSVT: λ_lo, the polynomial's range)"),
    _k("filtered_clock_values", "int", "clock values the filter leaves at zero"),
    _k("filter_model_max_abs_difference", "float", "closed-form model against the circuits (null when not run)",
       nullable=True),
    _k("error_budget", "record", "error against the exact GP, one imperfection added at a time",
       table_skip=frozenset({"stages", "increments", "note"})),
    _k("shots_needed", "record", "shots (plain) and oracle calls (amplitude estimation) for a target error",
       table_skip=frozenset({"note"})),
    _k("elapsed_seconds", "float", "wall time of the inference (measured)"),
    _k("timings", "record", "wall time per phase (measured)"),
    _k("simulation_runs", "list", "the simulator runs behind the numbers"),
    _k("gate_noise", "record", "the answers under gate noise: settings, noiseless floor, gate counts, cost",
       optional=True, when=_NOISE, table_skip=frozenset({"note", "basis"})),
    _k("gate_noise.two_qubit", "float", "depolarising λ after each two-qubit gate", column="gate_noise_two_qubit",
       optional=True, when=_NOISE),
    _k("gate_noise.one_qubit", "float", "depolarising λ after each non-virtual one-qubit gate",
       column="gate_noise_one_qubit", optional=True, when=_NOISE),
    _k("gate_noise.readout", "float", "read-out flip probability", column="gate_noise_readout", optional=True,
       when=_NOISE),
    _k("gate_noise.basis", "list", "gate basis the circuits are compiled to", optional=True, when=_NOISE),
    _k("gate_noise.method", "str", "density_matrix, trajectories or effective", column="gate_noise_method",
       optional=True, when=_NOISE),
    _k("gate_noise.trajectories", "int", "noise samples per circuit (1: density matrix)", optional=True, when=_NOISE),
    _k("gate_noise.seed", "int", "seed of the trajectory sampler", optional=True, when=_NOISE),
    _k("gate_noise.mean_max_abs_error_noiseless", "float", "the noiseless circuits' max |mean error| (the floor)",
       column="mean_max_abs_error_noiseless", optional=True, when=_NOISE),
    _k("gate_noise.variance_max_abs_error_noiseless", "float", "the noiseless circuits' max |variance error|",
       column="variance_max_abs_error_noiseless", optional=True, when=_NOISE),
    _k("gate_noise.mean_trajectory_se_max", "float", "largest trajectory SE of a noisy mean (0: density matrix)",
       column="mean_trajectory_se_max", optional=True, when=_NOISE),
    _k("gate_noise.variance_trajectory_se_max", "float", "largest trajectory SE of a noisy variance",
       column="variance_trajectory_se_max", optional=True, when=_NOISE),
    _k("gate_noise.two_qubit_gates_mean_circuit", "int", "two-qubit gates of test point 0's Hadamard-test circuit "
       "in the basis", column="two_qubit_gates_mean_circuit", optional=True, when=_NOISE),
    _k("gate_noise.two_qubit_gates_variance_circuit", "int", "two-qubit gates of test point 0's variance circuit",
       column="two_qubit_gates_variance_circuit", optional=True, when=_NOISE),
    _k("gate_noise.one_qubit_gates_mean_circuit", "int", "noisy one-qubit gates of that Hadamard-test circuit",
       optional=True, when=_NOISE),
    _k("gate_noise.success_probability_min", "float", "least noisy Hadamard-test success probability",
       column="noisy_success_probability_min", optional=True, when=_NOISE),
    _k("gate_noise.success_probability_variance_min", "float", "least noisy P(flag = 1) of the variance circuit",
       optional=True, when=_NOISE),
    _k("gate_noise.no_error_probability_min", "float", "effective model: least exact probability that no block errs "
       "(null for the gate-level methods)", optional=True, when=_NOISE, nullable=True),
    _k("gate_noise.qubits", "int", "widest noisy circuit (the Hadamard test)", optional=True, when=_NOISE),
    _k("gate_noise.seconds", "float", "wall time of the noisy simulation (measured)", optional=True, when=_NOISE),
    _k("gate_noise.seconds_per_trajectory", "float", "seconds per circuit per trajectory (null: density matrix)",
       optional=True, when=_NOISE, nullable=True),
    _k("gate_noise.note", "str", "what the noisy numbers are", optional=True, when=_NOISE, table=False),
    _k("test_rmse", "record", "RMSE of the means against test targets", optional=True, when=_TESTS),
    _k("test_rmse.exact", "float", "exact GP", column="test_rmse_exact", optional=True, when=_TESTS),
    _k("test_rmse.quantum", "float", "quantum estimate", column="test_rmse_quantum", optional=True, when=_TESTS),
    _k("test_nlpd", "record", "negative log predictive density of the test targets", optional=True, when=_TESTS),
    _k("test_nlpd.exact", "float", "exact GP", column="test_nlpd_exact", optional=True, when=_TESTS,
       nullable=True),
    _k("test_nlpd.quantum", "float", "quantum estimate (null when a variance is ≤ 0)", column="test_nlpd_quantum",
       optional=True, when=_TESTS, nullable=True),
    _k("test_nlpd.note", "str", "how the NLPD is formed", optional=True, when=_TESTS, table=False),
    _k("provenance", "record", "what produced each quantity", stage="report", table=False),
    _k("resources", "record", "query- and gate-level cost of both circuits", stage="report",
       table_skip=frozenset({"composition", "oracle_call", "note"})),
    _k("versions", "record", "Python and package versions", stage="report", table=False),
    _k("config", "record", "the canonical config", stage="report", table=False),
    _k("config_file", "str", "the config's path (null when built in code)", stage="report", table=False,
       nullable=True),
    _k("caveat", "str", "simulation, not hardware", stage="report", table=False),
)

_BY_NAME: dict[str, SummaryKey] = {k.name: k for k in SUMMARY_KEYS}


def summary_key(name: str) -> SummaryKey:
    """The schema entry of the dotted key ``name`` (a top-level key or a record's leaf)."""
    try:
        return _BY_NAME[name]
    except KeyError:
        raise QgpError(f"{name!r} is not a summary.json key; see docs/summary.md for the list") from None


def summary_ref(*path: str) -> str:
    """The figures' value reference ``"summary:a.b…"`` to a value in summary.json, checked against the
    schema: the first part (or the first two, for a listed leaf) must be a key; deeper parts of an
    open record (``resources``, ``error_budget``, …) are that record's own."""
    if not path:
        raise QgpError("summary_ref needs at least one key")
    head = summary_key(path[0])
    if len(path) > 1 and head.kind not in ("record",):
        raise QgpError(f"summary key {head.name} is a {head.kind}, not a record; it has no {path[1]!r}")
    return "summary:" + ".".join(path)


def store_columns() -> tuple[tuple[str, str, tuple[str, ...]], ...]:
    """(column, SQL type, path in summary.json) of every key the sweep store keeps in its own column."""
    return tuple((k.column, k.sql_type, k.path) for k in SUMMARY_KEYS if k.column is not None)


def table_leaves(doc: Mapping[str, Any]) -> list[tuple[str, Any]]:
    """(dotted name, value) of every scalar of ``doc`` the tidy CSV carries, in document order:
    records flattened, lists and the schema's non-table keys left out (they stay in the stored
    document). Keys not in the schema are kept (a newer writer's), scalars only."""

    out: list[tuple[str, Any]] = []

    def walk(node: Mapping[str, Any], prefix: str, skip: frozenset[str]) -> None:
        for key, val in node.items():
            if key in skip:
                continue
            name = f"{prefix}{key}"
            if isinstance(val, Mapping):
                walk(val, name + ".", skip)
            elif isinstance(val, (int, float, str, bool)) or val is None:
                out.append((name, val))

    for key, val in doc.items():
        entry = _BY_NAME.get(key)
        if entry is not None and not entry.table:
            continue
        if isinstance(val, Mapping):
            leaves_off = frozenset(k.path[1] for k in SUMMARY_KEYS if k.path[0] == key and len(k.path) == 2
                                   and not k.table)
            walk(val, key + ".", (entry.table_skip if entry else frozenset()) | leaves_off)
        elif isinstance(val, (int, float, str, bool)) or val is None:
            out.append((key, val))
    return out


def check_summary(doc: Mapping[str, Any], *, stage: Stage | None = None) -> None:
    """Raise `QgpError` naming the first key of ``doc`` that the schema does not list, that has the
    wrong type, or that the schema requires and ``doc`` lacks. ``stage="inference"`` checks only the
    keys inference writes (the report adds the rest); None checks the whole document."""
    wanted = [k for k in SUMMARY_KEYS if stage is None or k.stage == stage]
    names = {k.name for k in wanted}
    for key in doc:
        if key not in names:
            raise QgpError(f"summary key {key!r} is not in the schema (qgp.readout.summary.SUMMARY_KEYS); add it there")
    for k in wanted:
        parent = doc
        for part in k.path[:-1]:
            parent = parent.get(part) if isinstance(parent, Mapping) else None
        if not isinstance(parent, Mapping) or k.path[-1] not in parent:
            if k.optional:
                continue
            raise QgpError(f"summary key {k.name!r} is missing")
        if not k.accepts(parent[k.path[-1]]):
            raise QgpError(f"summary key {k.name!r} should be {k.kind}, got {type(parent[k.path[-1]]).__name__}")


def schema_markdown() -> str:
    """The table of ``docs/summary.md``."""
    lines = [
        "| key | type | meaning | store column | in `qgp results` CSV |",
        "|---|---|---|---|---|",
    ]
    for k in SUMMARY_KEYS:
        kind = k.kind + (" or null" if k.nullable else "")
        cond = f" (only when {k.when})" if k.optional and len(k.path) == 1 else ""
        csv = "flattened" if k.kind == "record" and k.table else ("yes" if k.table and k.kind != "list" else "no")
        lines.append(f"| `{k.name}` | {kind} | {k.doc}{cond} | {k.column or '—'} | {csv} |")
    return "\n".join(lines) + "\n"
