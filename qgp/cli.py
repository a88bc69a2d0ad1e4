"""The `qgp` command: a thin layer over the Python API (no logic lives only here).

Errors exit non-zero with one readable line; `--debug` shows the traceback.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from . import __version__
from .errors import QgpError

__all__ = ["main", "build_parser"]


def _config_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument("config", nargs="?", type=Path, help="config file (TOML); see docs/config.md")
    p.add_argument("--demo", action="store_true", help="use the bundled demo config instead")


def _resolve_config(args) -> Path:
    from .demo import demo_config_path

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
    return parser


def _fmt(x) -> str:
    if x is None:
        return "—"
    if isinstance(x, float):
        return "inf" if math.isinf(x) else f"{x:.6g}"
    return str(x)


def _cmd_inspect(args) -> int:
    from .config import load_config
    from .inspection import inspect_problem
    from .problem import problem_from_config

    cfg = load_config(_resolve_config(args))
    info = inspect_problem(problem_from_config(cfg), cfg.circuit)
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
            f"{q['total']} = system {q['system']} + clock {q['clock']} + flag {q['flag']} + block {q['block']}",
        ),
        ("statevector memory", f"{info['statevector_bytes'] / 2**20:.3g} MiB"),
    ]
    width = max(len(a) for a, _ in rows)
    for a, b in rows:
        print(f"{a:<{width}}  {b}")
    print(f"\nnote: {info['caveat']}")
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "handler", None) is None:
        parser.print_help()
        return 2
    try:
        return int(args.handler(args) or 0)
    except QgpError as exc:
        if args.debug:
            raise
        print(f"qgp: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("qgp: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
