"""Sweeps: a grid of configs, run in a process pool or on Dask into a SQLite store, and its figures."""

__all__: list[str] = []
