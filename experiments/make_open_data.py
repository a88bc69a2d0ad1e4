"""Write experiments/data/diabetes_{train,test}.csv from scikit-learn's bundled diabetes data.

The open data set (Efron, Hastie, Johnstone & Tibshirani, "Least angle regression", Ann. Statist.
32 (2004); shipped with scikit-learn as ``sklearn.datasets.load_diabetes``): 442 patients, ten
baseline variables (mean-centred and scaled by scikit-learn), a disease-progression score one year
later. The QSVT comparison (fig8b.toml) uses three of the variables — body-mass index, mean blood
pressure and serum s5 — multiplied by √442 (unit variance), rows 0–15 for training and 16–55 for
testing. Rerun to regenerate the files byte for byte:

    python experiments/make_open_data.py
"""

from pathlib import Path

import numpy as np
from sklearn.datasets import load_diabetes

COLUMNS = ("bmi", "bp", "s5")


def main() -> None:
    data = load_diabetes()
    names = list(data.feature_names)
    X = data.data[:, [names.index(c) for c in COLUMNS]] * np.sqrt(data.data.shape[0])
    y = data.target
    out = Path(__file__).parent / "data"
    for name, rows in (("train", range(0, 16)), ("test", range(16, 56))):
        lines = [",".join((*COLUMNS, "progression"))]
        lines += [",".join(f"{v:.6f}" for v in (*X[i], y[i])) for i in rows]
        (out / f"diabetes_{name}.csv").write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
