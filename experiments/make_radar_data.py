"""Regenerate qgp/demo/ice_radar.csv.gz: the demo's lake surveyed by ground-penetrating radar.

Invented scenario, for the demo only: after the 16 auger holes, the class tows a radar sled back
and forth along the same 400 m transect and picks ice thickness from 2^17 traces. Positions are
distinct on a 1 mm grid (a repeated input makes K singular for σ² = 0); thickness follows the
demo's invented law (`make_demo_data.thickness_cm`) plus N(0, 1.5²) cm picking noise. Rows are in
acquisition-shuffled (random) order, so `qgp scale --order file` also gives spread-out subsets.
It is the data behind `qgp scale --demo`: nested subsets of n = 64 … 2^17 points on a fixed
transect (infill), where κ of K + σ²I grows with n.

    python experiments/make_radar_data.py
"""

import gzip
from pathlib import Path

import numpy as np

from make_demo_data import thickness_cm

N_TRACES = 2**17


def main() -> None:
    rng = np.random.default_rng(1802)
    x = rng.choice(400_000, size=N_TRACES, replace=False) / 1000.0
    y = (thickness_cm(x) + rng.normal(0.0, 1.5, size=N_TRACES)).round(1)
    out = Path(__file__).resolve().parents[1] / "qgp" / "demo" / "ice_radar.csv.gz"
    # mtime=0: the same bytes on every run, so a regenerated file shows no change in git.
    with open(out, "wb") as raw, gzip.GzipFile(fileobj=raw, mode="wb", mtime=0) as gz:
        gz.write(b"distance_m,ice_cm\n")
        gz.write("".join(f"{a:.3f},{b:.1f}\n" for a, b in zip(x, y)).encode())


if __name__ == "__main__":
    main()
