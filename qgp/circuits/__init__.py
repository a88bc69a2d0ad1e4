"""Circuits, in the order they are assembled.

``encoding`` (amplitude encoding, Pauli decomposition, block encodings of A) → ``phase_estimation``
(generic phase estimation over a `PhaseOracle`) → ``methods`` (one module per inversion method —
``exact``, ``trotter``, ``walk`` — and the block-encoding registry ``encodings``; the registry in
``methods/__init__``) → ``inversion`` (rotation, filter, uncompute) → ``decomposition`` and
``resources`` (counts) → OpenQASM 3 export.
"""

__all__: list[str] = []
