"""The one exception type qgp raises for bad input.

Every message names the problem and the fix, so the CLI can print it as one line.
"""

from __future__ import annotations

import difflib

__all__ = ["QgpError", "did_you_mean"]


class QgpError(ValueError):
    """Bad input or an impossible request, found before any heavy work starts."""


def did_you_mean(name: str, valid) -> str:
    """" (did you mean 'x'?)" for the closest valid name (difflib's ratio ≥ 0.6), else ""."""
    close = difflib.get_close_matches(str(name), list(valid), n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""
