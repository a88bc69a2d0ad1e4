"""The `qgp` command: a thin layer over the Python API (no logic lives only here).

Errors exit non-zero with one readable line; `--debug` shows the traceback.
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import sys
from pathlib import Path

from qgp import __version__
from qgp.errors import QgpError
from qgp.progress import show_bars, write

__all__ = ["main", "build_parser"]


def _config_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", nargs="?", type=Path, help="config file (TOML); see docs/config.md")
    p.add_argument("--demo", action="store_true", help="use the bundled demo config instead")


def _report_args(p: argparse.ArgumentParser, files: str) -> None:
    """CONFIG/--demo and the output-folder options of a command that writes a report folder (``files``)."""
    _config_arg(p)
    p.add_argument("--out", type=Path, required=True, help="output folder (created if missing; earlier outputs are kept unless --force)")
    p.add_argument("--force", action="store_true", help=f"overwrite {files} in --out")
    p.add_argument("--no-figures", action="store_true", help="write the CSV and JSON files only")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")


def _resolve_config(args) -> Path:
    from qgp.demo import demo_config_path

    if args.demo and args.config is not None:
        raise QgpError("give a CONFIG file or --demo, not both")
    if args.demo:
        return demo_config_path()
    if args.config is None:
        raise QgpError("no config given; pass a CONFIG file (TOML) or --demo for the bundled example")
    return args.config


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="qgp",
        description="Simulate quantum-assisted Gaussian-process regression and compare it with the exact GP.",
    )
    parser.add_argument("--version", action="version", version=f"qgp {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on errors")
    parser.add_argument("-v", "--verbose", action="count", default=0, help="more progress detail (the qgp logger at DEBUG)")
    parser.add_argument(
        "--style", action="append", default=[], metavar="MPLSTYLE",
        help="a matplotlib style sheet (file or style name) drawn on top of qgp's figure style; repeatable",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser(
        "inspect",
        help="describe the regularised kernel system and the circuit a config implies",
        description="Print n, padded size, eigenvalue range (exact and bound), condition number, "
        "sparsity, noise, and the qubits and statevector memory of the inversion circuit.",
    )
    _config_arg(p)
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.set_defaults(handler=_cmd_inspect)

    p = sub.add_parser(
        "run",
        help="estimate the predictive mean and variance with the circuits and compare with the exact GP",
        description="Build and simulate the inversion circuits for a config and write predictions.csv, "
        "summary.json and figures/ into --out.",
    )
    _config_arg(p)
    p.add_argument("--out", type=Path, required=True, help="output folder (created if missing; files of the same names are never replaced without --force)")
    p.add_argument("--force", action="store_true", help="overwrite predictions.csv, summary.json, COLUMNS.txt and figures/ in --out")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--no-figures", action="store_true", help="write predictions.csv and summary.json only (no figures/)")
    p.set_defaults(handler=_cmd_run)

    p = sub.add_parser(
        "export",
        help="write the inversion circuits as OpenQASM 3 with their resource counts",
        description="Write inversion.qasm (state preparation of y then the 1/λ inversion), inversion_sqrt.qasm "
        "(the 1/√λ circuit) and resources.json into --out, decomposed to the ['u', 'cx'] basis. With "
        "--test-point J also hadamard_test_J.qasm, the Hadamard test whose counts give the mean at test point J.",
    )
    _config_arg(p)
    p.add_argument(
        "--out", type=Path, required=True, help="output folder (created if missing; an earlier export is kept unless --force)"
    )
    p.add_argument("--force", action="store_true", help="overwrite files of an earlier export in --out")
    p.add_argument(
        "--measure",
        action="store_true",
        help="measure every register r at the end into a classical register c_r (for samplers)",
    )
    p.add_argument(
        "--test-point",
        type=int,
        metavar="J",
        help="also export the Hadamard test of test point J (0-based) and the constants of its mean",
    )
    p.set_defaults(handler=_cmd_export)

    p = sub.add_parser(
        "demo",
        help="run the bundled demo end to end and print a short table",
        description="Run the bundled demo config (an invented ice-thickness transect) end to end.",
    )
    p.add_argument("--out", type=Path, default=Path("qgp-demo"), help="output folder (default: ./qgp-demo)")
    p.add_argument("--force", action="store_true", help="overwrite the files of an earlier demo run in --out")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.set_defaults(handler=_cmd_demo)

    p = sub.add_parser(
        "sweep",
        help="run a grid of configs (a sweep file) into a resumable SQLite result store",
        description="Run every point of a sweep file's grid and store each in --store as it finishes; "
        "running the same command again skips finished points. --status STORE summarises a store.",
    )
    p.add_argument("sweep", nargs="?", type=Path, help="sweep file (TOML): base, [axes], [paired]")
    p.add_argument("--store", type=Path, help="result store (SQLite; created if missing)")
    p.add_argument("--workers", type=int, default=None, help="worker processes (default: the number of cores)")
    p.add_argument(
        "--cluster",
        metavar="ADDRESS",
        help="run on a Dask scheduler at ADDRESS (tcp://host:8786), or 'local' for a LocalCluster "
        "(needs pip install 'qgp[cluster]')",
    )
    p.add_argument("--retry-failed", action="store_true", help="rerun points stored as failed")
    p.add_argument("--status", type=Path, metavar="STORE", help="summarise a store (done, failed, pending) and exit")
    p.add_argument(
        "--dry-run", action="store_true",
        help="print every point's strategy, qubits, memory and estimated seconds, the total and the points the memory "
        "guard would refuse; run nothing (no --store needed)",
    )
    p.add_argument("--quiet", action="store_true", help="no progress bar on stderr")
    p.set_defaults(handler=_cmd_sweep)

    p = sub.add_parser(
        "results",
        help="export a sweep's result store as a tidy CSV table",
        description="Write one row per done grid point (axes columns, then summary scalars), or with "
        "--test-points one row per test point of each done grid point.",
    )
    p.add_argument("store", type=Path, help="result store written by qgp sweep")
    p.add_argument("--csv", type=Path, required=True, help="output CSV file (never the store; an existing file only with --force)")
    p.add_argument("--test-points", action="store_true", help="one row per test point instead of per grid point")
    p.add_argument("--force", action="store_true", help="overwrite an existing --csv file")
    p.set_defaults(handler=_cmd_results)
    p = sub.add_parser(
        "figures",
        help="draw the publication figures of a sweep's result store",
        description="Draw every figure the store has data for (PDF, 300-dpi PNG, CSV of the plotted numbers, "
        "caption) and say why the others were skipped.",
    )
    p.add_argument("store", type=Path, help="result store (SQLite) written by qgp sweep")
    p.add_argument("--out", type=Path, required=True, help="output folder for the figures")
    p.add_argument("--only", nargs="+", metavar="FIG", help="draw only these figures (fig1 … fig9)")
    p.add_argument("--force", action="store_true", help="overwrite figure files already in --out")
    p.set_defaults(handler=_cmd_figures)
    p = sub.add_parser(
        "scale",
        help="how κ and sparsity grow with n on your data, and a fault-tolerant cost against the classical GP",
        description="Audit κ, sparsity, norms and block-encoding α of K + σ²I on nested subsets n = 64, 128, … of the "
        "data (exact κ up to n = 8192, Lanczos beyond for sparse kernels), fit their growth, and estimate the "
        "surface-code cost of each inversion method against Cholesky and conjugate gradients for n = 10² … 10⁶. "
        "Writes conditioning.csv, costs.csv, scale.json and figures/ into --out. --demo uses the bundled radar survey.",
    )
    _report_args(p, "conditioning.csv, costs.csv, scale.json and figures/")
    p.add_argument(
        "--order", choices=("permutation", "file"), default=None,
        help="nested subsets: the first n rows of the [data] subsample_seed permutation (default) or of the file",
    )
    p.set_defaults(handler=_cmd_scale)

    p = sub.add_parser(
        "fit",
        help="the log marginal likelihood from the circuits, and hyperparameters learned with it (ML-II)",
        description="Estimate log p(y|X) term by term from the circuits (yᵀA⁻¹y from the inversion circuits, log det A "
        "from phase estimation or a QSVT log polynomial on the maximally mixed state) at each circuit size, run ML-II "
        "on the circuits' estimate beside the exact ML-II, and write fit.json, sizes.csv, surface.csv and figures/ "
        "into --out. --demo uses the bundled ice-thickness transect.",
    )
    _report_args(p, "fit.json, sizes.csv, surface.csv and figures/")
    p.set_defaults(handler=_cmd_fit)

    p = sub.add_parser(
        "bench",
        help="measure qgp's speed on this machine (ratios side by side in one run)",
        description="Time the amortised strategy against per-point inference, against the exact GP, the "
        "simulation against qubits, and a sweep with 1 and 2 workers; print a table with the goals beside.",
    )
    p.add_argument("--quick", action="store_true", help="smaller cases (under 2 minutes on 2 cores)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    p.set_defaults(handler=_cmd_bench)
    return parser


def _cmd_figures(args) -> int:
    from qgp.sweeps.figures import figures_command

    return figures_command(args.store, args.out, only=args.only, force=args.force)


def _fmt(x) -> str:
    if x is None:
        return "—"
    if isinstance(x, float):
        return "inf" if math.isinf(x) else f"{x:.6g}"
    return str(x)


def _cmd_inspect(args) -> int:
    from qgp.config import load_config
    from qgp.reports.inspection import inspect_problem, simulation_rows
    from qgp.classical.problem import problem_from_config

    cfg = load_config(_resolve_config(args))
    info = inspect_problem(problem_from_config(cfg), cfg.circuit, cfg.readout)
    if args.json:
        print(json.dumps(info, indent=2))
        return 0
    q = info["qubits"]
    k = info["kernel"]
    rows = [
        ("config", str(cfg.source)),
        ("training points n", info["n_train"]),
        ("test points", info["n_test"]),
        ("input dimension", info["input_dimension"]),
        ("padded size", info["padded_size"]),
        ("kernel", ", ".join(f"{a}={_fmt(b)}" for a, b in k.items())),
        ("noise variance σ²", f"{_fmt(info['noise_variance'])} ({info['noise_source']})"),
        ("prior mean", f"{_fmt(info['prior_mean'])} (training mean subtracted)" if info["center"] else "0"),
        ("eigenvalues of A (exact)", f"[{_fmt(info['eigenvalue_min'])}, {_fmt(info['eigenvalue_max'])}]"),
        (
            "eigenvalue bounds",
            f"[{_fmt(info['eigenvalue_bound_lower'])}, {_fmt(info['eigenvalue_bound_upper'])}]",
        ),
        ("condition number κ", f"{_fmt(info['condition_number'])} (bound {_fmt(info['condition_number_bound'])})"),
        ("sparsity s", info["sparsity"]),
        (
            "qubits",
            f"{q['total']} = system {q['system']} + clock {q['clock']} + flag {q['flag']} + block {q['block']}"
            + (" (block: upper bound)" if info["simulations"]["block_qubits_is_bound"] else ""),
        ),
        ("statevector memory", f"{info['statevector_bytes'] / 2**20:.3g} MiB (the inversion circuit alone)"),
        *simulation_rows(info),
    ]
    width = max(len(a) for a, _ in rows)
    for a, b in rows:
        print(f"{a:<{width}}  {b}")
    print(f"\nnote: {info['caveat']}")
    return 0


def _run_to(cfg_path: Path, out: Path, *, force: bool, quiet: bool, figures: bool = True):
    """(config, result, summary document, folder) of `qgp.reports.run.run_result`."""
    from qgp.config import load_config
    from qgp.reports.run import run_result

    cfg = load_config(cfg_path)
    return (cfg, *run_result(cfg, out, overwrite=force, quiet=quiet, figures=figures))


def _cmd_run(args) -> int:
    from qgp.reports.advice import run_advice

    figures = not args.no_figures
    cfg, result, doc, out = _run_to(_resolve_config(args), args.out, force=args.force, quiet=args.quiet, figures=figures)
    print(
        f"wrote {out / 'predictions.csv'}, {out / 'summary.json'}"
        + (f" and {out / 'figures'}/" if figures else " (no figures: --no-figures)")
    )
    _print_run(doc, out)
    for line in run_advice(cfg, result.problem, doc):
        print(line, file=sys.stderr)
    return 0


def _pair(d: dict | None) -> str:
    if not isinstance(d, dict) or d.get("exact") is None:
        return "n/a (no test targets)"
    return f"exact {_fmt(d['exact'])}, quantum {_fmt(d['quantum'])}"


def _print_run(doc: dict, out: Path) -> None:
    """The table `qgp run` and `qgp demo` print from a run's summary document."""
    rows = [
        ("condition number κ", f"{_fmt(doc['condition_number'])} (σ² = {_fmt(doc['noise_variance'])}, {doc['noise_source']})"),
        ("qubits (total)", f"{doc['total_qubits']} = system {doc['system_qubits']} + clock {doc['clock_qubits']} "
         f"+ ancillas {doc['ancilla_qubits']}"),
        ("circuit", f"{doc['evolution'] or 'QSVT'} oracle, {doc['encoding'] or 'no'} encoding"),
        ("mean: max |error|", f"{_fmt(doc['mean_max_abs_error'])} (relative RMSE {_fmt(doc['mean_rel_rmse'])})"),
        ("variance: max |error|", f"{_fmt(doc['variance_max_abs_error'])} (relative RMSE {_fmt(doc['variance_rel_rmse'])})"),
        ("test RMSE", _pair(doc.get("test_rmse"))),
        ("test NLPD", _pair(doc.get("test_nlpd"))),
        ("success probability", f"{_fmt(doc['success_probability_mean'])} (Hadamard test), "
         f"{_fmt(doc['success_probability_inversion'])} (inversion alone)"),
        ("files", str(out)),
    ]
    width = max(len(a) for a, _ in rows)
    for a, b in rows:
        print(f"{a:<{width}}  {b}")
    print(f"\nnote: {doc['caveat']}")


def _cmd_export(args) -> int:
    from qgp.config import load_config
    from qgp.reports.export import export_config

    paths = export_config(
        load_config(_resolve_config(args)), args.out, measure=args.measure, test_point=args.test_point, force=args.force
    )
    for path in paths:
        print(f"wrote {path}")
    return 0


def _cmd_scale(args) -> int:
    from qgp.config import load_config
    from qgp.demo import scale_config_path
    from qgp.reports.scale import run_scale

    if args.demo and args.config is not None:
        raise QgpError("give a CONFIG file or --demo, not both")
    path = scale_config_path() if args.demo else _resolve_config(args)
    doc = run_scale(
        load_config(path), args.out, overwrite=args.force, figures=not args.no_figures, quiet=args.quiet, order=args.order
    )
    print(f"wrote {args.out}/conditioning.csv, costs.csv, scale.json" + ("" if args.no_figures else " and figures/"))
    for quantity in ("condition_number", "sparsity", "norm_frobenius", "alpha_sparse_access"):
        fit = doc["fits"][quantity]
        if "exponent" in fit:
            print(f"{quantity:>20}: n^{fit['exponent']:.3f}  (95% CI {fit['ci_low']:.3f} … {fit['ci_high']:.3f}, {fit['n_points']} sizes)")
        else:
            print(f"{quantity:>20}: not fitted ({fit['skipped']})")
    print(f"κ growth: {doc['kappa_exponent_vs_lower_bound']}")
    for method, text in doc["crossover_text"].items():
        print(f"crossover {method:>6}: {text}")
    return 0


def _cmd_fit(args) -> int:
    from qgp.config import load_config
    from qgp.reports.fit import run_fit

    path = _resolve_config(args)
    doc = run_fit(load_config(path), args.out, overwrite=args.force, figures=not args.no_figures, quiet=args.quiet)
    print(f"wrote {args.out}/fit.json, sizes.csv, surface.csv" + ("" if args.no_figures else " and figures/"))
    lml = doc["log_marginal_likelihood"]
    se = "" if lml["quantum_se"] is None else f" ± {lml['quantum_se']:.3g}"
    print(f"log marginal likelihood at the config: exact {lml['exact']:.4f}, circuits {lml['quantum']:.4f}{se}")
    for term in ("data_fit", "log_determinant"):
        t = lml[term]
        print(f"  {term:>16}: exact {t['exact']:.4f}, circuits {t['quantum']:.4f} (error {t['quantum'] - t['exact']:+.3g})")
    for which in ("exact", "exact_within_limit", "quantum"):
        o = doc["optimum"][which]
        ell = o["lengthscale"]
        ell = ", ".join(f"{v:.4g}" for v in ell) if isinstance(ell, list) else f"{ell:.4g}"
        nlpd = "n/a" if o["test_nlpd"] is None else f"{o['test_nlpd']:.4f}"
        print(f"optimum {which:>18}: ℓ = {ell}, s² = {o['signal_variance']:.4g}, σ² = {o['noise_variance']:.4g}, "
              f"LML = {o['log_marginal_likelihood']:.4f}, test NLPD = {nlpd}")
    return 0


def _cmd_demo(args) -> int:
    from qgp.demo import demo_config_path

    _, _, doc, out = _run_to(demo_config_path(), args.out, force=args.force, quiet=args.quiet)
    _print_run(doc, out)
    return 0


def _cmd_sweep(args) -> int:
    from qgp.sweeps.execute import run_sweep
    from qgp.sweeps.export import format_status, store_status
    from qgp.sweeps.grid import load_sweep

    if args.status is not None:
        if args.sweep is not None or args.store is not None:
            raise QgpError("--status STORE summarises a store on its own; drop the sweep file and --store")
        print(format_status(store_status(args.status)))
        return 0
    if args.sweep is None:
        raise QgpError("no sweep file given; run `qgp sweep SWEEP.toml --store RESULTS.sqlite` (or --status STORE)")
    if args.dry_run:
        from qgp.readout.simulate import cpu_count
        from qgp.sweeps.dry_run import dry_run, format_dry_run

        estimates = dry_run(load_sweep(args.sweep))
        print(format_dry_run(estimates, args.workers or cpu_count()))
        return 0
    if args.store is None:
        raise QgpError("no --store given; name the result file, e.g. --store results.sqlite")
    report = run_sweep(
        load_sweep(args.sweep),
        args.store,
        workers=args.workers,
        cluster=args.cluster,
        retry_failed=args.retry_failed,
        progress=not args.quiet,
    )
    print(
        f"{report.store}: {report.grid_size} grid points, {report.store_done} done, {report.store_failed} failed, "
        f"{report.store_pending} pending (this run: {report.done} done, {report.failed} failed, "
        f"{report.skipped} skipped as already stored, {report.wall_seconds:.1f} s)"
    )
    if report.store_failed:
        print(
            f"qgp: {report.store_failed} point(s) failed; see `qgp sweep --status {report.store}` and rerun "
            "them with --retry-failed",
            file=sys.stderr,
        )
        return 1
    return 0


def _cmd_results(args) -> int:
    from qgp.sweeps.export import export_csv

    n = export_csv(args.store, args.csv, test_points=args.test_points, force=args.force)
    print(f"wrote {n} row(s) to {args.csv}")
    return 0


def _cmd_bench(args) -> int:
    from qgp.tools.bench import FULL, QUICK, format_table, run_bench

    doc = run_bench(QUICK if args.quick else FULL)
    print(json.dumps(doc, indent=2) if args.json else format_table(doc))
    return 0


class _StderrHandler(logging.Handler):
    """Progress on whatever sys.stderr is at the time of each message (so captured streams see it),
    written past any progress bar being drawn."""

    def emit(self, record: logging.LogRecord) -> None:
        write(f"qgp: {record.getMessage()}")


def _logging(args):
    """Attach the ``"qgp"`` logger's stderr handler and switch progress bars on for one command (INFO;
    neither with --quiet; DEBUG with -v); returns the function that restores both, so library calls
    after it stay silent."""
    logger = logging.getLogger("qgp")
    saved = (logger.level, logger.propagate)
    quiet = getattr(args, "quiet", False)
    handler = None if quiet else _StderrHandler()
    bars_before = show_bars(not quiet)
    if handler is not None:
        logger.addHandler(handler)
        logger.setLevel(logging.DEBUG if getattr(args, "verbose", 0) else logging.INFO)
        logger.propagate = False

    def restore() -> None:
        if handler is not None:
            logger.removeHandler(handler)
        logger.setLevel(saved[0])
        logger.propagate = saved[1]
        show_bars(bars_before)

    return restore


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "handler", None) is None:
        parser.print_help()
        return 2
    restore = _logging(args)
    try:
        if args.style:
            from qgp.reports.figures import use_style

            use_style(*args.style)
        return int(args.handler(args) or 0)
    except QgpError as exc:
        if args.debug:
            raise
        print(f"qgp: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("qgp: interrupted", file=sys.stderr)
        return 130
    finally:
        restore()
        if args.style:  # the command's own: library calls after it draw in qgp's style again
            from qgp.reports.figures import use_style

            use_style()


if __name__ == "__main__":
    sys.exit(main())
