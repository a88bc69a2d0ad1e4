"""Circuits: state preparation, block encodings, phase oracles and inversion, resources, OpenQASM 3."""

__all__: list[str] = []
