"""Regenerate the key table of docs/summary.md from the schema (`qgp.readout.summary`).

    python -m qgp.tools.summary_doc            (rewrites the table below the page's introduction)

A tool (qgp.tools): nothing in the library imports it.
"""

from __future__ import annotations

import sys
from pathlib import Path

from qgp.files import atomic_write_text
from qgp.readout.summary import schema_markdown

__all__ = ["main"]

PAGE = Path(__file__).resolve().parents[2] / "docs" / "summary.md"


def main() -> int:
    text = PAGE.read_text(encoding="utf-8")
    head = text[: text.index("| key | type |")]
    atomic_write_text(PAGE, head + schema_markdown())
    print(f"wrote {PAGE}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
