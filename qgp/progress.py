"""Progress messages through the standard `logging` module, logger ``"qgp"``.

Library calls are silent unless the caller configures logging (e.g. ``logging.basicConfig(level=
logging.INFO)``, or ``logging.getLogger("qgp").setLevel(logging.INFO)`` with a handler); the ``qgp``
command attaches a stderr handler at INFO (``--quiet``: none; ``-v``: DEBUG as well).
"""

from __future__ import annotations

import logging
from collections.abc import Callable

__all__ = ["LOGGER", "progress", "reporter"]

LOGGER = logging.getLogger("qgp")


def progress(msg: str) -> None:
    """One progress message at INFO on the ``"qgp"`` logger."""
    LOGGER.info(msg)


def reporter(prefix: str = "") -> Callable[[str], None]:
    """A progress function whose messages start with ``prefix`` (e.g. ``"fit: "``)."""
    return lambda msg: LOGGER.info(f"{prefix}{msg}")
