"""Regenerate the bundled demo data (qgp/demo/*.csv): an invented scenario, for the demo only.

Scenario: a limnology class drills 16 auger holes along a 400 m transect across a frozen lake
and records ice thickness; a spring-fed inflow near 250 m thins the ice. The test file holds
a 41-point grid along the same transect with "true" thicknesses from the same invented law.

    python experiments/make_demo_data.py
"""

from pathlib import Path

import numpy as np


def thickness_cm(distance_m: np.ndarray) -> np.ndarray:
    """The invented law: a slow undulation minus a dip over the inflow."""
    return 32.0 + 6.0 * np.sin(distance_m / 60.0) - 7.0 * np.exp(-(((distance_m - 250.0) / 35.0) ** 2))


def main() -> None:
    rng = np.random.default_rng(7)
    out = Path(__file__).resolve().parents[1] / "qgp" / "demo"
    x_train = np.sort(rng.uniform(0.0, 400.0, size=16)).round(1)
    y_train = (thickness_cm(x_train) + rng.normal(0.0, 0.6, size=16)).round(2)
    x_test = np.linspace(0.0, 400.0, 41)
    y_test = thickness_cm(x_test).round(3)
    with open(out / "ice_train.csv", "w") as fh:
        fh.write("distance_m,ice_cm\n")
        fh.writelines(f"{a:.1f},{b:.2f}\n" for a, b in zip(x_train, y_train))
    with open(out / "ice_test.csv", "w") as fh:
        fh.write("distance_m,ice_cm\n")
        fh.writelines(f"{a:.1f},{b:.3f}\n" for a, b in zip(x_test, y_test))


if __name__ == "__main__":
    main()
