"""``python -m metertop``: the same as the ``metertop`` command."""

from .cli import main

main()
