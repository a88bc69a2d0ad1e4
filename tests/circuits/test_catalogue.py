"""The catalogue of reference circuits in circuits/ (qgp.tools.catalogue.build_catalogue)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.polynomial import chebyshev
from qiskit import qasm3, transpile
from qiskit_aer import AerSimulator

from qgp.circuits.encoding import normalised_amplitudes
from qgp.reports.export import constants_document, exported_inversion, file_resources, gate_counts_by_origin
from qgp.circuits.qasm import fused_circuit
from qgp.tools.catalogue import CATALOGUE, REGENERATE_COMMAND, catalogue_entry, main
from qgp.circuits.inversion import build_inversion, statevector_array
from qgp.readout.simulate import run_statevector

CIRCUITS = Path(__file__).resolve().parents[2] / "circuits"

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
    one); its simulation form is the same operator (tests/circuits/test_inversion.py checks the two).
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


# Counts fixed by qgp's construction: qubits per register, oracle and phase-estimation counts, the
# block register, the Pauli terms of A, the clock and the optimisation level.
_QUERY_LEVEL = ("n_oracle_calls", "n_phase_estimations", "n_block_qubits", "n_pauli_terms", "clock_qubits", "optimization_level")

# Synthesis-dependent counts (one-qubit gates of the dense unitaries, and the depth) are compared
# with the stored JSON within SYNTH_RTOL. Measured (issue 10): the demo's synthesised walk body
# gave u = 901131 (the catalogue's earlier machine), 902151 (OPENBLAS_CORETYPE unset here,
# SkylakeX), 910311 (Sandybridge), 921531 (Haswell and Zen; the machine), 922041
# (Prescott), 922551 (Nehalem): 2.4% spread; depth 991127 … 1010507 (2.0%), rz 1990045 …
# 2011465 (1.1%), while every CX count (512956 in both bases), every count of the pieces qgp
# composes itself and all counts of cao2012_exact and hhl_2x2_exact were identical. 5% is twice
# the largest measured spread.
SYNTH_RTOL = 0.05


def _query_integers(res: dict) -> dict:
    out = {f"qubits.{k}": v for k, v in res["qubits"].items()}
    out.update({key: res[key] for key in _QUERY_LEVEL})
    return out


@pytest.mark.parametrize("name", CATALOGUE)
def test_resource_counts_did_not_change_unnoticed(name):
    # Issue 3 (b), restated by issue 10: recount the rebuilt entry. What qgp fixes must equal the
    # stored JSON exactly: the query-level counts, the CX counts (the quantum Shannon decomposition
    # fixes them by the block structure — Shende, Bullock & Markov 2006; Krol & Al-Ars 2024, as
    # qiskit's qs_decomposition documents — and a two-qubit block changes its CX number only when
    # its Weyl coordinates move by ~1e-8, far above rounding), and every count of the pieces qgp
    # composes itself. One-qubit gates of dense-unitary syntheses and the depth depend on the
    # platform's floating point (which near-identity rotations are dropped): within SYNTH_RTOL.
    # A change beyond either shows a qiskit upgrade or a change in qgp: find out why, then
    # regenerate with the documented command.
    entry = catalogue_entry(name)
    # The circuit the catalogue writes, for either method (phase estimation or QSVT, which has no clock).
    gi = exported_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=normalised_amplitudes(entry.b))
    now = file_resources(entry.A, gi).as_dict()
    origin = gate_counts_by_origin(gi.decomposed)
    _, doc = _stored(name)
    stored, stored_origin = doc["resources"], doc["gate_counts_by_origin"]
    where = f"{name} (stored with qiskit {doc['versions']['qiskit']} on {doc['platform']['machine']})"
    assert _query_integers(now) == _query_integers(stored), where
    assert origin["dense_pieces"] == stored_origin["dense_pieces"], where
    worst, worst_what = 0.0, ""
    for basis in now["gate_counts"]:
        assert now["gate_counts"][basis]["cx"] == stored["gate_counts"][basis]["cx"], f"{where}: {basis} CX"
        assert origin[basis]["composed"] == stored_origin[basis]["composed"], f"{where}: {basis} composed pieces"
        dense, dense_stored = origin[basis]["dense"], stored_origin[basis]["dense"]
        assert dense.get("cx", 0) == dense_stored.get("cx", 0), f"{where}: {basis} CX of the dense pieces"
        assert set(dense) == set(dense_stored), f"{where}: {basis} gate kinds {sorted(dense)} vs {sorted(dense_stored)}"
        pairs = [(f"{basis} {g}", dense[g], dense_stored[g]) for g in dense if g != "cx"]
        pairs.append((f"{basis} depth", now["gate_counts"][basis]["depth"], stored["gate_counts"][basis]["depth"]))
        for what, a, b in pairs:
            rel = abs(a - b) / max(b, 1)
            if rel >= worst:
                worst, worst_what = rel, f"{what}: {a} now vs {b} stored"
    assert worst <= SYNTH_RTOL, f"{where}: synthesis-dependent count off by {worst:.2%} ({worst_what})"
    assert gi.inversion.scale == pytest.approx(doc["scale_inverse"], rel=1e-12)
    # Phase estimation: the decoded clock eigenvalues; QSVT: the polynomial (degree exact, the rest to 1e-12).
    constants = constants_document(gi)
    assert sorted(constants) == sorted(doc["constants"]), where
    assert np.allclose(gi.inversion.clock_eigenvalues, doc["constants"].get("clock_eigenvalues", []), rtol=1e-12, atol=0)
    if "polynomial" in constants:
        poly, stored_poly = constants["polynomial"], doc["constants"]["polynomial"]
        assert (poly["kind"], poly["degree"]) == (stored_poly["kind"], stored_poly["degree"]), where
        for key in ("scale", "max_error"):
            assert poly[key] == pytest.approx(stored_poly[key], rel=1e-9), f"{where}: polynomial {key}"
        c, c_stored = np.array(poly["coefficients"]), np.array(stored_poly["coefficients"])
        assert np.allclose(c, c_stored, rtol=0, atol=1e-12 * np.max(np.abs(c_stored))), f"{where}: polynomial coefficients"


def test_catalogue_records_the_platform():
    # Issue 10: synthesis-dependent counts are only meaningful beside where they were made.
    for name in CATALOGUE:
        _, doc = _stored(name)
        assert set(doc["versions"]) >= {"qiskit", "qiskit_aer", "numpy", "scipy"}, name
        plat = doc["platform"]
        assert plat["machine"] and "OPENBLAS_CORETYPE" in plat, (name, plat)
        assert plat["numpy_blas"] is None or "name" in plat["numpy_blas"], (name, plat)


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


def _polynomial_entries() -> list[str]:
    """Entries whose circuit applies a polynomial of A/α (QSVT: the stored constants hold it)."""
    return [name for name in CATALOGUE if "polynomial" in _stored(name)[1]["constants"]]


def test_catalogue_has_a_polynomial_entry():
    assert _polynomial_entries(), "no QSVT entry in the catalogue"


@pytest.mark.parametrize("name", _polynomial_entries())
def test_qsvt_file_applies_its_stored_polynomial(name):
    # A QSVT entry's file, post-selected on flag = 1, block = 0 (no clock), holds p(A/α)b with p
    # the Chebyshev series stored in the JSON, computed here with numpy at A's eigenvalues over α
    # (1e-10), and within the polynomial's relative error of C·A⁻¹b.
    entry = catalogue_entry(name)
    _, doc = _stored(name)
    c = doc["constants"]
    assert doc["projector"] == {"flag": 1, "block": 0} and doc["resources"]["qubits"]["clock"] == 0
    b = normalised_amplitudes(entry.b)
    w, v = np.linalg.eigh(entry.A)
    expected = v @ (chebyshev.chebval(w / c["alpha"], c["polynomial"]["coefficients"]) * (v.T @ b))
    _, inv, _ = _rebuilt(name)
    post = statevector_array(_file_state(name), inv)[0, 1, 0, :]
    worst = float(np.max(np.abs(post - expected)))
    assert worst < 1e-10, f"{name}: worst residual against p(A/alpha)b {worst:.3g}"
    assert np.allclose(doc["expected"]["polynomial_postselected_amplitudes"], expected, rtol=0, atol=1e-12)
    ideal = c["scale"] * np.linalg.solve(entry.A, b)
    rel = float(np.linalg.norm(post.real - ideal) / np.linalg.norm(ideal))
    assert rel <= c["polynomial"]["max_error"] + 1e-12, f"{name}: {rel:.3g} from C*A^-1 b"


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


def _structure(text: str) -> list:
    """What of a file does not depend on the platform's floating point: every declaration, call
    and measurement as written, top-level one-qubit gates by their qubits, and each definition by
    name, arity and CX count. Left out: angles, gphase lines (a phase that rounds to exactly 0 is
    not written) and the U lines inside definitions (dense syntheses differ in them; see
    SYNTH_RTOL)."""
    out: list = []
    body = None
    for line in text.splitlines():
        s = line.strip()
        if not s or s.startswith("//") or s.startswith("gphase("):
            continue
        head = re.match(r"gate (\w+) (.*) \{$", s)
        if head:
            body = [head[1], len(head[2].split(",")), 0]
        elif s == "}":
            out.append(("gate", *body))
            body = None
        elif body is not None:
            body[2] += s.startswith("cx ")
        elif s.startswith("U("):
            out.append(("U", s.rsplit(")", 1)[1].strip()))
        else:
            out.append(s)
    return out


def test_regeneration_command_writes_the_catalogue(tmp_path):
    # The documented command, run into a scratch folder: the same files, with the structure of the
    # stored ones (issue 10: not their line count, which a gphase that rounds to 0 changes).
    assert main(["--catalogue", str(tmp_path)]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        f"{name}.{ext}" for name in CATALOGUE for ext in ("qasm", "json")
    ), "stray or temporary files"
    for name in CATALOGUE:
        new, old = _structure((tmp_path / f"{name}.qasm").read_text()), _structure((CIRCUITS / f"{name}.qasm").read_text())
        diff = next((i for i, (a, b) in enumerate(zip(new, old)) if a != b), None)
        assert len(new) == len(old) and diff is None, (
            f"{name}: structure differs at statement {diff}: {new[diff] if diff is not None else len(new)} "
            f"vs {old[diff] if diff is not None else len(old)}"
        )
        assert len(new) > 10
        doc_new = json.loads((tmp_path / f"{name}.json").read_text())
        _, doc_old = _stored(name)
        assert sorted(doc_new) == sorted(doc_old), name
    # It regenerates in place: running it again over its own output is not refused.
    assert main(["--catalogue", str(tmp_path)]) == 0


def _aer_user_path(text: str) -> np.ndarray:
    """load → transpile(…, AerSimulator()) at the default optimisation level → Aer statevector."""
    loaded = qasm3.loads(text)
    compiled = transpile(loaded, AerSimulator())
    assert compiled.num_qubits == loaded.num_qubits
    compiled.save_statevector()
    result = AerSimulator(method="statevector").run(compiled).result()
    assert result.success, result.status
    return np.asarray(result.get_statevector())


def _check_users_way(name: str) -> None:
    _, inv, sv_mem = _rebuilt(name)
    qasm, _ = _stored(name)
    sv = _aer_user_path(qasm.read_text())
    post = statevector_array(sv, inv)[0, 1, 0, :]
    ref = statevector_array(sv_mem, inv)[0, 1, 0, :]
    worst = float(np.max(np.abs(post - ref)))
    assert worst < AER_TOL, f"{name}: worst post-selected residual through Aer {worst:.3g}"
    assert float(np.linalg.norm(ref)) > 0.01


# The user's path re-synthesises two-qubit blocks at the default optimisation level (~1e-15 each):
# 1e-8, as for fresh exports (tests/reports/test_export.py).
AER_TOL = 1e-8


@pytest.mark.parametrize("name", [n for n in CATALOGUE if n != "demo_walk_dilation"])
def test_catalogue_file_runs_the_users_way_in_aer(name):
    # Issue 10: the stored file, loaded with qasm3.loads, transpiled for AerSimulator() at the
    # default optimisation level and run on Aer (nothing of qgp in the path; the old files'
    # `gate unitary` crashed Aer's assembler), gives qgp's own post-selected state
    # (flag=1, clock=0, block=0) of the rebuilt circuit.
    _check_users_way(name)


@pytest.mark.slow
def test_demo_file_runs_the_users_way_in_aer():
    # The same for the demo: slow because the default transpile unrolls all 510 walk calls
    # (1.3M gates) and optimises them: measured here 450 s to transpile and 130 s to run.
    _check_users_way("demo_walk_dilation")
