"""The summary schema is the one definition of summary.json's keys: inference's output, the report's
document, the store's columns, the tidy CSV and the figures' references all follow it.

Checks here are internal consistency (common practice for a single-source schema); the numbers in the
documents are checked against outside sources in test_inference.py and tests/classical/.
"""

from dataclasses import replace
from pathlib import Path

import pytest

from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.errors import QgpError
from qgp.classical.problem import problem_from_config
from qgp.readout.inference import infer
from qgp.readout.summary import (
    SUMMARY_KEYS,
    check_summary,
    schema_markdown,
    store_columns,
    summary_key,
    summary_ref,
    table_leaves,
)
from qgp.reports.run import summary_document
from qgp.settings import GateNoise
from qgp.sweeps.store import SUMMARY_COLUMNS

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def documents():
    """Summary documents of the demo config with and without test targets, with and without shots, and
    one with gate noise."""
    cfg = load_config(demo_config_path())
    small = replace(cfg, data=replace(cfg.data, n_train=4), circuit=replace(cfg.circuit, clock_qubits=3))
    out = []
    # First: test targets, shots and [gate_noise] (the effective model, few trajectories): every column.
    noisy = replace(small, readout=replace(small.readout, shots=64), gate_noise=GateNoise(two_qubit=1e-3, trajectories=4))
    result = infer(problem_from_config(noisy), noisy.circuit, noisy.readout, gate_noise=noisy.gate_noise, progress=None)
    out.append((result.summary(), summary_document(result, noisy)))
    for test in (cfg.data.test, None):
        for shots in (0, 64):
            c = replace(small, data=replace(small.data, test=test), readout=replace(small.readout, shots=shots))
            result = infer(problem_from_config(c), c.circuit, c.readout, progress=None)
            out.append((result.summary(), summary_document(result, c)))
    return out


def test_inference_writes_exactly_the_schema_inference_keys(documents):
    inference_keys = [k.name for k in SUMMARY_KEYS if k.stage == "inference" and len(k.path) == 1]
    for summary, _ in documents:
        check_summary(summary, stage="inference")
        listed = [k for k in inference_keys if k in summary]
        assert list(summary) == listed, "summary() keys are out of the schema's order"


def test_the_report_document_passes_the_whole_schema(documents):
    for _, doc in documents:
        check_summary(doc)
    with_tests = [doc for _, doc in documents if "test_rmse" in doc]
    assert with_tests and len(with_tests) < len(documents), "the optional keys were not exercised both ways"


def test_check_names_unknown_missing_and_mistyped_keys(documents):
    summary = dict(documents[0][0])
    with pytest.raises(QgpError, match="'surprise' is not in the schema"):
        check_summary({**summary, "surprise": 1}, stage="inference")
    del summary["n_train"]
    with pytest.raises(QgpError, match="'n_train' is missing"):
        check_summary(summary, stage="inference")
    with pytest.raises(QgpError, match="'n_test' should be int, got str"):
        check_summary({**documents[0][0], "n_test": "20"}, stage="inference")
    with pytest.raises(QgpError, match="should be int, got bool"):
        check_summary({**documents[0][0], "n_test": True}, stage="inference")


def test_store_columns_come_from_the_schema_and_hold_scalars(documents):
    assert SUMMARY_COLUMNS == store_columns()
    assert len({c for c, _, _ in SUMMARY_COLUMNS}) == len(SUMMARY_COLUMNS)
    _, doc = documents[0]  # with test targets: every column present
    for column, sql, path in SUMMARY_COLUMNS:
        value = doc
        for part in path:
            value = value[part]
        assert value is None or isinstance(value, (int, float, str)), (column, value)
        assert sql in ("INTEGER", "REAL", "TEXT")


def test_the_tidy_table_leaves_out_what_the_schema_keeps_out(documents):
    _, doc = documents[0]
    names = [name for name, _ in table_leaves(doc)]
    off = [k.name for k in SUMMARY_KEYS if not k.table]
    for name in names:
        assert not any(name == o or name.startswith(o + ".") for o in off), name
        assert not name.endswith(".note"), name
    for k in SUMMARY_KEYS:
        if k.table and k.kind not in ("record", "list") and (not k.optional or k.path[0] in doc):
            assert k.name in names, k.name
    assert any(n.startswith("resources.inverse.gate_counts.") for n in names)
    assert any(n.startswith("error_budget.total.") for n in names)
    assert not any(n.startswith("error_budget.stages.") for n in names)


def test_figure_references_are_checked_against_the_schema():
    assert summary_ref("resources", "inverse", "gate_level_skipped") == "summary:resources.inverse.gate_level_skipped"
    assert summary_key("test_rmse.exact").column == "test_rmse_exact"
    with pytest.raises(QgpError, match="'n_trains' is not a summary.json key"):
        summary_ref("n_trains")
    with pytest.raises(QgpError, match="not a record"):
        summary_ref("n_train", "x")


def test_docs_page_is_the_schema_table():
    page = (ROOT / "docs" / "summary.md").read_text(encoding="utf-8")
    assert schema_markdown() in page, "docs/summary.md is stale: run python -m qgp.tools.summary_doc"
