"""The two demo transcriptions without barlines (an ABC air, a MusicXML song) against their ground truth.

The demo pieces are invented (demo_rhythms/README.md, demo_rhythms/make_score_demo.py); each ``X.abc`` or
``X.musicxml`` has ``X.truth.json`` beside it. Downbeat accuracy uses mir_eval's F-measure at +-70 ms, the
reference implementation (Dixon 2006; Davies, Degara & Plumbley 2009).
"""

from __future__ import annotations

import json

import mir_eval
import numpy as np
import pytest

from metertop.score_writer import write_score
from metertop.scores import analyse_score

from conftest import DEMO_DIR

pytest.importorskip("music21")

SCORE_DEMOS = sorted(p for p in DEMO_DIR.iterdir() if p.suffix in (".abc", ".musicxml"))


def _truth(path):
    return json.loads(path.with_name(path.stem + ".truth.json").read_text())


@pytest.fixture(scope="module")
def analyses():
    return {p.name: analyse_score(p)[0] for p in SCORE_DEMOS}


def test_two_score_demos_with_truth():
    assert len(SCORE_DEMOS) >= 2
    for p in SCORE_DEMOS:
        assert _truth(p)["file"] == p.name


@pytest.mark.parametrize("path", SCORE_DEMOS, ids=lambda p: p.name)
def test_score_demo_metre_in_quarters(path, analyses):
    """The proposed time signature, beats, division, and bar, beat and pickup in quarters equal the truth's."""
    a, truth = analyses[path.name], _truth(path)
    d = a.result.to_dict()
    assert d["title"] == truth["title"] and d["tune"] == 1
    assert d["notated_time_signature"] == truth["notated_time_signature"]
    keys = ("time_signature", "beats_per_bar", "beat_division", "grouping", "bar_quarters", "beat_quarters", "pickup_quarters")
    assert {k: d[k] for k in keys} == {k: truth[k] for k in keys}


@pytest.mark.parametrize("path", SCORE_DEMOS, ids=lambda p: p.name)
def test_score_demo_downbeats_in_seconds(path, analyses):
    """Downbeats in seconds at the score's own tempo (changes included) match the truth (mir_eval F at +-70 ms >= 0.95)."""
    a, truth = analyses[path.name], _truth(path)
    assert a.tune.tempo.stated
    assert [{"start_quarters": q, "quarter_bpm": b} for q, b in zip(a.tune.tempo.starts_q, a.tune.tempo.quarter_bpm)] == truth["tempo"]
    f = mir_eval.onset.f_measure(np.asarray(truth["downbeats_s"]), np.asarray(a.result.downbeats_s), window=0.07)[0]
    assert f >= 0.95


@pytest.mark.parametrize("path", SCORE_DEMOS, ids=lambda p: p.name)
def test_score_demo_written_back(path, analyses, tmp_path):
    """Written back barred in the proposal: one measure per true downbeat, plus the pickup bar."""
    import music21

    a, truth = analyses[path.name], _truth(path)
    out = write_score(a.tune, a.reading(1), tmp_path / "barred.musicxml")
    measures = list(music21.converter.parse(str(out), forceSource=True).parts[0].getElementsByClass(music21.stream.Measure))
    assert len(measures) == len(truth["downbeats_quarters"]) + (truth["pickup_quarters"] > 0)
    first_full = 1 if truth["pickup_quarters"] > 0 else 0
    assert [float(m.offset) for m in measures[first_full:]] == truth["downbeats_quarters"]
