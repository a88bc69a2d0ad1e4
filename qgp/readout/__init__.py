"""Read-out: simulation on qiskit-aer, estimators from outcome probabilities, inference strategies."""

__all__: list[str] = []
