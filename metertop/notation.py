"""Notated time signatures: parse them and say which readings of the metric tree they stand for.

Conventions
-----------
- A time signature is text such as ``"3/4"``, ``"6/8"``, ``"7/8"``,
  ``"2+2+3/8"`` (an additive bar with its grouping), ``"C"`` (4/4) or
  ``"C|"`` (2/2).
- Its *shape* is what onsets in seconds can show: beats per bar, the beat's
  division (2 simple, 3 compound, None for additive bars) and, for additive
  bars, the grouping of the tatums. The note value of the beat cannot be
  heard: 2/2 and 2/4 have the same shape, and so have 4/2 and 4/4.
- Shapes follow common practice and DESIGN.md section 6: 2, 3, 4 and 5 over
  any denominator are simple beats (5 over 8 or more is additive, 3+2 or
  2+3); 6, 9 and 12 are two, three and four compound beats; 3 over 8 or
  more is one compound beat; 7 is additive (2+2+3, 2+3+2 or 3+2+2).
- The *bar in tatums* is beats x division, or the grouping's sum.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from .errors import InputError
from .tree import ADDITIVE

__all__ = ["NotatedMetre", "parse_time_signature", "notated_metre", "relation", "beat_units"]

_TEXT = re.compile(r"^\s*(?P<num>\d+(?:\s*\+\s*\d+)*)\s*/\s*(?P<den>\d+)\s*$")
_SYMBOLS = {"c": "4/4", "common": "4/4", "c|": "2/2", "cut": "2/2"}
_SUPPORTED = "bars of 2 to 5 simple beats (2/4, 3/4, 4/4, 5/4), 1 to 4 compound beats (3/8, 6/8, 9/8, 12/8) and additive bars of 5 or 7 (5/8, 7/8)"


@dataclass(frozen=True)
class NotatedMetre:
    """A notated time signature and the shape of reading it stands for.

    Attributes
    ----------
    text : str
        The time signature as written, normalised (``"7/8"``, ``"2+2+3/8"``).
    numerator, denominator : int
    beats_per_bar : int
    division : int or None
        2 (simple), 3 (compound) or None (additive bar).
    groupings : tuple of tuple of int, or None
        Allowed groupings of an additive bar, in tatums.
    """

    text: str
    numerator: int
    denominator: int
    beats_per_bar: int
    division: int | None
    groupings: tuple[tuple[int, ...], ...] | None

    @property
    def family(self) -> str:
        """``duple``, ``triple``, ``single`` or ``irregular`` (DESIGN.md section 6)."""
        if self.groupings is not None or self.beats_per_bar == 5:
            return "irregular"
        return {1: "single", 3: "triple"}.get(self.beats_per_bar, "duple")

    @property
    def bar_tatums(self) -> int:
        """Length of the bar in tatums (the fastest regular level of the reading)."""
        if self.groupings is not None:
            return sum(self.groupings[0])
        return self.beats_per_bar * self.division

    def matches(self, beats_per_bar: int, division: int | None, grouping) -> bool:
        """Does a reading of this shape (as in :class:`metertop.tree.Candidate`) stand for this time signature?

        >>> m = notated_metre("7/8")
        >>> m.matches(3, None, (2, 2, 3)), m.matches(3, 2, None)
        (True, False)
        """
        if self.groupings is not None:
            return grouping is not None and tuple(grouping) in self.groupings
        return grouping is None and beats_per_bar == self.beats_per_bar and division == self.division


def parse_time_signature(text: str) -> tuple[int, int]:
    """Numerator and denominator of a time signature written as text.

    Parameters
    ----------
    text : str
        ``"3/4"``, ``"2+2+3/8"`` (the parts are added), ``"C"`` or ``"C|"``.

    Returns
    -------
    (int, int)

    Raises
    ------
    InputError
        For text that is not a time signature.

    Examples
    --------
    >>> parse_time_signature("7/8"), parse_time_signature(" 2+2+3 / 8"), parse_time_signature("C")
    ((7, 8), (7, 8), (4, 4))
    >>> parse_time_signature("3/5")
    Traceback (most recent call last):
    ...
    metertop.errors.InputError: time signature '3/5': the denominator must be a power of two (1, 2, 4, 8, 16, 32 or 64)
    """
    return _parse(text)[:2]


def _parse(text: str) -> tuple[int, int, tuple[int, ...] | None]:
    if not isinstance(text, str):
        raise InputError(f"time signature must be text such as '3/4', got {text!r}")
    raw = text.strip()
    raw = _SYMBOLS.get(raw.lower(), raw)
    m = _TEXT.match(raw)
    if not m:
        raise InputError(f"time signature '{text}' is not of the form N/D (for example 3/4, 6/8, 7/8 or 2+2+3/8)")
    parts = tuple(int(p) for p in m.group("num").replace(" ", "").split("+"))
    num, den = sum(parts), int(m.group("den"))
    if den not in (1, 2, 4, 8, 16, 32, 64):
        raise InputError(f"time signature '{text}': the denominator must be a power of two (1, 2, 4, 8, 16, 32 or 64)")
    if num < 1 or any(p < 1 for p in parts):
        raise InputError(f"time signature '{text}': the numerator must be a positive whole number")
    return num, den, (parts if len(parts) > 1 else None)


def notated_metre(text: str) -> NotatedMetre:
    """The shape of reading a time signature stands for (see the module notes).

    Raises
    ------
    InputError
        For text that is not a time signature, or one whose shape metertop
        does not read.

    Examples
    --------
    >>> m = notated_metre("6/8")
    >>> m.beats_per_bar, m.division, m.family, m.bar_tatums
    (2, 3, 'duple', 6)
    >>> notated_metre("2+2+3/8").groupings
    ((2, 2, 3),)
    >>> notated_metre("11/8")
    Traceback (most recent call last):
    ...
    metertop.errors.InputError: cannot check 11/8: metertop reads bars of 2 to 5 simple beats ...
    """
    num, den, parts = _parse(text)
    label = f"{'+'.join(map(str, parts))}/{den}" if parts else f"{num}/{den}"
    unsupported = InputError(f"cannot check {label}: metertop reads {_SUPPORTED}")
    if parts is not None:
        if parts not in ADDITIVE:
            raise unsupported
        return NotatedMetre(label, num, den, len(parts), None, (parts,))
    if num == 7 or (num == 5 and den >= 8):
        groupings = tuple(g for g in ADDITIVE if sum(g) == num)
        return NotatedMetre(label, num, den, len(groupings[0]), None, groupings)
    if num == 3 and den >= 8:
        return NotatedMetre(label, num, den, 1, 3, None)
    if num in (6, 9, 12):
        return NotatedMetre(label, num, den, num // 3, 3, None)
    if num in (2, 3, 4, 5):
        return NotatedMetre(label, num, den, num, 2, None)
    raise unsupported


def relation(a: NotatedMetre, beats_per_bar: int, division: int | None, grouping) -> str:
    """How a reading relates to a notated metre.

    Returns
    -------
    str
        ``"same"``: the reading stands for the time signature;
        ``"nested"``: the same beat and division, with the bar doubled or
        halved (2/4 and 4/4, 3/8 and 6/8, 6/8 and 12/8), or one compound
        beat a bar against three simple beats (3/8 and 3/4);
        ``"regrouped"``: the same bar in tatums grouped into other beats
        (3/4 and 6/8: six eighths as three twos or two threes);
        ``"other"``: anything else.

    Examples
    --------
    >>> m = notated_metre("4/4")
    >>> relation(m, 2, 2, None), relation(m, 3, 2, None), relation(notated_metre("3/4"), 2, 3, None)
    ('nested', 'other', 'regrouped')
    """
    if a.matches(beats_per_bar, division, grouping):
        return "same"
    if grouping is None and a.groupings is None:
        if division == a.division and beats_per_bar in (2 * a.beats_per_bar, a.beats_per_bar / 2):
            return "nested"
        # One compound beat a bar (3/8) is three simple beats (3/4) heard a level higher.
        if {(beats_per_bar, division), (a.beats_per_bar, a.division)} == {(1, 3), (3, 2)}:
            return "nested"
        if division != a.division and beats_per_bar * division == a.bar_tatums:
            return "regrouped"
    return "other"


def beat_units(time_signature: str, grouping=None) -> list[int]:
    """Length of each beat of a bar, in units of the time signature's denominator.

    Simple beats are one unit, compound beats three (6/8, 9/8, 12/8 and 3/8),
    and the beats of an additive bar follow its grouping (by default 3+2 for
    5/8 and 2+2+3 for 7/8).

    >>> beat_units("4/4"), beat_units("6/8"), beat_units("7/8", [3, 2, 2]), beat_units("3/8")
    ([1, 1, 1, 1], [3, 3], [3, 2, 2], [3])
    """
    m = notated_metre(time_signature)
    if m.groupings is not None:
        g = tuple(grouping) if grouping is not None else m.groupings[0]
        if sum(g) != m.numerator:
            raise InputError(f"grouping {'+'.join(map(str, g))} does not fill a bar of {time_signature}")
        return list(g)
    if m.division == 3:
        return [3] * m.beats_per_bar
    return [1] * m.beats_per_bar
