"""The size limits of one analysis, checked before any expensive work.

Conventions
-----------
- A piece is refused, with an :class:`~metertop.errors.InputError` that
  states the limit, when its file is larger than :data:`MAX_FILE_BYTES`, when
  it holds more than :data:`MAX_NOTES` notes (MIDI note-ons, or rows of an
  onset list), or when its events span more than :data:`MAX_SPAN_S` seconds.
- Times beyond :data:`MAX_TIME_S` are taken for garbage (ticks or
  milliseconds given as seconds, or a corrupt tempo) rather than music.
- The limits sit well above real takes: one hour of continuous playing is
  about 40,000 notes, and ``make bench-robust`` measures its time and peak
  memory.
"""

from __future__ import annotations

__all__ = ["MAX_FILE_BYTES", "MAX_NOTES", "MAX_SPAN_S", "MAX_TIME_S", "LimitError", "check_file_size", "check_note_count",
           "check_span"]

from .errors import InputError

MAX_FILE_BYTES = 32 * 1024 * 1024
MAX_NOTES = 200_000
MAX_SPAN_S = 4 * 3600.0
MAX_TIME_S = 1.0e5  # about 28 hours


class LimitError(InputError):
    """The input is readable but larger than metertop analyses at once."""


def check_file_size(n_bytes: int, limit: int = MAX_FILE_BYTES) -> None:
    """Refuse a file larger than ``limit`` bytes (:data:`MAX_FILE_BYTES`; recordings have their own, in :mod:`metertop.audio`).

    >>> check_file_size(40 * 1024 * 1024)
    Traceback (most recent call last):
    ...
    metertop.limits.LimitError: file of 40.0 MB; metertop reads files of at most 32 MB
    """
    if n_bytes > limit:
        raise LimitError(f"file of {n_bytes / 2**20:.1f} MB; metertop reads files of at most {limit // 2**20} MB")


def check_note_count(n_notes: int, *, at_least: bool = False) -> None:
    """Refuse more than :data:`MAX_NOTES` notes; ``at_least`` when counting stopped early.

    >>> check_note_count(200_001, at_least=True)
    Traceback (most recent call last):
    ...
    metertop.limits.LimitError: more than 200,000 notes; metertop analyses at most 200,000 notes at once (about five hours of continuous playing): split the piece
    """
    if n_notes > MAX_NOTES:
        count = f"more than {MAX_NOTES:,}" if at_least else f"{n_notes:,}"
        raise LimitError(f"{count} notes; metertop analyses at most {MAX_NOTES:,} notes at once "
                         "(about five hours of continuous playing): split the piece")


def check_span(first_s: float, last_s: float) -> None:
    """Refuse events that span more than :data:`MAX_SPAN_S` seconds.

    >>> check_span(0.0, 5 * 3600.0)
    Traceback (most recent call last):
    ...
    metertop.limits.LimitError: the onsets span 5.00 hours (0.0 s to 18000.0 s); metertop analyses at most 4 hours at once: split the piece
    """
    span = last_s - first_s
    if span > MAX_SPAN_S:
        raise LimitError(f"the onsets span {span / 3600:.2f} hours ({first_s:.1f} s to {last_s:.1f} s); "
                         f"metertop analyses at most {MAX_SPAN_S / 3600:g} hours at once: split the piece")
