"""`qgp export` of the QSVT inversion circuits (``[circuit] method = "qsvt"``; qgp.reports.export).

The exported files are read the way a user reads them — `qiskit.qasm3.loads`, then
`qiskit.quantum_info.Statevector` or ``transpile(…, AerSimulator())`` and Aer — and checked against
what the polynomial does to A's eigenvalues, computed with numpy alone: on flag = 1, block = 0 the
system amplitudes of inversion.qasm are p(A/α)ŷ (qgp.circuits.qsvt), and P(flag = 1) of
inversion_sqrt.qasm is ‖q(A/α)ŷ‖².
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from numpy.polynomial import chebyshev
from qiskit import qasm3, transpile
from qiskit.quantum_info import Statevector
from qiskit_aer import AerSimulator

from qgp.circuits.inversion import build_inversion
from qgp.classical.problem import problem_from_config
from qgp.classical.system import eigenvalue_bounds
from qgp.config import load_config
from qgp.reports.export import INVERSION_FILE, INVERSION_SQRT_FILE, RESOURCES_FILE, export_config

# A file against numpy's p(A/α)ŷ: the file's angles are 17-digit text and each dense block-encoding
# call is synthesised to ~1e-14; 55 calls stay far below this.
TOL = 1e-8
ENCODINGS = ("dilation", "lcu")


def _write_config(folder: Path, encoding: str, n: int = 4) -> Path:
    """An RBF problem on n points of a smooth 1-D curve (seed 5), κ(A) = 10, QSVT with target error 1e-2."""
    rng = np.random.default_rng(5)
    x = np.sort(rng.uniform(0.0, 10.0, n))
    y = np.sin(x) + 0.1 * rng.normal(size=n)
    rows = "\n".join(f"{float(a)!r},{float(b)!r}" for a, b in zip(x, y))
    (folder / "train.csv").write_text("x,y\n" + rows + "\n")
    cfg = folder / "small_qsvt.toml"
    cfg.write_text(
        '[data]\ntrain = "train.csv"\ntarget = "y"\n\n[kernel]\nfamily = "rbf"\nlengthscale = 2.0\n\n'
        '[noise]\ntarget_condition = 10.0\n\n[circuit]\nmethod = "qsvt"\n'
        f'encoding = "{encoding}"\ntarget_error = 1e-2\n'
    )
    return cfg


def _problem(cfg):
    """(A, ŷ, bounds) as the export forms them: the padded A = K + σ²I and the centred targets, normalised."""
    problem = problem_from_config(cfg)
    A = problem.A_padded
    y = problem.padded(problem.y_centered)
    return A, y / np.linalg.norm(y), eigenvalue_bounds(A, problem.noise_variance)


def _polynomial_of_A(A: np.ndarray, alpha: float, coefficients, yhat: np.ndarray) -> np.ndarray:
    """f(A/α)ŷ with f = Σ_k c_k T_k, by numpy: f applied to A's eigenvalues over α."""
    w, v = np.linalg.eigh(A)
    return v @ (chebyshev.chebval(w / alpha, np.asarray(coefficients, dtype=float)) * (v.T @ yhat))


def _split(data: np.ndarray, m: int, k: int) -> np.ndarray:
    """A statevector as [block, flag, system] (qubit order system | flag | block, system least significant)."""
    return np.asarray(data).reshape(2**k, 2, 2**m)


@pytest.fixture(scope="module", params=ENCODINGS)
def exported(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp(f"qsvt_{request.param}")
    cfg = load_config(_write_config(folder, request.param))
    paths = export_config(cfg, folder / "out")
    loaded = {p.name: qasm3.loads(p.read_text()) for p in paths if p.suffix == ".qasm"}
    doc = json.loads((folder / "out" / RESOURCES_FILE).read_text())
    return request.param, cfg, paths, loaded, doc


def test_qsvt_export_writes_the_inversion_files_and_their_constants(exported):
    encoding, cfg, paths, loaded, doc = exported
    out = paths[0].parent
    assert [p.name for p in paths] == [INVERSION_FILE, INVERSION_SQRT_FILE, RESOURCES_FILE]
    assert sorted(p.name for p in out.iterdir()) == sorted(p.name for p in paths), "stray or temporary files"
    A, yhat, bounds = _problem(cfg)
    for file, rotation in ((INVERSION_FILE, "inverse"), (INVERSION_SQRT_FILE, "inverse_sqrt")):
        inv = build_inversion(A, cfg.circuit, rotation, bounds, form="gate")
        qc = loaded[file]
        # No clock: system | flag | block, as the in-memory circuit; resources.json says the same.
        regs = [(r.name, r.size) for r in qc.qregs]
        assert regs == [(r.name, r.size) for r in inv.circuit.qregs] == [
            ("system", 2), ("flag", 1), ("block", inv.n_block_qubits)
        ], regs
        q = doc["resources"][file]["qubits"]
        assert {k: v for k, v in q.items() if k not in ("total", "clock")} == dict(regs) and q["clock"] == 0
        assert q["total"] == qc.num_qubits and not qc.cregs
        # The constants a reader needs: C, α, κ_b, the polynomial; and the resources of qsvt_resources.
        c = doc["constants"][file]
        poly = inv.polynomial
        assert c["scale"] == inv.scale and c["alpha"] == inv.alpha
        assert c["effective_condition_number"] == inv.effective_condition_number
        assert c["polynomial"]["degree"] == poly.degree and c["polynomial"]["kind"] == rotation
        assert c["polynomial"]["scale"] == poly.scale and c["polynomial"]["max_error"] == poly.max_error
        assert c["polynomial"]["coefficients"] == [float(x) for x in poly.coefficients]
        res = doc["resources"][file]
        assert res["n_oracle_calls"] == poly.degree == inv.n_oracle_calls and res["n_phase_estimations"] == 0
        assert res["encoding"] == encoding and res["prepared"] is True and res["gate_level_skipped"] is None
        # The header: version, title, what the circuit is, how to read it.
        head = (out / file).read_text().splitlines()[:4]
        assert head[0] == "OPENQASM 3.0;" and head[1] == "// qgp export of small_qsvt.toml", head
        assert f"rotation {rotation}, QSVT of the {encoding} block encoding" in head[2], head[2]
        assert f"polynomial degree {poly.degree}" in head[2] and "no clock" in head[2], head[2]
        assert head[3].startswith("// read with " + ", ".join(f"{k}={v}" for k, v in doc["projectors"][file].items()))
    assert doc["method"] == "qsvt"
    assert doc["projectors"] == {INVERSION_FILE: {"flag": 1, "block": 0}, INVERSION_SQRT_FILE: {"flag": 1}}
    assert doc["scale_inverse"] == doc["constants"][INVERSION_FILE]["scale"]
    assert doc["scale_inverse_sqrt"] == doc["constants"][INVERSION_SQRT_FILE]["scale"]
    assert "sqrt(P)/C" in doc["reading"][INVERSION_FILE] and "P/C'" in doc["reading"][INVERSION_SQRT_FILE]
    assert "--test-point" in doc["hadamard_test"]
    assert "no clock register" in doc["format"]
    assert doc["platform"]["machine"] and "qiskit" in doc["versions"]


def test_exported_inversion_applies_the_polynomial(exported):
    # The file, loaded by an OpenQASM 3 importer and simulated by qiskit's Statevector, has on
    # flag = 1, block = 0 the amplitudes p(A/α)ŷ of numpy (chebval at A's eigenvalues over α).
    encoding, cfg, paths, loaded, doc = exported
    A, yhat, bounds = _problem(cfg)
    inv = build_inversion(A, cfg.circuit, "inverse", bounds, form="gate")
    expected = _polynomial_of_A(A, inv.alpha, inv.polynomial.coefficients, yhat)
    sv = Statevector(loaded[INVERSION_FILE]).data
    got = _split(sv, inv.n_system_qubits, inv.n_block_qubits)[0, 1, :]
    worst = float(np.max(np.abs(got - expected)))
    assert worst < TOL, f"{encoding}: worst residual against p(A/alpha)yhat {worst:.3g}"
    # flag = 1 only on block = 0: the whole flag = 1 probability is the post-selected one.
    p_flag = float(np.sum(np.abs(_split(sv, inv.n_system_qubits, inv.n_block_qubits)[:, 1, :]) ** 2))
    assert abs(p_flag - float(expected @ expected)) < TOL
    # And the reading in resources.json: p(A/α)ŷ ≈ C·A⁻¹ŷ to the polynomial's relative error.
    c = doc["constants"][INVERSION_FILE]
    ideal = doc["scale_inverse"] * np.linalg.solve(A, yhat)
    rel = float(np.linalg.norm(got.real - ideal) / np.linalg.norm(ideal))
    assert rel <= c["polynomial"]["max_error"] + 1e-9, f"{encoding}: {rel:.3g} vs max_error {c['polynomial']['max_error']:.3g}"
    assert float(np.linalg.norm(expected)) > 0.05  # the check is not vacuous


def test_exported_sqrt_file_gives_the_quadratic_form(exported):
    # P(flag = 1) of inversion_sqrt.qasm is ‖q(A/α)ŷ‖² (numpy), and P/C′ is ŷᵀA⁻¹ŷ to the
    # polynomial's error (q² is within (1 ± e)² of C′/λ on every eigenvalue).
    encoding, cfg, paths, loaded, doc = exported
    A, yhat, bounds = _problem(cfg)
    inv = build_inversion(A, cfg.circuit, "inverse_sqrt", bounds, form="gate")
    c = doc["constants"][INVERSION_SQRT_FILE]
    expected = _polynomial_of_A(A, c["alpha"], c["polynomial"]["coefficients"], yhat)
    sv = Statevector(loaded[INVERSION_SQRT_FILE]).data
    p = float(np.sum(np.abs(_split(sv, inv.n_system_qubits, inv.n_block_qubits)[:, 1, :]) ** 2))
    assert abs(p - float(expected @ expected)) < TOL, f"{encoding}: P(flag=1) {p!r} vs |q(A/alpha)yhat|^2 {expected @ expected!r}"
    exact = float(yhat @ np.linalg.solve(A, yhat))
    e = c["polynomial"]["max_error"]
    assert abs(p / doc["scale_inverse_sqrt"] / exact - 1) <= (1 + e) ** 2 - 1 + 1e-9


# The LCU file's default transpile (55 calls of a 5-qubit LCU, optimised at level 2) takes ~10 s: slow.
@pytest.mark.parametrize("exported", ["dilation", pytest.param("lcu", marks=pytest.mark.slow)], indirect=True)
def test_qsvt_file_runs_the_users_way_in_aer(exported):
    # load → transpile(…, AerSimulator()) at the default optimisation level → Aer, nothing of qgp in the path.
    encoding, cfg, paths, loaded, doc = exported
    compiled = transpile(loaded[INVERSION_FILE], AerSimulator())
    assert compiled.num_qubits == loaded[INVERSION_FILE].num_qubits
    compiled.save_statevector()
    result = AerSimulator(method="statevector").run(compiled).result()
    assert result.success, result.status
    A, yhat, _ = _problem(cfg)
    c = doc["constants"][INVERSION_FILE]
    m, k = 2, doc["qubits"]["block"]
    got = _split(np.asarray(result.get_statevector()), m, k)[0, 1, :]
    expected = _polynomial_of_A(A, c["alpha"], c["polynomial"]["coefficients"], yhat)
    worst = float(np.max(np.abs(got - expected)))
    assert worst < TOL, f"{encoding}: worst residual through Aer {worst:.3g}"


def test_qsvt_file_gates_are_the_counted_gates(exported):
    # The counts in resources.json are the gates the file holds (every definition written out), and
    # the file calls the block encoding once per polynomial degree.
    encoding, cfg, paths, loaded, doc = exported
    for file in (INVERSION_FILE, INVERSION_SQRT_FILE):
        counts: dict[str, int] = {}
        for inst in loaded[file].data:
            op = inst.operation
            for g in [op] if op.name in ("u", "cx") else [i.operation for i in op.definition.data]:
                counts[g.name] = counts.get(g.name, 0) + 1
        assert dict(sorted(counts.items())) == doc["gate_counts"][file]["u_cx"]["counts"], (encoding, file)
        text = (paths[0].parent / file).read_text()
        calls = len(re.findall(r"^qgp_block_encoding_\w+ ", text, flags=re.M))
        assert calls == doc["constants"][file]["polynomial"]["degree"] == doc["resources"][file]["n_oracle_calls"]
        assert all(n.startswith("qgp_") for n in re.findall(r"^gate\s+(\w+)", text, flags=re.M))


# Never overwriting without --force: tests/reports/test_export.py::test_export_never_overwrites_without_force[qsvt].


def test_qsvt_hadamard_test_file_gives_the_expected_probabilities(tmp_path):
    # The exported gate-form Hadamard test (qasm3.loads → qiskit's Statevector) against the P0, P1
    # qgp computes from the simulation form (resources.json "expected"), to 1e-8; and the mean
    # rebuilt from them with the file's constants.
    from qiskit.quantum_info import Statevector

    cfg = load_config(_write_config(tmp_path, "dilation"))
    paths = export_config(cfg, tmp_path / "out", test_point=0)
    doc = json.loads((tmp_path / "out" / RESOURCES_FILE).read_text())
    tp = doc["test_point"]
    qc = qasm3.loads((tmp_path / "out" / tp["file"]).read_text())
    assert [r.name for r in qc.qregs] == ["system", "flag", "block", "probe"]
    assert tp["projector"] == {"flag": 1, "block": 0} and "clock" not in tp["reading"].split("(no clock")[0]
    sizes = [r.size for r in qc.qregs]
    probs = np.abs(Statevector(qc).data.reshape([2 ** n for n in reversed(sizes)])) ** 2  # [probe, block, flag, system]
    p0, p1 = (float(np.sum(probs[b, 0, 1, :])) for b in (0, 1))
    worst = max(abs(p0 - tp["expected"]["P0"]), abs(p1 - tp["expected"]["P1"]))
    assert worst <= 1e-8, f"file P0, P1 differ from qgp's by {worst:.3g}"
    mean = tp["prior_mean"] + tp["y_norm"] * tp["k_star_norm"] * (p0 - p1) / tp["scale_inverse"]
    assert abs(mean - tp["expected"]["mean_from_exact_probabilities"]) <= 1e-8 * max(1.0, abs(mean))
    assert len(paths) == 4


def test_measured_qsvt_file_declares_one_classical_register_per_register(tmp_path):
    cfg = load_config(_write_config(tmp_path, "dilation"))
    paths = export_config(cfg, tmp_path / "out", measure=True)
    assert json.loads(paths[-1].read_text())["measured"] is True
    qc = qasm3.loads(paths[0].read_text())
    assert [r.name for r in qc.cregs] == [f"c_{r.name}" for r in qc.qregs] == ["c_system", "c_flag", "c_block"]
