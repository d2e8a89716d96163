"""Errors raised by metertop.

Conventions
-----------
Every error that bad input can cause is an :class:`InputError`; the command
line turns it into one line on stderr and exit code 2. Any other exception is
a bug.
"""

__all__ = ["MetertopError", "InputError", "OutputError"]


class MetertopError(ValueError):
    """Base class of the errors metertop raises on purpose."""


class InputError(MetertopError):
    """The input cannot be analysed: missing, empty, corrupt or too short."""


class OutputError(InputError):
    """An output cannot be written: it exists, is the input, or the disk refused it."""
