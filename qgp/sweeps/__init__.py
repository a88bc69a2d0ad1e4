"""Sweeps: a grid of configs, run in a process pool or on Dask into a SQLite store, and its figures.

Modules in the order data flows: `grid` (the sweep file → validated grid and data snapshot),
`worker` (one point, run in a worker), `execute` (`run_sweep`: inline, process pool or Dask),
`store` (the SQLite result store; its schema is a contract) with `lock` (one writer at a time),
`export` (`--status` text and the tidy CSV), and `figures` (one module per figure, a shared style,
the CSV contract and the closed-form model).
"""

__all__: list[str] = []
