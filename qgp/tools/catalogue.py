"""The catalogue of reference circuits (`circuits/`), and the command that regenerates it.

    python -m qgp.tools.catalogue --catalogue circuits      (documented alias: python -m qgp.export …)

holds the published worked examples, the bundled demo and a QSVT circuit as ``<name>.qasm`` plus ``<name>.json``;
the command regenerates them in place. It also exports a config (``CONFIG --out DIR``), like
``qgp export``. A tool: nothing in the library imports it.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from qgp.circuits.algorithms import algorithm_of
from qgp.circuits.encoding import normalised_amplitudes
from qgp.circuits.inversion import build_inversion, postselected_system_amplitudes
from qgp.circuits.methods import method_of
from qgp.reports.export import (
    INVERSION_FILE,
    export_config,
    constants_document,
    exported_inversion,
    file_resources,
    gate_counts_by_origin,
    header_lines,
    projectors_of,
    reading_text,
    refuse_if_too_large,
)
from qgp.circuits.qasm import FORMAT_NOTE, to_qasm3
from qgp.circuits.resources import GateInversion
from qgp.environment import platform_info, qiskit_versions
from qgp.errors import QgpError
from qgp.files import atomic_write_text, check_outputs
from qgp.readout.simulate import run_statevector
from qgp.settings import CircuitSettings

__all__ = [
    "CATALOGUE",
    "REGENERATE_COMMAND",
    "CatalogueEntry",
    "catalogue_entry",
    "catalogue_document",
    "build_catalogue",
    "main",
]

CATALOGUE = ("cao2012_exact", "hhl_2x2_exact", "demo_walk_dilation", "qsvt_4x4_dilation")
REGENERATE_COMMAND = "python -m qgp.export --catalogue circuits"


# ---------------------------------------------------------------------------------------------
# The catalogue of reference circuits


@dataclass(frozen=True)
class CatalogueEntry:
    """One reference circuit: A, b, settings, the a-priori bounds and where they come from."""

    name: str
    title: str
    source: str
    A: np.ndarray
    b: np.ndarray
    b_note: str
    settings: CircuitSettings
    bounds: tuple[float, float]
    bounds_note: str
    note: str = ""


def _cao_matrix() -> np.ndarray:
    from qiskit.quantum_info import SparsePauliOp

    op = SparsePauliOp.from_list([("II", 3.75), ("XZ", 1.25), ("YY", 0.75), ("ZX", 2.25)])
    return np.real(op.to_matrix())


def catalogue_entry(name: str) -> CatalogueEntry:
    """The catalogue entry ``name`` (one of `CATALOGUE`)."""
    if name == "cao2012_exact":
        return CatalogueEntry(
            name=name,
            title="Cao, Daskin, Frankel & Kais (Mol. Phys. 110, 1675 (2012)) 4x4 worked example, exact oracle",
            source="A from its Pauli form 3.75*II + 1.25*XZ + 0.75*YY + 2.25*ZX (qiskit label order); eigenvalues 1, 2, 4, 8",
            A=_cao_matrix(),
            b=np.full(4, 0.5),
            b_note="b = (1, 1, 1, 1)/2, uniform (our choice)",
            settings=CircuitSettings(clock_qubits=4, evolution="exact", evolution_time=2 * np.pi / 16),
            bounds=(1.0, 8.0),
            bounds_note="the exact extreme eigenvalues 1 and 8: with t = 2*pi/16 every eigenvalue k sits on clock value k",
        )
    if name == "hhl_2x2_exact":
        return CatalogueEntry(
            name=name,
            title="2x2 HHL example [[1.5, 0.5], [0.5, 1.5]] (eigenvalues 1 and 2), exact oracle",
            source="the matrix of early photonic and NMR HHL experiments (from memory); A^-1 b = (3, -1)/4 for b = (1, 0)",
            A=np.array([[1.5, 0.5], [0.5, 1.5]]),
            b=np.array([1.0, 0.0]),
            b_note="b = (1, 0)",
            settings=CircuitSettings(clock_qubits=2, evolution="exact", evolution_time=2 * np.pi / 4),
            bounds=(1.0, 2.0),
            bounds_note="the exact eigenvalues 1 and 2: with t = 2*pi/4 they sit on clock values 1 and 2",
        )
    if name == "demo_walk_dilation":
        from qgp.config import load_config
        from qgp.demo import demo_config_path
        from qgp.classical.problem import problem_from_config
        from qgp.classical.system import eigenvalue_bounds

        cfg = load_config(demo_config_path())
        problem = problem_from_config(cfg)
        A = problem.A_padded
        return CatalogueEntry(
            name=name,
            title="bundled demo (qgp/demo/ice_transect.toml): walk oracle, dilation encoding",
            source="the demo config's padded A = K + sigma^2 I (n = 16, kappa = 20) and its circuit settings",
            A=A,
            b=problem.padded(problem.y_centered),
            b_note="b = the padded, centred training targets (ice_cm), normalised on loading",
            settings=cfg.circuit,
            bounds=eigenvalue_bounds(A, problem.noise_variance),
            bounds_note="the a-priori bounds of qgp.classical.system.eigenvalue_bounds (Gershgorin above, max(Gershgorin, sigma^2) below)",
            note="c from the config (8): the file stays < 1 MB because the controlled walk is defined once and called 510 times",
        )
    if name == "qsvt_4x4_dilation":
        return CatalogueEntry(
            name=name,
            title="QSVT inversion of the Cao et al. (2012) 4x4 example (cao2012_exact's A and b), dilation encoding",
            source="A and b of cao2012_exact: 3.75*II + 1.25*XZ + 0.75*YY + 2.25*ZX (qiskit label order), eigenvalues 1, 2, 4, 8",
            A=_cao_matrix(),
            b=np.full(4, 0.5),
            b_note="b = (1, 1, 1, 1)/2, uniform (our choice)",
            settings=CircuitSettings(method="qsvt", clock_qubits=0, encoding="dilation", target_error=1e-2),
            bounds=(1.0, 8.0),
            bounds_note="the exact extreme eigenvalues 1 and 8; the dilation's alpha is 8, so kappa_b = alpha/lambda_lo = 8",
            note="QSVT (no clock): the odd polynomial p ~ s*a/x of relative error <= 1e-2 on [1/8, 1], so the post-selected "
            "amplitudes are p(A/alpha)b (constants.polynomial), within 1e-2 relative of C*A^-1 b",
        )
    raise QgpError(f"unknown catalogue entry {name!r}; choose one of {CATALOGUE}")


def _simulated_postselection(entry: CatalogueEntry, b: np.ndarray) -> tuple[np.ndarray, float]:
    """Post-selected system amplitudes of the in-memory circuit (simulation form, same operator)."""
    inv = build_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=b, form="simulation")
    amps = postselected_system_amplitudes(run_statevector(inv.circuit), inv)
    return np.real_if_close(amps, tol=1e6), float(np.sum(np.abs(amps) ** 2))


def catalogue_document(entry: CatalogueEntry, gi: GateInversion, *, simulate: bool = True) -> dict:
    """The JSON document of a catalogue entry: inputs, constants, resources, expected results."""
    b = normalised_amplitudes(entry.b)
    ideal = gi.inversion.scale * np.linalg.solve(entry.A, b)
    clock = algorithm_of(entry.settings).uses_clock
    doc = {
        "name": entry.name,
        "title": entry.title,
        "source": entry.source,
        "note": entry.note,
        "regenerate": REGENERATE_COMMAND,
        "format": FORMAT_NOTE,
        "matrix": entry.A.tolist(),
        "b": b.tolist(),
        "b_note": entry.b_note,
        "settings": _settings_document(entry.settings),
        "rotation": "inverse",
        "bounds_note": entry.bounds_note,
        "constants": constants_document(gi),
        "scale_inverse": gi.inversion.scale,
        "projector": projectors_of(entry.settings)[INVERSION_FILE],
        "reading": reading_text(f"{entry.name}.qasm", "yhat = b/|b|, b above", clock=clock),
        "resources": file_resources(entry.A, gi).as_dict(),
        "gate_counts_by_origin": gate_counts_by_origin(gi.decomposed),
        "expected": {
            "ideal_postselected_amplitudes": ideal.tolist(),
            "ideal_success_probability": float(ideal @ ideal),
        },
        "versions": qiskit_versions(),
        "platform": platform_info(),
    }
    poly = gi.inversion.polynomial
    if poly is not None:  # QSVT: what the circuit applies exactly, p(A/alpha)b, by numpy
        w, v = np.linalg.eigh(entry.A)
        applied = v @ (poly(w / gi.inversion.alpha) * (v.T @ b))
        doc["expected"]["polynomial_postselected_amplitudes"] = applied.tolist()
    if simulate:
        amps, p = _simulated_postselection(entry, b)
        fid = abs(np.vdot(amps, ideal)) ** 2 / (np.vdot(amps, amps).real * (ideal @ ideal))
        doc["expected"].update(
            {
                "postselected_amplitudes": [complex(x).real if abs(complex(x).imag) == 0 else [complex(x).real, complex(x).imag] for x in amps],
                "success_probability": p,
                "fidelity_with_ideal": float(fid),
                "how": "statevector simulation (qiskit-aer) of the in-memory circuit, simulation form (same operator as the file)",
            }
        )
    return doc


def _settings_document(settings: CircuitSettings) -> dict:
    """The [circuit] settings that apply to the chosen oracle (or to QSVT)."""
    doc = asdict(settings)
    if not algorithm_of(settings).uses_clock:  # QSVT: the encoding and the polynomial's target
        return {k: doc[k] for k in ("method", "clock_qubits", "encoding", "target_error", "degree")}
    method = method_of(settings)
    if method.encoding(settings) is None:  # no block encoding
        doc.pop("encoding")
    if method.steps_per_call(settings) is None:  # no product-formula steps
        doc.pop("trotter_steps")
        doc.pop("trotter_order")
    return doc



def build_catalogue(out_dir: Path = Path("circuits"), names: Sequence[str] = CATALOGUE) -> list[Path]:
    """Write ``<name>.qasm`` and ``<name>.json`` for every catalogue entry into ``out_dir``.

    The regeneration command: files of an earlier catalogue in ``out_dir`` are replaced (each
    atomically, once every file of its entry is built).

    Parameters
    ----------
    out_dir : path
        The catalogue folder (created if missing; must not be a file).
    names : sequence of str
        Entries to write (default: all of `CATALOGUE`).

    Returns
    -------
    list of Path
        The files written.
    """
    out = check_outputs(out_dir, [], force=True, option="--catalogue")
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        entry = catalogue_entry(name)
        refuse_if_too_large(entry.A, entry.settings, f"catalogue entry {name}")
        gi = exported_inversion(entry.A, entry.settings, "inverse", entry.bounds, prepare=normalised_amplitudes(entry.b))
        text = to_qasm3(gi.decomposed, [entry.title, *(header_lines("", gi, INVERSION_FILE)[1:]), f"regenerate: {REGENERATE_COMMAND}"])
        doc = json.dumps(catalogue_document(entry, gi), indent=2) + "\n"
        qasm, js = out / f"{name}.qasm", out / f"{name}.json"
        atomic_write_text(qasm, text)
        atomic_write_text(js, doc)
        paths += [qasm, js]
    return paths


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m qgp.export --catalogue [DIR]`` or ``python -m qgp.export CONFIG --out DIR``.

    Parameters
    ----------
    argv : sequence of str, optional
        Command-line arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        0 on success, 2 on a QgpError (printed as one line).
    """
    parser = argparse.ArgumentParser(prog="python -m qgp.tools.catalogue", description=__doc__.splitlines()[0])
    parser.add_argument("config", nargs="?", help="a qgp config file to export")
    parser.add_argument("--out", help="output folder for the config's export")
    parser.add_argument("--force", action="store_true", help="overwrite files of an earlier export in --out")
    parser.add_argument("--measure", action="store_true", help="measure every register r at the end into c_r")
    parser.add_argument("--test-point", type=int, metavar="J", help="also write the Hadamard test of test point J")
    parser.add_argument("--catalogue", nargs="?", const="circuits", metavar="DIR", help="regenerate the catalogue into DIR (default: circuits)")
    args = parser.parse_args(argv)
    try:
        if args.catalogue is not None:
            paths = build_catalogue(Path(args.catalogue))
        elif args.config and args.out:
            from qgp.config import load_config

            paths = export_config(
                load_config(args.config), Path(args.out), measure=args.measure, test_point=args.test_point,
                force=args.force,
            )
        else:
            parser.error("give --catalogue [DIR], or CONFIG --out DIR")
    except QgpError as exc:
        print(f"qgp: error: {exc}", file=sys.stderr)
        return 2
    for p in paths:
        print(p)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
