"""InferenceResult's notebook face: a one-line repr and a DataFrame equal to predictions.csv."""

import csv

import numpy as np

from qgp.classical.problem import problem_from_config
from qgp.config import load_config
from qgp.demo import demo_config_path
from qgp.readout.inference import infer
from qgp.reports.run import write_predictions
from qgp.settings import CircuitSettings, ReadoutSettings


def test_dataframe_is_the_predictions_file_and_repr_is_one_line(tmp_path):
    problem = problem_from_config(load_config(demo_config_path()))
    result = infer(problem, CircuitSettings(clock_qubits=5), ReadoutSettings(shots=100, seed=3), progress=None)
    frame = result.to_dataframe()
    write_predictions(result, tmp_path / "predictions.csv")
    with open(tmp_path / "predictions.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == list(frame.columns)
    assert "mean_quantum_se" in frame.columns and "target" in frame.columns and frame.columns[0] == "distance_m"
    on_disk = np.array(rows[1:], dtype=float)
    assert np.array_equal(on_disk, frame.to_numpy(dtype=float))  # repr(float) round-trips exactly
    text = repr(result)
    assert "\n" not in text and len(text) < 300 and "n_test=41" in text
