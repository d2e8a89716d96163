"""Writing a reading back as a tempo map (metertop.tempomap), read back with pretty_midi as the outside reference.

pretty_midi (PyPI) is a general-purpose MIDI library: it reads the written
Standard MIDI File, converts ticks to seconds through the tempo-change
events, and derives the bar lines from the time-signature events
(``get_downbeats``). The round trip must keep every note's time to within
1 ms, put pretty_midi's bar lines within 20 ms of metertop's downbeats, and
carry metertop's time signatures. The performances are published tunes
rendered from their notation (conftest.py) and an Essen training tune.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pretty_midi
import pytest
from typer.testing import CliRunner

from metertop.cli import app
from metertop.errors import OutputError
from metertop.notation import parse_time_signature
from metertop.pipeline import analyse_detailed
from metertop.tempomap import MIN_TICKS_PER_QUARTER, bar_grid, beats_table, write_tempo_map

from conftest import (AMAZING_GRACE, AMAZING_GRACE_BARS, ODE_TO_JOY, ROW_YOUR_BOAT, render_sections, render_tune, rendering_to_midi,
                      write_midi)

runner = CliRunner()


def _notes(pm):
    return sorted((n.start, n.end, n.pitch) for inst in pm.instruments for n in inst.notes)


def _close_to_any(a, b, tol):
    """Every value of ``a`` has one of ``b`` within ``tol``."""
    a, b = np.asarray(a), np.asarray(b)
    return bool(np.all(np.min(np.abs(a[:, None] - b[None, :]), axis=1) <= tol))


@pytest.fixture(scope="module")
def written(tmp_path_factory, seven_eight_played):
    """Four performances written as MIDI, analysed, and written back: (name, source, result, grid, reread)."""
    d = tmp_path_factory.mktemp("tempomap")
    sources = {
        "ode 4/4": rendering_to_midi(d / "ode.mid", render_tune(ODE_TO_JOY, 0.5, seed=21, drift_sd=0.04), time_signature=(4, 4)),
        "grace 3/4 with pickup": rendering_to_midi(d / "grace.mid", render_tune(AMAZING_GRACE, 0.45, seed=22, drift_sd=0.04)),
        "boat 6/8": rendering_to_midi(d / "boat.mid", render_tune(ROW_YOUR_BOAT, 0.3, seed=23, drift_sd=0.04)),
    }
    perf = seven_eight_played
    sources["ballad 7/8"] = write_midi(d / "ballad.mid", [("melody", 73, False, [(s, s + du, p, v) for s, du, p, v in zip(
        perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities)])], time_signature=None)
    out = {}
    for name, src in sources.items():
        result = analyse_detailed(src).result
        grid = write_tempo_map(result, src, d / f"{src.stem}.out.mid")
        out[name] = (src, result, grid, pretty_midi.PrettyMIDI(str(d / f"{src.stem}.out.mid")))
    return out


CASES = ["ode 4/4", "grace 3/4 with pickup", "boat 6/8", "ballad 7/8"]


@pytest.mark.parametrize("name", CASES)
def test_notes_keep_their_times(written, name):
    """Every note of the source comes back from the written file within 1 ms (start and end), same pitch."""
    src, _, _, pm = written[name]
    before, after = _notes(pretty_midi.PrettyMIDI(str(src))), _notes(pm)
    assert len(before) == len(after)
    a, b = np.array(before), np.array(after)
    np.testing.assert_array_equal(a[:, 2], b[:, 2])
    assert np.max(np.abs(a[:, 0] - b[:, 0])) < 0.001
    assert np.max(np.abs(a[:, 1] - b[:, 1])) < 0.001


@pytest.mark.parametrize("name", CASES)
def test_bar_lines_fall_on_the_downbeats(written, name):
    """pretty_midi's downbeats of the written file lie within 20 ms of metertop's, and the bar lines in between are metertop's."""
    _, result, _, pm = written[name]
    ref = pm.get_downbeats()
    assert _close_to_any(result.downbeats_s, ref, 0.020)
    inside = ref[(ref >= result.downbeats_s[0] - 0.02) & (ref <= result.downbeats_s[-1] + 0.02)]
    assert _close_to_any(inside, result.downbeats_s, 0.020)


@pytest.mark.parametrize("name", CASES)
def test_beat_lines_fall_on_the_beats(written, name):
    """Every detected beat is a beat line of the written file: a tick position of the time signature's beat unit."""
    _, result, grid, pm = written[name]
    ticks = np.array([pm.time_to_tick(t) for t in result.beats_s])
    expected = grid.ticks[grid.detected]
    assert len(ticks) == len(expected)
    assert np.max(np.abs(ticks - expected)) <= 2  # ticks of half a millisecond or less


@pytest.mark.parametrize("name", CASES)
def test_time_signature_and_tempo_map(written, name):
    """The file carries metertop's time signature from 0 s, a tempo map of many tempo changes, and >= 960 ticks a quarter."""
    _, result, grid, pm = written[name]
    assert [(ts.numerator, ts.denominator) for ts in pm.time_signature_changes] == [parse_time_signature(result.time_signature)]
    assert pm.time_signature_changes[0].time == 0.0
    times, tempi = pm.get_tempo_changes()
    assert len(tempi) > 10
    assert pm.resolution >= MIN_TICKS_PER_QUARTER
    # The quarter-note tempo between beats follows the played tempo (beats per minute of the beat unit).
    beat_q = 4.0 / parse_time_signature(result.time_signature)[1] * (3 if result.beat_division == 3 else 1)
    if result.grouping is None:
        assert np.median(tempi) == pytest.approx(result.tempo_bpm * beat_q, rel=0.05)


def test_first_bar_starts_at_zero_and_holds_the_pickup(written):
    """Pickup convention: bar 1 starts at 0 s and is a full bar; the pickup note lies in it; bar 2 starts on the first downbeat."""
    src, result, grid, pm = written["grace 3/4 with pickup"]
    first_note = min(n.start for inst in pm.instruments for n in inst.notes)
    downbeats = pm.get_downbeats()
    assert downbeats[0] == 0.0
    assert first_note < result.downbeats_s[0]
    assert downbeats[0] <= first_note < downbeats[1]
    assert abs(downbeats[1] - result.downbeats_s[0]) < 0.02
    assert grid.bar[0] == 1 and grid.beat[0] == 1 and grid.ticks[0] == 0
    assert grid.ticks[grid.bar == 2][0] == 3 * grid.ticks_per_quarter  # bar 1 is a full 3/4 bar in ticks


def test_beats_table(written):
    """The beats TSV lists every detected beat with its time, bar and beat; beat 1 rows are the downbeats."""
    _, result, grid, _ = written["ode 4/4"]
    rows = [line.split("\t") for line in beats_table(grid).strip().splitlines()]
    assert rows[0] == ["time_s", "bar", "beat", "time_signature"]
    times = np.array([float(r[0]) for r in rows[1:]])
    np.testing.assert_allclose(times, result.beats_s, atol=1e-6)
    downs = np.array([float(r[0]) for r in rows[1:] if r[2] == "1"])
    np.testing.assert_allclose(downs, result.downbeats_s, atol=1e-6)
    bars = [int(r[1]) for r in rows[1:]]
    assert bars == sorted(bars) and all(r[3] == "4/4" for r in rows[1:])


def test_metre_changes_become_time_signature_changes(tmp_path):
    """A piece in 4/4, then 3/4, then 4/4: the written file changes time signature at the segments, and its bar lines stay on the downbeats."""
    piece = render_sections((ODE_TO_JOY, AMAZING_GRACE_BARS, ODE_TO_JOY), 0.5, seed=2, drift_sd=0.04)
    result = analyse_detailed(piece.notes).result
    assert [s.time_signature for s in result.segments] == ["4/4", "3/4", "4/4"]
    src = tmp_path / "onsets.csv"
    nt = piece.notes
    src.write_text("time_s,pitch\n" + "".join(f"{float(t)!r},{int(p)}\n" for t, p in zip(nt.onsets_s, nt.pitches)))
    write_tempo_map(result, src, tmp_path / "out.mid")
    pm = pretty_midi.PrettyMIDI(str(tmp_path / "out.mid"))
    sigs = [(ts.numerator, ts.denominator) for ts in pm.time_signature_changes]
    assert sigs == [(4, 4), (3, 4), (4, 4)]
    changes = [ts.time for ts in pm.time_signature_changes[1:]]
    np.testing.assert_allclose(changes, [s.start_s for s in result.segments[1:]], atol=0.02)
    assert _close_to_any(result.downbeats_s, pm.get_downbeats(), 0.020)
    starts = np.sort([n.start for inst in pm.instruments for n in inst.notes])
    assert np.max(np.abs(starts - np.sort(nt.onsets_s))) < 0.001


def test_onset_list_round_trip(tmp_path):
    """An onset list without pitches is written as drum-channel hits at the same times (within 1 ms)."""
    played = render_tune(ODE_TO_JOY, 0.5, seed=24)
    src = tmp_path / "ode.csv"
    src.write_text("time_s\n" + "".join(f"{float(t)!r}\n" for t in np.unique(played.notes.onsets_s)))
    result = analyse_detailed(src).result
    write_tempo_map(result, src, tmp_path / "ode.mid")
    pm = pretty_midi.PrettyMIDI(str(tmp_path / "ode.mid"))
    assert all(inst.is_drum for inst in pm.instruments)
    starts = np.sort([n.start for inst in pm.instruments for n in inst.notes])
    assert np.max(np.abs(starts - np.unique(played.notes.onsets_s))) < 0.001


def test_slow_beats_raise_the_resolution(written):
    """Quarter beats of 1.5 s (a tick at 960 a quarter would last 1.6 ms) get twice the ticks, so notes stay within 1 ms."""
    _, result, _, _ = written["ode 4/4"]
    scale = 1.5 / result.beat_s
    slow = dataclasses.replace(result, downbeats_s=result.downbeats_s * scale, beats_s=result.beats_s * scale,
                               segments=[dataclasses.replace(s, start_s=s.start_s * scale, end_s=s.end_s * scale) for s in result.segments])
    grid = bar_grid(slow, end_s=float(slow.beats_s[-1]))
    assert grid.ticks_per_quarter == 2 * MIN_TICKS_PER_QUARTER
    assert np.max(np.diff(grid.realised_times_s()) / np.diff(grid.ticks)) <= 0.001


def test_refuses_the_input_and_existing_files(tmp_path, written):
    """Never the input; an existing output only with force; a refused write leaves the old file as it was."""
    src, result, _, _ = written["ode 4/4"]
    with pytest.raises(OutputError, match="input"):
        write_tempo_map(result, src, src, force=True)
    target = tmp_path / "taken.mid"
    target.write_bytes(b"keep me")
    with pytest.raises(OutputError, match="exists"):
        write_tempo_map(result, src, target)
    assert target.read_bytes() == b"keep me"
    write_tempo_map(result, src, target, force=True)
    assert pretty_midi.PrettyMIDI(str(target)).get_downbeats().size > 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken.mid"]  # no temporary file left behind


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


def test_cli_write_midi_and_beats(tmp_path, written):
    """``analyse --write-midi --beats``: both files written, reported, and refused the second time without --force."""
    src, result, _, _ = written["boat 6/8"]
    out, beats = tmp_path / "boat.mid", tmp_path / "boat.tsv"
    res = _run("analyse", src, "--write-midi", out, "--beats", beats)
    assert res.exit_code == 0, res.stderr
    assert f"wrote {out}" in res.stdout and f"wrote {beats}" in res.stdout
    assert len(beats.read_text().splitlines()) == len(result.beats_s) + 1
    again = _run("analyse", src, "--write-midi", out)
    assert again.exit_code == 2 and "exists" in again.stderr and len(again.stderr.strip().splitlines()) == 1
    assert _run("analyse", src, "--write-midi", out, "--force").exit_code == 0
    same = _run("analyse", src, "--write-midi", src, "--force")
    assert same.exit_code == 2 and "input" in same.stderr


def test_cli_reading_option_writes_that_reading(tmp_path, written):
    """``--reading 2`` reports and writes the second alternative."""
    src, result, _, _ = written["ode 4/4"]
    res = _run("analyse", src, "--json", "--reading", "2", "--write-midi", tmp_path / "r2.mid")
    assert res.exit_code == 0, res.stderr
    obj = json.loads(res.stdout)
    second = result.alternatives[1]
    assert obj["time_signature"] == second.time_signature
    assert obj["alternatives"][0]["phase_s"] == pytest.approx(second.phase_s, abs=1e-6)
    pm = pretty_midi.PrettyMIDI(str(tmp_path / "r2.mid"))
    assert (pm.time_signature_changes[0].numerator, pm.time_signature_changes[0].denominator) == parse_time_signature(second.time_signature)


@pytest.mark.parametrize("args", [["--reading", "99"], ["--reading", "0"], ["--reading", "2", "--time-signature", "3/4"]])
def test_cli_bad_reading_options(written, args):
    """A reading that does not exist, or both --reading and --time-signature: exit code 2 and one error line."""
    src = written["ode 4/4"][0]
    res = _run("analyse", src, *args)
    assert res.exit_code == 2
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.stderr


def test_cli_write_midi_needs_one_file(tmp_path, written):
    """``--write-midi`` with two input files is refused before any analysis."""
    a, b = written["ode 4/4"][0], written["boat 6/8"][0]
    res = _run("analyse", a, b, "--write-midi", tmp_path / "x.mid")
    assert res.exit_code == 2 and "exactly one FILE" in res.stderr
