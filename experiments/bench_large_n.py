"""Seconds of `infer` against the number of training points (the n-scaling table of the speed issue).

    python experiments/bench_large_n.py [--n 64 128 256 512 1024] [--out experiments/results/large_n.txt]

Each size: invented smooth data (qgp.tools.bench_floor.large_n), 20 test points, c = 8, exact oracle,
strategy and engine "auto", cold caches; the table gives seconds, the strategy and engine that ran, the
largest simulated width and the split of the time. Absolute seconds move with the machine's load; the
load average is printed beside them.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from qgp.files import atomic_write_text  # noqa: E402
from qgp.tools.bench_floor import large_n  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, nargs="+", default=[64, 128, 256, 512, 1024])
    ap.add_argument("--out", type=Path)
    args = ap.parse_args()
    lines = [f"# n-scaling of infer (20 test points, c = 8, exact oracle, auto); load {os.getloadavg()[0]:.2f} at start",
             f"{'n':>6}  {'seconds':>8}  {'strategy':>9}  {'engine':>6}  {'qubits':>6}  {'runs':>5}  {'build s':>8}  {'simulate s':>10}  {'post s':>7}"]
    for n in args.n:
        r = large_n(n, 20, 8, say=lambda m: print(m, file=sys.stderr))
        runs = r["simulation_runs"]
        lines.append(
            f"{n:>6}  {r['seconds']:>8.3g}  {r['strategy']:>9}  {r['engine']:>6}  {max(x['qubits'] for x in runs):>6}  "
            f"{sum(x['runs'] for x in runs):>5}  {r['timings']['build']:>8.3g}  {r['timings']['simulate']:>10.3g}  "
            f"{r['timings']['post_process']:>7.3g}"
        )
        print(lines[-1], flush=True)
    lines.append(f"# load {os.getloadavg()[0]:.2f} at the end")
    if args.out:
        atomic_write_text(args.out, "\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
