"""Command-line interface: a thin layer that parses, calls the library and prints.

Exit codes: 0 success, 2 bad input or usage. Errors are one line on stderr.
"""

from __future__ import annotations

import sys

from .app import app

__all__ = ["app", "main"]


def main() -> None:
    """Entry point of the ``metertop`` console script."""
    app(prog_name="metertop")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
