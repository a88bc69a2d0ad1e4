"""Deprecated alias kept for the documented catalogue command ``python -m qgp.export --catalogue circuits``.

The OpenQASM 3 writer now lives in `qgp.circuits.qasm`, what `qgp export` writes in
`qgp.reports.export`, and the catalogue regeneration tool in `qgp.tools.catalogue`; this module only forwards the command line. Nothing in the library imports it.
"""

from __future__ import annotations

import sys

if __name__ == "__main__":
    from qgp.tools.catalogue import main

    sys.exit(main())
