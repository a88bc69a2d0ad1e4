"""Read-out: the simulation plan (memory guard), simulation on qiskit-aer, estimators from outcome
probabilities, the closed-form filter model, inference strategies."""

__all__: list[str] = []
