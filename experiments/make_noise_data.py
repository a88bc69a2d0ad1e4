"""Write the 8-point test sets of the gate-noise sweeps (fig9.toml, fig9b.toml).

Noisy read-out simulates every test point's circuits with trajectories (no amortised shortcut), so
the noise sweeps use 8 test points, every fifth row of the full test sets: the bundled demo's
(qgp/demo/ice_test.csv, an invented scenario) and the diabetes open data set's
(experiments/data/diabetes_test.csv, from make_open_data.py). Rerun to regenerate the files byte
for byte:

    python experiments/make_noise_data.py
"""

from pathlib import Path

HERE = Path(__file__).parent
SOURCES = {
    "ice_test_8.csv": HERE.parent / "qgp" / "demo" / "ice_test.csv",
    "diabetes_test_8.csv": HERE / "data" / "diabetes_test.csv",
}
EVERY = 5
POINTS = 8


def main() -> None:
    for name, source in SOURCES.items():
        header, *rows = source.read_text().splitlines()
        (HERE / "data" / name).write_text("\n".join([header, *rows[::EVERY][:POINTS]]) + "\n")


if __name__ == "__main__":
    main()
