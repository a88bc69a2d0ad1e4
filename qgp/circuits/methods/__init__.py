"""The inversion methods: one module per phase oracle, and their registry.

Every ``[circuit] evolution`` value is one entry of `METHODS`, an `InversionMethod`
(qgp.circuits.methods.base) that knows everything about itself — its controlled powers in both
circuit forms, t or α, how a clock value decodes to λ̃, the function it applies to each eigenvalue
(phase map φ(λ) for the closed-form model of qgp.readout.filter_model), the local bin width of the
filter floor, its effective condition number, its block register, its query and gate-count model,
its size estimate and its label. Code outside the method modules asks the method object and never
branches on a method's name. The walk's block encodings are a registry of their own
(qgp.circuits.methods.encodings).

Adding a method: one module defining an `InversionMethod` subclass, one line in `METHODS` below
(and the name in `qgp.settings.Evolution` for typing); tests/circuits/test_methods.py picks it up.

Public functions (stable; the figures, sweeps and tools call these):

``get_method(name) -> InversionMethod``
    The registered method ``name``; `QgpError` naming the choices otherwise.
``method_label(settings) -> str``
    The figure/text label, encoding included: ``"exact e^(iAt)"``,
    ``"Trotter (4 steps, order 2)"``, ``"walk + dilation"``, ``"walk + LCU"``.
``method_description(settings) -> str``
    The oracle as exported file headers write it: ``"exact oracle"``, ``"walk oracle (lcu encoding)"``.
``method_alpha(A, settings, lambda_hi) -> float | None``
    The block encoding's α without building a circuit (dilation: max(row-sum bound, λ_hi); LCU:
    Σ|c_P|, which runs the Pauli decomposition); None for methods without a block encoding.
``clock_eigenvalues(settings, bounds, alpha) -> np.ndarray``
    λ̃ decoded from each clock value, shape (2^c,), from a-priori bounds (λ_lo, λ_hi) (t derived
    from λ_hi unless set) and α (walk); no circuit built.
``has_closed_form_model(settings) -> bool``
    Whether `qgp.readout.filter_model.model_operator` is exact for this method's circuit.
``clock_model(settings, rotation, bounds, alpha=None) -> ClockModel``
    The inversion's constants (grid, floor, admitted, C, g) without a circuit; see
    `qgp.circuits.inversion.clock_model`.

`BUDGET_REFERENCE` names the method whose closed-form model defines the error budget's
``phase_estimation_and_filter`` stage.
"""

from __future__ import annotations

import numpy as np

from qgp.circuits.methods.base import InversionMethod, SizePiece
from qgp.circuits.methods.exact import ExactEvolution
from qgp.circuits.methods.trotter import TrotterEvolution
from qgp.circuits.methods.walk import QubitizationWalk
from qgp.errors import QgpError

__all__ = [
    "METHODS",
    "BUDGET_REFERENCE",
    "InversionMethod",
    "SizePiece",
    "get_method",
    "method_of",
    "method_label",
    "method_description",
    "method_alpha",
    "clock_eigenvalues",
    "has_closed_form_model",
    "clock_model",
]

#: name → method, in the order of `qgp.settings.Evolution`.
METHODS: dict[str, InversionMethod] = {m.name: m for m in (ExactEvolution(), TrotterEvolution(), QubitizationWalk())}

#: The method whose closed-form filter model is the error budget's "phase_estimation_and_filter" stage.
BUDGET_REFERENCE = "exact"


def get_method(name: str) -> InversionMethod:
    """The registered method ``name``.

    Parameters
    ----------
    name : str
        A ``[circuit] evolution`` value.

    Returns
    -------
    InversionMethod
        Raises `QgpError` naming the registered choices when ``name`` is not one.
    """
    try:
        return METHODS[name]
    except (KeyError, TypeError):
        raise QgpError(f"unknown [circuit] evolution {name!r}; choose one of {tuple(METHODS)}") from None


def method_of(settings) -> InversionMethod:
    """The method ``settings.evolution`` names (settings: `qgp.settings.CircuitSettings`)."""
    return get_method(settings.evolution)


def method_label(settings) -> str:
    """The label of figures and text for ``settings`` (CircuitSettings), encoding included."""
    return method_of(settings).label(settings)


def method_description(settings) -> str:
    """The oracle as file headers describe it, e.g. ``"walk oracle (lcu encoding)"``."""
    return method_of(settings).description(settings)


def method_alpha(A, settings, lambda_hi: float | None = None) -> float | None:
    """α of the block encoding the method would build, without building a circuit.

    Parameters
    ----------
    A : array, shape (2^m, 2^m)
        The padded symmetric matrix.
    settings : CircuitSettings
    lambda_hi : float, optional
        ‖A‖ (its largest eigenvalue) when known: the dilation's α is max(row-sum bound, λ_hi).

    Returns
    -------
    float or None
        None for methods without a block encoding.
    """
    return method_of(settings).alpha(A, settings, lambda_hi)


def clock_eigenvalues(settings, bounds, alpha: float | None = None) -> np.ndarray:
    """λ̃ decoded from every clock value, without building a circuit.

    Parameters
    ----------
    settings : CircuitSettings
    bounds : (float, float)
        A-priori eigenvalue bounds (λ_lo, λ_hi); t is derived from λ_hi unless set.
    alpha : float, optional
        The block encoding's α (methods with one; see `method_alpha`).

    Returns
    -------
    ndarray, shape (2^c,)
    """
    method = method_of(settings)
    t = method.evolution_time(settings, float(bounds[1]))
    return method.clock_eigenvalues(settings.clock_qubits, t, alpha)


def has_closed_form_model(settings) -> bool:
    """Whether the Fejér-kernel model of qgp.readout.filter_model is exact for this method."""
    return bool(method_of(settings).closed_form_model)


def clock_model(settings, rotation: str, bounds, alpha: float | None = None):
    """`qgp.circuits.inversion.clock_model`: the inversion's constants without a circuit."""
    from qgp.circuits.inversion import clock_model as _clock_model

    return _clock_model(settings, rotation, bounds, alpha)
