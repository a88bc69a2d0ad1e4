"""The classical side: kernels → regularised system A = K + σ²I and its levers → `Problem` → exact GP."""

__all__: list[str] = []
