"""Checking a notated time signature against the playing (metertop.check, ``metertop check``).

The performances are published tunes rendered from their notation
(conftest.py: Beethoven's "Ode to Joy" in 4/4, the hymn tune New Britain in
3/4, "Row, Row, Row Your Boat" in 6/8) and a 7/8 ballad from a training file
of the Essen collection; each tune's notated metre is the outside
reference. Played with 4% tempo drift: their own metre must be consistent
(exit code 0), and a metre of another family or bar length inconsistent
(exit code 1); close relatives (2/4 for 4/4, 6/8 for 3/4, 12/8 for 6/8)
may be ambiguous (exit code 3).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
from typer.testing import CliRunner

from metertop.check import EXIT_CODES, Verdict, check_notated, parse_time_signature
from metertop.cli import app
from metertop.errors import InputError
from metertop.load import notes_from_onsets
from metertop.pipeline import analyse_detailed

from conftest import (AMAZING_GRACE, AMAZING_GRACE_BARS, ODE_TO_JOY, ROW_YOUR_BOAT, render_sections, render_tune, rendering_to_midi,
                      write_midi)

runner = CliRunner()


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


@pytest.fixture(scope="module")
def analyses(seven_eight_played):
    """Played tunes (4% drift) and their analyses, by notated metre."""
    out = {
        "4/4": analyse_detailed(render_tune(ODE_TO_JOY, 0.5, seed=31, drift_sd=0.04).notes),
        "3/4": analyse_detailed(render_tune(AMAZING_GRACE, 0.45, seed=32, drift_sd=0.04).notes),
        "6/8": analyse_detailed(render_tune(ROW_YOUR_BOAT, 0.3, seed=33, drift_sd=0.04).notes),
        "7/8": analyse_detailed(seven_eight_played.note_table()),
    }
    return out


@pytest.mark.parametrize("metre", ["4/4", "3/4", "6/8", "7/8"])
def test_own_metre_is_consistent(analyses, metre):
    """Each tune checked against its own notated metre: consistent, exit code 0, every notated bar line on a downbeat."""
    v = check_notated(analyses[metre], metre)
    assert v.verdict == "consistent" and v.exit_code == 0
    assert v.relation == "same" and v.notated.log_odds == 0.0
    assert v.disagreeing_bars == [] and v.suggestion is None


@pytest.mark.parametrize("metre, wrong", [("4/4", "3/4"), ("6/8", "4/4"), ("7/8", "4/4"), ("3/4", "4/4"), ("3/4", "2/4"),
                                          ("4/4", "7/8"), ("6/8", "9/8")])
def test_wrong_metre_is_inconsistent(analyses, metre, wrong):
    """A metre of another family or bar length: inconsistent, exit code 1, the true metre suggested, bar lines that disagree."""
    v = check_notated(analyses[metre], wrong)
    assert v.verdict == "inconsistent" and v.exit_code == 1
    assert v.relation == "other" and v.notated.log_odds > 0
    assert v.best.time_signature == metre and v.suggestion.startswith(metre)
    assert len(v.disagreeing_bars) <= v.n_bars
    if (metre, wrong) != ("6/8", "4/4"):  # a 4/4 of dotted-quarter beats keeps the 6/8 bar lines; its beats' division differs
        assert len(v.disagreeing_bars) > 0
    t0, t1 = analyses[metre].times_s[[0, -1]]
    for bar in v.disagreeing_bars:
        assert t0 - 0.1 <= bar.start_s < bar.end_s and bar.start_s <= t1 + 0.1
        assert np.min(np.abs(analyses[metre].result.downbeats_s - bar.start_s)) > 0.07


@pytest.mark.parametrize("metre, relative, relation", [("4/4", "2/4", "nested"), ("3/4", "6/8", "regrouped"), ("6/8", "12/8", "nested")])
def test_close_relatives_are_not_inconsistent(analyses, metre, relative, relation):
    """The bar doubled or halved, or the same bar grouped otherwise: ambiguous (exit code 3) or consistent, never inconsistent."""
    v = check_notated(analyses[metre], relative)
    assert v.relation == relation
    assert v.verdict in ("ambiguous", "consistent")
    assert v.exit_code == EXIT_CODES[v.verdict]


def test_scores_come_from_the_reading_model(analyses):
    """The notated and best scores are the scores of the metric tree's readings; log-odds are their difference over the temperature."""
    a = analyses["3/4"]
    v = check_notated(a, "4/4")
    scores = [c.score for c in a.tree.candidates]
    assert v.best.score == pytest.approx(max(scores))
    assert v.notated.score in scores
    assert v.notated.log_odds == pytest.approx((v.best.score - v.notated.score) / a.settings.tree.model.temperature)
    assert 0 < v.notated.probability < v.best.probability


def test_verdict_is_a_frozen_record_with_a_json_form(analyses):
    """Verdict is a frozen dataclass; to_dict() is plain JSON with the verdict, both scores and the bars."""
    v = check_notated(analyses["4/4"], "3/4")
    assert isinstance(v, Verdict)
    with pytest.raises(dataclasses.FrozenInstanceError):
        v.verdict = "consistent"
    d = json.loads(json.dumps(v.to_dict()))
    assert {"verdict", "exit_code", "time_signature", "notated", "best", "relation", "n_bars", "disagreeing_bars", "suggestion",
            "message"} <= d.keys()
    assert {"time_signature", "score", "probability", "log_odds", "first_downbeat_s", "bar_s"} <= d["notated"].keys()
    assert {"bar", "start_s", "end_s"} <= d["disagreeing_bars"][0].keys()


def test_metre_change_makes_one_notated_metre_inconsistent():
    """4/4, then 3/4, then 4/4: checked as 4/4 throughout, inconsistent, naming the 3/4 stretch."""
    piece = render_sections((ODE_TO_JOY, AMAZING_GRACE_BARS, ODE_TO_JOY), 0.5, seed=2, drift_sd=0.04)
    v = check_notated(analyse_detailed(piece.notes), "4/4")
    assert v.verdict == "inconsistent"
    assert "3/4 from" in v.message and "3/4 from" in v.suggestion


def test_parse_time_signature_is_exported():
    """check.parse_time_signature: '7/8' is (7, 8); bad text is an InputError."""
    assert parse_time_signature("7/8") == (7, 8)
    with pytest.raises(InputError):
        parse_time_signature("seven eighths")


# ---- the command line ----

@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("check")
    grace = rendering_to_midi(d / "grace.mid", render_tune(AMAZING_GRACE, 0.45, seed=34, drift_sd=0.04), time_signature=(3, 4))
    ode_played = render_tune(ODE_TO_JOY, 0.5, seed=35)
    csv = d / "ode.csv"
    csv.write_text("time_s\n" + "".join(f"{float(t)!r}\n" for t in np.unique(ode_played.notes.onsets_s)))
    # Row, Row, Row Your Boat played freely and saved by a sequencer that wrote its defaults: 4/4 at 120 bpm.
    boat = render_tune(ROW_YOUR_BOAT, 0.3, seed=36, drift_sd=0.04)
    nt = boat.notes
    free = write_midi(d / "boat.mid", [("voice", 0, False, list(zip(nt.onsets_s, nt.onsets_s + nt.durations_s, nt.pitches, [80] * len(nt))))],
                      time_signature=(4, 4), tempo_bpm=120.0)
    return {"grace": grace, "csv": csv, "free": free}


def test_cli_checks_the_files_own_time_signature(files):
    """``check FILE``: the file's 3/4 is consistent, exit code 0, and the summary says where it came from."""
    res = _run("check", files["grace"])
    assert res.exit_code == 0, res.stderr
    assert res.stdout.startswith("consistent:") and "(from the file)" in res.stdout


def test_cli_given_wrong_metre_exits_1(files):
    """``check FILE --time-signature 4/4`` on a 3/4 hymn: inconsistent, exit code 1, a suggestion."""
    res = _run("check", files["grace"], "--time-signature", "4/4")
    assert res.exit_code == 1
    assert res.stdout.startswith("inconsistent:") and "suggestion: 3/4" in res.stdout


def test_cli_ambiguous_exits_3(files):
    """A close relative with weak evidence: 6/8 for the 3/4 hymn is ambiguous, exit code 3."""
    res = _run("check", files["grace"], "-s", "6/8")
    assert res.exit_code == 3
    assert res.stdout.startswith("ambiguous:")


def test_cli_json(files):
    """``--json``: one line with the verdict, its evidence and the segments."""
    res = _run("check", files["grace"], "--json", "-s", "4/4")
    assert res.exit_code == 1
    obj = json.loads(res.stdout)
    assert obj["verdict"] == "inconsistent" and obj["exit_code"] == 1 and obj["notated_from"] == "given"
    assert obj["best"]["time_signature"] == "3/4" and obj["segments"][0]["time_signature"] == "3/4"


@pytest.mark.parametrize("key, args, needle", [("csv", [], "no time signature"), ("grace", ["-s", "3/5"], "power of two"),
                                              ("grace", ["-s", "11/8"], "cannot check"), ("grace", ["-s", "waltz"], "not of the form")])
def test_cli_bad_input_exit_code_2(files, key, args, needle):
    """No time signature to check (an onset list), or a bad one: one error line, exit code 2."""
    res = _run("check", files[key], *args)
    assert res.exit_code == 2
    assert res.stdout == "" and len(res.stderr.strip().splitlines()) == 1
    assert res.stderr.startswith("metertop: error:") and needle in res.stderr


def test_cli_missing_file_exit_code_2(tmp_path):
    """A missing file: exit code 2, one line."""
    res = _run("check", tmp_path / "nowhere.mid", "-s", "3/4")
    assert res.exit_code == 2 and "no such file" in res.stderr


def test_cli_sequencer_default_in_plain_words(files):
    """A freely played 6/8 song saved with the sequencer's default 4/4: inconsistent, and the note says the 4/4 is a default."""
    res = _run("check", files["free"])
    assert res.exit_code == 1
    assert "sequencer" in res.stdout and "recorded freely" in res.stdout


def test_file_grid_share_tells_free_playing_from_playing_to_the_click(files, tmp_path):
    """Notes played to the file's own click sit on its sixteenths; freely played ones about as often as chance (a quarter)."""
    from metertop.check import file_grid_share
    from metertop.load import load_notes

    on_grid = render_tune(ODE_TO_JOY, 0.5, seed=37, jitter_s=0.0, start_s=0.0)  # quarters of 0.5 s: the file's 120 bpm
    nt = on_grid.notes
    clicked = write_midi(tmp_path / "clicked.mid", [("p", 0, False, list(zip(nt.onsets_s, nt.onsets_s + nt.durations_s, nt.pitches,
                                                                             [80] * len(nt))))], time_signature=(4, 4), tempo_bpm=120.0)
    assert file_grid_share(clicked, load_notes(clicked).onsets_s) > 0.95
    assert file_grid_share(files["free"], load_notes(files["free"]).onsets_s) < 0.5
    assert file_grid_share(files["csv"], [0.0, 1.0]) is None


def test_cli_analyse_given_time_signature_warns(files):
    """``analyse --time-signature 4/4`` on the 3/4 hymn: the 4/4 grid is reported, with a warning that the playing contradicts it."""
    res = _run("analyse", files["grace"], "--time-signature", "4/4")
    assert res.exit_code == 0, res.stderr
    assert res.stdout.startswith("time signature 4/4") and "warning: the playing contradicts 4/4" in res.stdout
    obj = json.loads(_run("analyse", files["grace"], "--json", "-s", "4/4").stdout)
    assert obj["time_signature"] == "4/4" and obj["check"]["verdict"] == "inconsistent"
    assert obj["beats_per_bar"] == 4 and len(obj["downbeats_s"]) > 4


def test_analyse_given_time_signature_fits_phase_and_tempo(analyses):
    """The given metre's grid follows the played tempo curve: for the 6/8 song given 6/8, the same beats as the proposal."""
    from metertop.pipeline import choose_reading

    a = analyses["6/8"]
    forced = choose_reading(a, time_signature="6/8").result
    np.testing.assert_allclose(forced.beats_s, a.result.beats_s)
    other = choose_reading(a, time_signature="3/4").result
    assert other.time_signature == "3/4" and other.extra["chosen"] == "time signature 3/4"
    assert other.alternatives[0].time_signature == "3/4" and other.confidence < a.result.confidence


def test_onset_list_checked_against_a_given_metre():
    """An onset list with accents every third beat, given 3/4 and 4/4 (the library on plain arrays)."""
    t = 0.5 + np.arange(48) * 0.5
    a = analyse_detailed(notes_from_onsets(t, np.tile([3.0, 1.0, 1.0], 16)))
    assert check_notated(a, "3/4").verdict == "consistent"
    assert check_notated(a, "4/4").verdict == "inconsistent"
