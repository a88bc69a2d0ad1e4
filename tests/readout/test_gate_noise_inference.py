"""Quantum GP inference under gate noise ([gate_noise]): the noisy answers, their outside references."""

from pathlib import Path

import numpy as np
import pytest
from qiskit import qasm3
from scipy.stats import chi2

from qgp.classical.problem import problem_from_config
from qgp.config import load_config
from qgp.errors import QgpError
from qgp.readout.inference import infer
from qgp.readout.noise import event_probabilities
from qgp.reports.export import export_config
from qgp.settings import GateNoise, ReadoutSettings

CIRCUITS = {
    "walk": "clock_qubits = 3\n",
    "qsvt": 'method = "qsvt"\ndegree = 5\n',
}


def _config(folder: Path, circuit: str, noise: str = "") -> Path:
    """Three training points of a smooth curve (pad to m = 2), two test points, κ(A) = 10."""
    rng = np.random.default_rng(5)
    x = np.sort(rng.uniform(0.0, 10.0, 3))
    y = np.sin(x) + 0.1 * rng.normal(size=3)
    (folder / "train.csv").write_text("x,y\n" + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(x, y)))
    (folder / "test.csv").write_text("x,y\n2.5,0.6\n7.0,0.7\n")
    path = folder / "noisy.toml"
    path.write_text(
        '[data]\ntrain = "train.csv"\ntest = "test.csv"\ntarget = "y"\n\n[kernel]\nlengthscale = 2.0\n\n'
        f"[noise]\ntarget_condition = 10.0\n\n[circuit]\n{circuit}\n" + (f"[gate_noise]\n{noise}" if noise else "")
    )
    return path


def _run(cfg, gate_noise=None, readout=ReadoutSettings()):
    return infer(problem_from_config(cfg), cfg.circuit, readout, gate_noise=gate_noise, progress=None)


@pytest.mark.parametrize("name", list(CIRCUITS))
@pytest.mark.parametrize("method", ["density_matrix", "trajectories", "effective"])
def test_zero_noise_reproduces_the_noiseless_answer(tmp_path, name, method):
    # The requirement (p = 0 ⇒ the noiseless answer to 1e-12): a zero-probability channel is
    # the identity (Nielsen & Chuang eq. 8.102 with p = 0).
    cfg = load_config(_config(tmp_path, CIRCUITS[name]))
    clean = _run(cfg)
    noisy = _run(cfg, GateNoise(method=method, trajectories=20))
    for ours, ref in ((noisy.mean_quantum, clean.mean_quantum), (noisy.variance_quantum, clean.variance_quantum)):
        worst = np.max(np.abs(ours - ref))
        assert worst < 1e-12, f"worst residual {worst:.3g}"
    assert np.array_equal(noisy.mean_noiseless, clean.mean_quantum)
    assert noisy.error_budget["order"][-1] == "gate_noise"


@pytest.mark.parametrize("name", list(CIRCUITS))
def test_density_matrix_equals_aer_on_the_exported_file(tmp_path, name):
    # Reference: qiskit-aer's density-matrix simulator on the file `qgp export --test-point 0` writes,
    # loaded by qiskit.qasm3.loads, with the same NoiseModel. Two-qubit and read-out noise only: the
    # file is written in (u, cx) and the noise basis has (rz, sx, x, cx), so one-qubit gate counts
    # differ by construction while the cx gates are the same lowering of the same pieces.
    spec = GateNoise(method="density_matrix", two_qubit=0.01, readout=0.02)
    cfg = load_config(_config(tmp_path, CIRCUITS[name]))
    result = _run(cfg, spec)
    export_config(cfg, tmp_path / "out", test_point=0)
    loaded = qasm3.loads((tmp_path / "out" / "hadamard_test_0.qasm").read_text())
    index = {r.name: [loaded.find_bit(q).index for q in r] for r in loaded.qregs}
    rest = {q: 0 for name_, qs in index.items() if name_ not in ("system", "probe", "flag") for q in qs}
    events = [{index["probe"][0]: b, index["flag"][0]: 1, **rest} for b in (0, 1)]
    ref = event_probabilities([loaded], [events], spec).probabilities[0]
    ours = np.array([result.noisy.p0[0], result.noisy.p1[0]])
    worst = np.max(np.abs(ours - ref))
    assert worst < 1e-10, f"worst residual {worst:.3g}: ours {ours}, Aer on the file {ref}"
    assert np.max(np.abs(ours - [result.p0[0], result.p1[0]])) > 1e-3  # the noise is visible


def test_trajectories_agree_with_the_density_matrix_within_their_error(tmp_path):
    # Reference: the density matrix (Aer, exact); trajectories are its Monte-Carlo estimate, normal
    # about it by the central limit theorem: Σ z² over the answers is χ²-distributed.
    cfg = load_config(_config(tmp_path, CIRCUITS["walk"]))
    exact = _run(cfg, GateNoise(method="density_matrix", two_qubit=2e-3, one_qubit=2e-4))
    traj = _run(cfg, GateNoise(method="trajectories", two_qubit=2e-3, one_qubit=2e-4, trajectories=400, seed=3))
    z = np.concatenate(
        [
            (traj.mean_quantum - exact.mean_quantum) / traj.mean_trajectory_se,
            (traj.variance_quantum - exact.variance_quantum) / traj.variance_trajectory_se,
        ]
    )
    assert np.all(np.isfinite(z)) and np.sum(z**2) < chi2.ppf(0.999, z.size), z


def test_shots_on_noisy_probabilities_add_their_error_in_quadrature(tmp_path):
    # Independent error sources add in variance (common practice); shots are drawn from the noisy
    # probabilities, so the shot SE is that of the noisy answer.
    cfg = load_config(_config(tmp_path, CIRCUITS["walk"]))
    spec = GateNoise(method="trajectories", two_qubit=1e-3, trajectories=50, seed=1)
    r = _run(cfg, spec, ReadoutSettings(shots=2000, seed=4))
    assert np.allclose(r.mean_quantum_se, np.hypot(r.mean_shot_se, r.mean_trajectory_se), rtol=1e-12)
    assert r.error_budget["order"][-2:] == ["gate_noise", "shots"]
    again = _run(cfg, spec, ReadoutSettings(shots=2000, seed=4))
    assert np.array_equal(r.mean_quantum, again.mean_quantum)  # seeds fix noise and shots


def test_config_section_and_its_errors(tmp_path):
    path = _config(tmp_path, CIRCUITS["walk"], 'two_qubit = 1e-3\nmethod = "trajectories"\ntrajectories = 10\n')
    cfg = load_config(path)
    assert cfg.gate_noise == GateNoise(two_qubit=1e-3, method="trajectories", trajectories=10)
    assert load_config(_config(tmp_path, CIRCUITS["walk"])).gate_noise is None
    for body, words in [
        ("two_qubit = 1.5\n", "[0, 1]"),
        ('method = "mps"\n', "method"),
        ('basis = ["rz", "sx", "x"]\n', "two-qubit gate"),
        ('basis = ["rz", "ccx", "cx"]\n', "more than two qubits"),
        ("trajectories = 0\n", "trajectories"),
        ("colour = 1\n", "unknown key"),
    ]:
        with pytest.raises(QgpError, match=None) as err:
            load_config(_config(tmp_path, CIRCUITS["walk"], body))
        msg = str(err.value)
        assert words in msg and "\n" not in msg, msg


def test_density_matrix_refused_before_building_when_too_large(tmp_path):
    cfg = load_config(_config(tmp_path, "clock_qubits = 8\n"))
    with pytest.raises(QgpError, match="density matrix"):
        infer(
            problem_from_config(cfg),
            cfg.circuit,
            ReadoutSettings(memory_cap_bytes=2**28),
            gate_noise=GateNoise(method="density_matrix", two_qubit=1e-3),
            progress=None,
        )


def test_run_writes_the_noisy_and_noiseless_columns(tmp_path):
    # The outputs (noisy beside noiseless): predictions.csv columns and the summary record.
    import csv
    import json

    from qgp.reports.run import run_config

    cfg = load_config(_config(tmp_path, CIRCUITS["walk"], "two_qubit = 1e-3\ntrajectories = 20\n"))
    run_config(cfg, tmp_path / "out", quiet=True, figures=False)
    with open(tmp_path / "out" / "predictions.csv") as fh:
        rows = list(csv.DictReader(fh))
    for column in ("mean_noiseless", "mean_trajectory_se", "success_probability_noisy", "mean_quantum_se"):
        assert column in rows[0], column
    doc = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert doc["gate_noise"]["two_qubit"] == 1e-3 and doc["gate_noise"]["method"] == "effective"
    assert doc["error_budget"]["order"][-1] == "gate_noise"
    worst = max(abs(float(r["mean_quantum"]) - float(r["mean_noiseless"])) for r in rows)
    assert worst > 0  # 1e-3 per gate on hundreds of two-qubit gates moves the answer
