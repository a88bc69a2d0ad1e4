"""Runs and reports: what a config implies (inspect), `qgp run` outputs, a run's figures."""

__all__: list[str] = []
