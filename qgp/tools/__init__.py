"""Tools outside the library's import graph: the `qgp` command, the benchmark, catalogue regeneration.

Nothing under `qgp` outside this folder imports from it.
"""

__all__: list[str] = []
