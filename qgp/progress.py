"""Progress: messages through the standard `logging` module (logger ``"qgp"``) and progress bars (tqdm).

Library calls are silent unless the caller asks: configure logging (e.g. ``logging.basicConfig(level=
logging.INFO)``) for messages, and call ``show_bars()`` for bars. The ``qgp`` command does both on stderr
(``--quiet``: neither; ``-v``: DEBUG messages as well).

Bars are tqdm's (``tqdm.auto``: a text bar in a terminal, a widget in Jupyter), drawn only where they
can be redrawn (a terminal or a notebook) and only for work that lasts over ``DELAY_SECONDS``. Where they
cannot be drawn (stderr sent to a log file), a bar becomes an INFO line on the logger every
``LOG_EVERY_SECONDS`` (and at its end, once it has logged), so a long job in a log still shows that it
moves.
"""

from __future__ import annotations

import logging
import sys
import time
from collections.abc import Callable

__all__ = ["LOGGER", "LOG_EVERY_SECONDS", "DELAY_SECONDS", "Bar", "bars_shown", "progress", "reporter", "show_bars", "write"]

LOGGER = logging.getLogger("qgp")

#: A bar that cannot be drawn logs a line at most this often (and at its end, once it has logged).
LOG_EVERY_SECONDS = 10.0
#: A bar appears only once its work has lasted this long (short steps leave the terminal quiet).
DELAY_SECONDS = 1.0

_show_bars = False


def progress(msg: str) -> None:
    """One progress message at INFO on the ``"qgp"`` logger."""
    LOGGER.info(msg)


def reporter(prefix: str = "") -> Callable[[str], None]:
    """A progress function whose messages start with ``prefix`` (e.g. ``"fit: "``)."""
    return lambda msg: LOGGER.info(f"{prefix}{msg}")


def show_bars(on: bool = True) -> bool:
    """Switch progress bars on (or off) for this process; returns the previous setting."""
    global _show_bars
    previous, _show_bars = _show_bars, bool(on)
    return previous


def bars_shown() -> bool:
    return _show_bars


def _drawable() -> bool:
    """A terminal on stderr, or a Jupyter kernel (whose stderr is no terminal but shows widgets)."""
    if "ipykernel" in sys.modules:
        return True
    return bool(getattr(sys.stderr, "isatty", lambda: False)())


def write(msg: str) -> None:
    """A line on stderr that does not break a bar being drawn (tqdm clears and redraws it)."""
    from tqdm.auto import tqdm

    tqdm.write(msg, file=sys.stderr)


class Bar:
    """A progress bar over ``total`` steps: a tqdm bar where one can be drawn, else log lines.

    Use as a context manager; ``update(k, **status)`` advances it and shows ``status`` (e.g. failed=1).
    """

    def __init__(self, total: int, desc: str, unit: str = "step"):
        self.total, self.desc, self.unit = int(total), desc, unit
        self.n = 0
        self._t0 = self._logged = time.monotonic()
        self._has_logged = False
        self._status: dict = {}
        self._tqdm = None
        if _show_bars and self.total > 0 and _drawable():
            from tqdm.auto import tqdm

            self._tqdm = tqdm(total=self.total, desc=desc, unit=unit, file=sys.stderr, dynamic_ncols=True, leave=True,
                             delay=DELAY_SECONDS)

    def update(self, k: int = 1, **status) -> None:
        self.n += k
        self._status.update(status)
        if self._tqdm is not None:
            if status:
                self._tqdm.set_postfix(self._status, refresh=False)
            self._tqdm.update(k)
            return
        now = time.monotonic()
        if now - self._logged >= LOG_EVERY_SECONDS or (self.n >= self.total and self._has_logged):
            self._logged, self._has_logged = now, True
            extra = "".join(f", {v} {k}" for k, v in self._status.items())
            LOGGER.info(f"{self.desc}: {self.n}/{self.total} {self.unit}s{extra}, {now - self._t0:.0f} s elapsed")

    def close(self) -> None:
        if self._tqdm is not None:
            self._tqdm.close()
            self._tqdm = None

    def __enter__(self) -> Bar:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
