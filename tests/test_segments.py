"""Metre changes (metertop.segments): pieces built from published tunes in different metres, one after another.

"Ode to Joy" (4/4), the hymn tune New Britain in whole bars (3/4) and
"Row, Row, Row Your Boat" (6/8), rendered from their notation at one
quarter-note tempo with 4% drift (conftest.render_sections): where each tune
starts is the outside reference. The segments must change metre there,
within one bar, and single-metre pieces must keep one segment.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from metertop.export import to_json_line
from metertop.pipeline import analyse, analyse_detailed

from conftest import AMAZING_GRACE, AMAZING_GRACE_BARS, ODE_TO_JOY, ROW_YOUR_BOAT, render_sections, render_tune

FAMILY = {"2/4": "duple", "4/4": "duple", "6/8": "duple", "12/8": "duple", "3/4": "triple", "9/8": "triple"}


@pytest.mark.parametrize("tunes, quarter_s, middle", [((ODE_TO_JOY, AMAZING_GRACE_BARS, ODE_TO_JOY), 0.5, "triple"),
                                                      ((ODE_TO_JOY, ROW_YOUR_BOAT, ODE_TO_JOY), 0.4, "compound")],
                         ids=["4/4-3/4-4/4", "4/4-6/8-4/4"])
def test_metre_changes_found_within_a_bar(tunes, quarter_s, middle):
    """Three segments, each boundary within one bar of where the next tune starts, the middle one in the middle tune's metre."""
    piece = render_sections(tunes, quarter_s, seed=2, drift_sd=0.04)
    r = analyse(piece.notes)
    assert len(r.segments) == 3, [s.time_signature for s in r.segments]
    found = np.array([s.start_s for s in r.segments[1:]])
    shortest_bar = min(t.bar_quarters for t in tunes) * quarter_s * 1.1  # 10% for the drift
    assert np.all(np.abs(found - piece.starts_s[1:]) < shortest_bar), (found, piece.starts_s)
    outer, mid = r.segments[0], r.segments[1]
    assert FAMILY[outer.time_signature] == "duple" and outer.beat_division == 2 and FAMILY[r.segments[2].time_signature] == "duple"
    if middle == "triple":
        assert FAMILY[mid.time_signature] == "triple" and mid.beat_division == 2
    else:
        assert mid.beat_division == 3
    assert mid.evidence > 0
    # The downbeats follow the segments: in the middle, they are bar lines of the middle tune (every one, or every
    # other one when the segment reads the bar doubled, as 12/8 for 6/8).
    inside = r.downbeats_s[(r.downbeats_s > found[0] - 0.1) & (r.downbeats_s < found[1] - 0.1)]
    assert len(inside) >= 3
    assert np.all(np.min(np.abs(inside[:, None] - piece.downbeats_s[None, :]), axis=1) < 0.07)


@pytest.mark.parametrize("tune, quarter_s", [(ODE_TO_JOY, 0.5), (AMAZING_GRACE, 0.45), (ROW_YOUR_BOAT, 0.3)], ids=lambda t: getattr(t, "name", t))
def test_one_metre_keeps_one_segment(tune, quarter_s):
    """A tune in one metre, played with drift: one segment over the whole piece, in the proposed metre."""
    played = render_tune(tune, quarter_s, seed=3, drift_sd=0.04)
    r = analyse(played.notes)
    assert len(r.segments) == 1
    seg = r.segments[0]
    assert seg.time_signature == r.time_signature and seg.evidence == 0.0
    assert seg.start_s == pytest.approx(played.notes.onsets_s[0], abs=0.05) and seg.end_s == pytest.approx(played.notes.onsets_s[-1], abs=0.05)


def test_segments_in_the_json_line():
    """Each segment in the JSON line carries its own reading."""
    piece = render_sections((ODE_TO_JOY, AMAZING_GRACE_BARS, ODE_TO_JOY), 0.5, seed=2, drift_sd=0.04)
    obj = json.loads(to_json_line(analyse_detailed(piece.notes).result))
    keys = {"start_s", "end_s", "time_signature", "beats_per_bar", "beat_division", "grouping", "bar_s", "first_downbeat_s", "evidence"}
    assert all(keys <= seg.keys() for seg in obj["segments"])
    assert [seg["time_signature"] for seg in obj["segments"]] == ["4/4", "3/4", "4/4"]
