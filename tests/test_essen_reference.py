"""An open dataset as outside reference: Essen folksongs shipped by music21 (PyPI).

The Essen folksong collection (Schaffrath 1995), as music21 ships it in
``music21/corpus/essenFolksong``, carries each tune's notated metre. A sample
of tunes from one *training* file of the development split (bench/split.md)
is read with the benchmark's corpus reader, rendered deadpan, and analysed:
the duple-or-triple family must match the notation for most of them. The
floor (70%) sits below the family figure that ``make bench`` measures on the
evaluation files (about 82%), so that it guards against regressions without
being tuned to the sample.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "bench"
sys.path.insert(0, str(BENCH))

import essen  # noqa: E402  (needs music21: the bench extra, which make test installs)
from common import METRES, ScoreTune  # noqa: E402
from render import render  # noqa: E402

import metertop  # noqa: E402
from metertop.result import MetreResult  # noqa: E402

SAMPLE_FILE = "kinder0"  # a training file: children's songs, mostly 2/4, 3/4, 4/4 and 6/8
N_TUNES = 40


def _family(result: MetreResult) -> str:
    if result.grouping is not None or result.beats_per_bar in (5, 7):
        return "irregular"
    return {1: "single", 3: "triple"}.get(result.beats_per_bar, "duple")


@pytest.fixture(scope="module")
def sample_tunes() -> list[ScoreTune]:
    assert SAMPLE_FILE in essen.TRAIN_FILES
    text = (essen.essen_dir() / f"{SAMPLE_FILE}.abc").read_text(encoding="utf-8")
    tunes = []
    for index, tune_text in enumerate(essen.split_abc_text(text), 1):
        try:
            record = essen.tune_record(tune_text, SAMPLE_FILE, index)
        except Exception:  # tunes the corpus leaves out (free metre, irregular bars)
            continue
        record.pop("restored_bars", None)
        tunes.append(ScoreTune(**record))
        if len(tunes) == N_TUNES:
            break
    return tunes


def test_sample_is_read_with_its_notated_metres(sample_tunes):
    """The reader yields tunes whose notated metres are classes of DESIGN.md section 6, with bars one bar apart."""
    assert len(sample_tunes) == N_TUNES
    for tune in sample_tunes:
        assert tune.time_signature in METRES
        assert tune.onsets_q[0] == 0
        gaps = [b - a for a, b in zip(tune.downbeats_q[:-1], tune.downbeats_q[1:])]
        assert all(abs(g - tune.bar_q) < 1e-9 for g in gaps)


def test_duple_or_triple_family_matches_the_notation(sample_tunes):
    """Deadpan renderings: the proposed duple/triple family matches the notated metre for at least 70% of the sample."""
    hits, total = 0, 0
    for i, tune in enumerate(sample_tunes):
        family = METRES[tune.time_signature][3]
        if family not in ("duple", "triple"):
            continue
        perf = render(tune, "deadpan", seed=i)
        result = metertop.analyse(perf.note_table())
        hits += _family(result) == family
        total += 1
    assert total >= 20
    assert hits / total >= 0.70, f"{hits}/{total}"
