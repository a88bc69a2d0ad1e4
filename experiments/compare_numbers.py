"""Do two qgp source trees produce the same numbers? (Before/after check of a refactor.)

    python experiments/compare_numbers.py BEFORE_TREE AFTER_TREE [--json OUT.json]

Each tree is a checkout of this repository (e.g. `git worktree add /tmp/before <commit>`). The
script writes one set of configs (the bundled demo with each oracle and encoding, both strategies,
exact probabilities and 1000 shots) and runs, for each tree in its own Python process with that
tree first on the path, `qgp run` and `qgp export` through the command line only — the one
interface both trees share — then compares:

* ``predictions.csv``: byte for byte;
* ``summary.json``: every value, except run-time bookkeeping (``elapsed_seconds``, ``timings``,
  ``versions``) and keys only one tree writes (listed, not compared);
* ``resources.json``: every value, except ``versions`` and ``platform``; the ``.qasm`` files byte for
  byte, or, where only `//` comment lines differ (the header names the writing module), reported as such.

Prints one line per case and exits 1 if any number differs.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "qgp" / "demo"

CIRCUITS = {
    "walk-dilation": 'clock_qubits = 6\nevolution = "walk"\nencoding = "dilation"',
    "walk-lcu": 'clock_qubits = 4\nevolution = "walk"\nencoding = "lcu"',
    "exact": 'clock_qubits = 6\nevolution = "exact"',
    "trotter": 'clock_qubits = 5\nevolution = "trotter"\ntrotter_steps = 2',
}
READOUTS = {
    "amortised-exact": 'shots = 0\nstrategy = "amortised"',
    "amortised-shots": 'shots = 1000\nseed = 3\nstrategy = "amortised"',
    "per-point-exact": 'shots = 0\nstrategy = "per-point"',
    "per-point-shots": 'shots = 1000\nseed = 3\nstrategy = "per-point"',
}
VOLATILE = {"elapsed_seconds", "timings", "versions", "platform"}

# An editable install's import hook would serve modules missing from the tree on PYTHONPATH from the
# installed tree (a mix of both); it is removed, and the tree checked, before anything of qgp loads.
_RUNNER = """
import importlib, os, sys
sys.meta_path = [f for f in sys.meta_path if "editable" not in (getattr(f, "__module__", "") or "").lower()]
import qgp
assert os.path.realpath(qgp.__file__).startswith(os.path.realpath(os.environ["PYTHONPATH"])), qgp.__file__
for name in ("qgp.tools.cli", "qgp.cli"):
    try:
        cli = importlib.import_module(name)
        break
    except ImportError:
        continue
sys.exit(cli.main(sys.argv[1:]))
"""


def _configs(folder: Path) -> dict[str, Path]:
    out = {}
    for c_name, circuit in CIRCUITS.items():
        for r_name, readout in READOUTS.items():
            text = (
                f'[data]\ntrain = "{DEMO / "ice_train.csv"}"\ntest = "{DEMO / "ice_test.csv"}"\ntarget = "ice_cm"\n'
                '[kernel]\nfamily = "rbf"\nlengthscale = 45.0\namplitude = 16.0\n'
                f"[noise]\ntarget_condition = 20.0\n[circuit]\n{circuit}\n[readout]\n{readout}\n"
            )
            path = folder / f"{c_name}__{r_name}.toml"
            path.write_text(text)
            out[path.stem] = path
    return out


def _qgp(tree: Path, *args: str) -> None:
    env = {**os.environ, "PYTHONPATH": str(tree)}
    done = subprocess.run([sys.executable, "-c", _RUNNER, *args], env=env, cwd=tree, capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"qgp {' '.join(args)} failed in {tree}:\n{done.stderr[-2000:]}")


def _run_tree(tree: Path, configs: dict[str, Path], out: Path) -> None:
    for name, cfg in configs.items():
        _qgp(tree, "run", str(cfg), "--out", str(out / name), "--quiet")
        if name.endswith("amortised-exact"):
            _qgp(tree, "export", str(cfg), "--out", str(out / name / "export"))


def _strip(doc, path=""):
    if isinstance(doc, dict):
        return {k: _strip(v, f"{path}.{k}") for k, v in doc.items() if k not in VOLATILE}
    if isinstance(doc, list):
        return [_strip(v, path) for v in doc]
    return doc


def _diff(a, b, path="") -> list[str]:
    """Differences between two JSON values; keys only one side has are reported as 'only in'."""
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for k in sorted(set(a) | set(b)):
            if k not in b:
                out.append(f"only before: {path}.{k}")
            elif k not in a:
                out.append(f"only after: {path}.{k}")
            else:
                out += _diff(a[k], b[k], f"{path}.{k}")
        return out
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in _diff(x, y, f"{path}[{i}]")]
    return [] if a == b else [f"differs: {path}: {a!r} → {b!r}"]


def compare(before: Path, after: Path, work: Path) -> dict:
    configs = _configs(work)
    for tree, name in ((before, "before"), (after, "after")):
        _run_tree(tree, configs, work / name)
    report = {}
    for name in configs:
        a, b = work / "before" / name, work / "after" / name
        same_csv = (a / "predictions.csv").read_bytes() == (b / "predictions.csv").read_bytes()
        sa = _strip(json.loads((a / "summary.json").read_text()))
        sb = _strip(json.loads((b / "summary.json").read_text()))
        for doc in (sa, sb):  # paths of the run folder differ by construction
            doc.pop("config_file", None)
        diffs = _diff(sa, sb)
        files = {}
        if (a / "export").exists():
            for f in sorted((a / "export").iterdir()):
                g = b / "export" / f.name
                if f.suffix == ".json":
                    files[f.name] = _diff(_strip(json.loads(f.read_text())), _strip(json.loads(g.read_text())))
                elif f.read_bytes() == g.read_bytes():
                    files[f.name] = []
                else:  # a header comment (`// …`) may name the module that wrote the file
                    strip = lambda t: [ln for ln in t.splitlines() if not ln.startswith("//")]  # noqa: E731
                    same = strip(f.read_text()) == strip(g.read_text())
                    files[f.name] = ["comment lines differ only"] if same else ["bytes differ"]
        report[name] = {
            "predictions_identical": same_csv,
            "summary_differences": [d for d in diffs if d.startswith("differs")],
            "summary_keys_added": [d for d in diffs if d.startswith("only after")],
            "summary_keys_removed": [d for d in diffs if d.startswith("only before")],
            "export_differences": {k: v for k, v in files.items() if v},
            "export_files_compared": sorted(files),
        }
    return report


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("before", type=Path)
    parser.add_argument("after", type=Path)
    parser.add_argument("--json", type=Path, help="write the report as JSON")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        report = compare(args.before.resolve(), args.after.resolve(), Path(tmp))
    bad = False
    for name, r in report.items():
        numbers = {k: v for k, v in r["export_differences"].items() if v != ["comment lines differ only"]}
        ok = r["predictions_identical"] and not r["summary_differences"] and not numbers
        ok = ok and not r["summary_keys_removed"]
        bad |= not ok
        extra = f"; keys added: {len(r['summary_keys_added'])}" if r["summary_keys_added"] else ""
        files = f"; export {len(r['export_files_compared'])} files" if r["export_files_compared"] else ""
        print(f"{'same' if ok else 'DIFFERENT'}  {name}{files}{extra}")
        for d in r["summary_differences"][:5] + r["summary_keys_removed"][:5]:
            print(f"    {d}")
        for f, d in r["export_differences"].items():
            print(f"    {f}: {d[:3]}")
    if args.json:
        args.json.write_text(json.dumps(report, indent=2) + "\n")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
