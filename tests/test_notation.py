"""Notated time signatures (metertop.notation): parsing, the reading shape each stands for, and how readings relate.

The shapes follow the metre conventions of DESIGN.md section 6, which are
common practice: 2/4, 3/4 and 4/4 have two, three and four simple beats;
6/8, 9/8 and 12/8 two, three and four compound beats; 3/8 one compound
beat; 7/8 is an additive bar of seven eighths (2+2+3 and its rotations).
"""

from __future__ import annotations

import pytest

from metertop.errors import InputError
from metertop.notation import beat_units, notated_metre, parse_time_signature, relation


@pytest.mark.parametrize("text, expected", [("3/4", (3, 4)), (" 6 / 8 ", (6, 8)), ("2+2+3/8", (7, 8)), ("C", (4, 4)), ("C|", (2, 2)),
                                            ("12/8", (12, 8))])
def test_parse_time_signature(text, expected):
    """Time signatures written as text give their numerator and denominator; C and C| are 4/4 and 2/2 (common practice)."""
    assert parse_time_signature(text) == expected


@pytest.mark.parametrize("text", ["3/5", "x/4", "0/4", "", "3/4/4", "4", "3/0", "-3/4"])
def test_bad_time_signature_is_an_input_error(text):
    """Text that is no time signature raises InputError with the text in its message."""
    with pytest.raises(InputError, match="time signature"):
        parse_time_signature(text)


@pytest.mark.parametrize("text, beats, division, bar_tatums, family", [
    ("2/4", 2, 2, 4, "duple"), ("3/4", 3, 2, 6, "triple"), ("4/4", 4, 2, 8, "duple"), ("5/4", 5, 2, 10, "irregular"),
    ("2/2", 2, 2, 4, "duple"), ("3/2", 3, 2, 6, "triple"), ("4/2", 4, 2, 8, "duple"),
    ("3/8", 1, 3, 3, "single"), ("6/8", 2, 3, 6, "duple"), ("9/8", 3, 3, 9, "triple"), ("12/8", 4, 3, 12, "duple"),
    ("6/4", 2, 3, 6, "duple"),
])
def test_shapes_follow_the_metre_conventions(text, beats, division, bar_tatums, family):
    """Beats per bar, division and family of each class in DESIGN.md section 6 (common practice)."""
    m = notated_metre(text)
    assert (m.beats_per_bar, m.division, m.bar_tatums, m.family) == (beats, division, bar_tatums, family)


def test_additive_bars():
    """7/8 stands for its three groupings of seven eighths; 2+2+3/8 for one; 5/8 for 3+2 and 2+3 (common practice)."""
    assert set(notated_metre("7/8").groupings) == {(2, 2, 3), (2, 3, 2), (3, 2, 2)}
    assert notated_metre("2+2+3/8").groupings == ((2, 2, 3),)
    assert set(notated_metre("5/8").groupings) == {(3, 2), (2, 3)}
    assert notated_metre("7/8").matches(3, None, (3, 2, 2)) and not notated_metre("2+2+3/8").matches(3, None, (3, 2, 2))


@pytest.mark.parametrize("text", ["11/8", "1/4", "8/8", "3+3+2/8"])
def test_unreadable_shapes_are_input_errors(text):
    """Bars metertop does not read are refused with a message that says which it reads."""
    with pytest.raises(InputError, match="cannot check"):
        notated_metre(text)


@pytest.mark.parametrize("notated, reading, expected", [
    ("4/4", (4, 2, None), "same"), ("4/4", (2, 2, None), "nested"), ("2/4", (4, 2, None), "nested"),
    ("6/8", (4, 3, None), "nested"), ("3/8", (3, 2, None), "nested"), ("3/4", (2, 3, None), "regrouped"),
    ("6/8", (3, 2, None), "regrouped"), ("4/4", (3, 2, None), "other"), ("6/8", (4, 2, None), "other"),
    ("7/8", (4, 2, None), "other"), ("4/4", (4, 3, None), "other"), ("7/8", (3, None, (2, 2, 3)), "same"),
])
def test_relation(notated, reading, expected):
    """Close relatives: the bar doubled or halved (2/4 and 4/4), or the same bar grouped otherwise (3/4 and 6/8)."""
    assert relation(notated_metre(notated), *reading) == expected


def test_beat_units():
    """Beat lengths in units of the denominator: simple beats one, compound beats three, additive beats their group."""
    assert beat_units("3/4") == [1, 1, 1]
    assert beat_units("12/8") == [3, 3, 3, 3]
    assert beat_units("7/8", [2, 3, 2]) == [2, 3, 2]
    with pytest.raises(InputError):
        beat_units("7/8", [2, 2, 2])
