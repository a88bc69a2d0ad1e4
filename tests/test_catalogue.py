"""The catalogue of reference circuits in circuits/ (qgp.export.build_catalogue)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from qiskit import qasm3

from qgp.encoding import normalised_amplitudes
from qgp.export import CATALOGUE, REGENERATE_COMMAND, catalogue_entry, fused_circuit, main
from qgp.inversion import build_inversion, statevector_array
from qgp.resources import gate_inversion, resources_of
from qgp.simulate import run_statevector

CIRCUITS = Path(__file__).resolve().parents[1] / "circuits"

# The file against a rebuild: issue 3 asks 1e-10. What separates them is the synthesis error of
# the dense unitaries (~1e-14 each, 510 walk steps for the demo) and 17-digit angle text.
TOL = 1e-10


def _stored(name: str):
    qasm = CIRCUITS / f"{name}.qasm"
    doc = json.loads((CIRCUITS / f"{name}.json").read_text())
    return qasm, doc


_FILE_STATES: dict[str, np.ndarray] = {}


def _file_state(name: str) -> np.ndarray:
    """Statevector of the stored file, loaded with qiskit.qasm3.loads (once per file)."""
    if name not in _FILE_STATES:
        qasm, _ = _stored(name)
        _FILE_STATES[name] = run_statevector(fused_circuit(qasm3.loads(qasm.read_text())))
    return _FILE_STATES[name]


def _rebuilt(name: str):
    """The entry rebuilt in memory: the gate form where it is small, else the simulation form.

    The demo's gate form at c = 8 takes ~5 s to build (qiskit inverts 255 walk copies one by
    one); its simulation form is the same operator (tests/test_inversion.py checks the two).
    """
    entry = catalogue_entry(name)
    form = "simulation" if name == "demo_walk_dilation" else "gate"
    b = normalised_amplitudes(entry.b)
    inv = build_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=b, form=form)
    return entry, inv, run_statevector(inv.circuit)


def test_catalogue_holds_every_entry_and_the_regeneration_command():
    readme = (CIRCUITS / "README.md").read_text()
    assert REGENERATE_COMMAND in readme
    for name in CATALOGUE:
        qasm, doc = _stored(name)
        assert qasm.stat().st_size < 2_000_000, f"{qasm.name} is {qasm.stat().st_size} bytes"
        assert doc["name"] == name and doc["regenerate"] == REGENERATE_COMMAND
        assert name in readme


@pytest.mark.parametrize("name", CATALOGUE)
def test_stored_file_acts_like_the_rebuilt_circuit(name):
    # Issue 3 (a): rebuild the entry and compare its statevector with the stored file's (loaded
    # by an OpenQASM 3 importer), all amplitudes, global phase included.
    _, inv, sv_mem = _rebuilt(name)
    sv_file = _file_state(name)
    worst = float(np.max(np.abs(sv_file - sv_mem)))
    assert worst < TOL, f"{name}: worst statevector residual {worst:.3g}"
    # And the expected post-selected state written beside it.
    _, doc = _stored(name)
    post = statevector_array(sv_file, inv)[0, 1, 0, :]
    expected = np.array(doc["expected"]["postselected_amplitudes"], dtype=float)
    worst = float(np.max(np.abs(post - expected)))
    assert worst < TOL, f"{name}: post-selected amplitudes differ from the JSON by {worst:.3g}"
    assert abs(float(np.sum(np.abs(post) ** 2)) - doc["expected"]["success_probability"]) < TOL


def _integers(doc: dict) -> dict:
    """Every integer count in a resources document (qubits, calls, gate counts, depth)."""
    out = {f"qubits.{k}": v for k, v in doc["qubits"].items()}
    for key in ("n_oracle_calls", "n_phase_estimations", "n_block_qubits", "n_pauli_terms", "clock_qubits", "optimization_level"):
        out[key] = doc[key]
    for basis, g in (doc["gate_counts"] or {}).items():
        out.update({f"{basis}.{gate}": n for gate, n in g["counts"].items()})
        out[f"{basis}.depth"] = g["depth"]
    return out


@pytest.mark.parametrize("name", CATALOGUE)
def test_resource_counts_did_not_change_unnoticed(name):
    # Issue 3 (b): recount the rebuilt entry; integer counts must equal the stored JSON exactly
    # (a qiskit upgrade that synthesises differently shows up here; regenerate the catalogue
    # with the documented command after checking why).
    entry = catalogue_entry(name)
    gi = gate_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=normalised_amplitudes(entry.b))
    now = resources_of(gi).as_dict()
    _, doc = _stored(name)
    assert _integers(now) == _integers(doc["resources"]), f"{name}: counts changed (qiskit {doc['versions']['qiskit']} stored)"
    assert gi.inversion.scale == pytest.approx(doc["scale_inverse"], rel=1e-12)
    assert np.allclose(gi.inversion.clock_eigenvalues, doc["constants"]["clock_eigenvalues"], rtol=1e-12, atol=0)


def test_cao_worked_example_from_the_file():
    # Cao, Daskin, Frankel & Kais, Mol. Phys. 110, 1675 (2012): eigenvalues 1, 2, 4, 8; with 4
    # clock qubits and t = 2π/16 each sits on clock value λ, so the post-selected state is
    # C·A⁻¹b exactly and P = C²‖A⁻¹b‖² (issue 3: to 1e-10), read from the stored file.
    entry = catalogue_entry("cao2012_exact")
    assert np.allclose(np.linalg.eigvalsh(entry.A), [1, 2, 4, 8], atol=1e-13)
    _, inv, _ = _rebuilt("cao2012_exact")
    b = normalised_amplitudes(entry.b)
    x = np.linalg.solve(entry.A, b)
    post = statevector_array(_file_state("cao2012_exact"), inv)[0, 1, 0, :]
    worst = float(np.max(np.abs(post - inv.scale * x)))
    assert worst < 1e-10, f"worst residual against C·A⁻¹b: {worst:.3g}"
    assert abs(float(np.vdot(post, post).real) - inv.scale**2 * float(x @ x)) < 1e-10


def test_two_by_two_example_from_the_file():
    # [[1.5, 0.5], [0.5, 1.5]], b = (1, 0) (matrix from memory): A⁻¹b = (3, −1)/4, so the
    # post-selected state is (3, −1)/√10 and P = 0.625·C² (computed: (9 + 1)/16).
    _, inv, _ = _rebuilt("hhl_2x2_exact")
    post = statevector_array(_file_state("hhl_2x2_exact"), inv)[0, 1, 0, :]
    p = float(np.vdot(post, post).real)
    state = post / np.sqrt(p)
    worst = float(np.max(np.abs(state - np.array([3.0, -1.0]) / np.sqrt(10))))
    assert worst < 1e-10, f"worst residual against (3, -1)/sqrt(10): {worst:.3g}"
    assert abs(p - 0.625 * inv.scale**2) < 1e-10


def test_regeneration_command_writes_the_catalogue(tmp_path):
    # The documented command, run into a scratch folder: the same files, and qasm files of the
    # same shape (line count) as the stored ones.
    assert main(["--catalogue", str(tmp_path)]) == 0
    for name in CATALOGUE:
        new = (tmp_path / f"{name}.qasm").read_text().splitlines()
        old = (CIRCUITS / f"{name}.qasm").read_text().splitlines()
        assert len(new) == len(old), name
        assert [ln.split()[0] for ln in new if not ln.startswith("  ")] == [
            ln.split()[0] for ln in old if not ln.startswith("  ")
        ], name


@pytest.mark.slow
def test_demo_file_runs_unfused_in_aer():
    # A second reading of the demo file: Aer unrolls all 510 walk calls itself (1.4M U/cx gates,
    # several minutes) instead of multiplying each definition out once.
    _, inv, sv_mem = _rebuilt("demo_walk_dilation")
    qasm, _ = _stored("demo_walk_dilation")
    sv = run_statevector(qasm3.loads(qasm.read_text()))
    worst = float(np.max(np.abs(sv - sv_mem)))
    assert worst < TOL, f"worst statevector residual {worst:.3g}"
