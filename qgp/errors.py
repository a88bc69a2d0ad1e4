"""The one exception type qgp raises for bad input.

Every message names the problem and the fix, so the CLI can print it as one line.
"""

from __future__ import annotations

__all__ = ["QgpError"]


class QgpError(ValueError):
    """Bad input or an impossible request, found before any heavy work starts."""
