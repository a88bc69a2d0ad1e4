"""Regenerate experiments/data/transect_1024.csv: the demo's invented ice transect, drilled densely.

The scaling figure (fig. 7) grows the training set at fixed hyperparameters. The bundled demo
has only 16 holes, so this file holds 1024 holes along the same 400 m transect, thickness from
the same invented law as `make_demo_data.py` plus the same N(0, 0.6²) cm measurement noise.
Rows are in drilling (random) order; `[data] n_train` takes nested reproducible subsets of them.
Test points: the demo's qgp/demo/ice_test.csv.

    python experiments/make_scaling_data.py
"""

from pathlib import Path

import numpy as np

from make_demo_data import thickness_cm

N_HOLES = 1024


def main() -> None:
    rng = np.random.default_rng(2505)
    # Distinct positions on a 1 mm grid: a repeated input would make K singular for σ² = 0.
    x = rng.choice(400_000, size=N_HOLES, replace=False) / 1000.0
    y = (thickness_cm(x) + rng.normal(0.0, 0.6, size=N_HOLES)).round(2)
    out = Path(__file__).resolve().parent / "data" / "transect_1024.csv"
    out.parent.mkdir(exist_ok=True)
    with open(out, "w") as fh:
        fh.write("distance_m,ice_cm\n")
        fh.writelines(f"{a:.3f},{b:.2f}\n" for a, b in zip(x, y))


if __name__ == "__main__":
    main()
