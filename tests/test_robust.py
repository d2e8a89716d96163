"""Hostile input: fuzzing the command line and the library, and the size limits.

The rule (RULES.md, "How work gets done here"): bad input gets one clear line
``metertop: error: ...`` and exit code 2, never a traceback; the library
raises only :class:`metertop.InputError` for it. Inputs come from the seeded
mutator in ``bench/hostile.py`` (damaged MIDI files and onset lists), from
``bench/hostile_audio.py`` (odd and damaged recordings) and from hypothesis
(onset arrays that parse but are degenerate). ``make bench-robust`` runs
10,000 inputs of the first stream and 1,000 of the second through the full
analysis and reports the crash count.
"""

from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import metertop
from metertop import InputError, load_notes
from metertop.limits import MAX_FILE_BYTES, MAX_NOTES, MAX_SPAN_S, LimitError

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))
from hostile import hostile_input, run_cli  # noqa: E402

FUZZ_SEED = 8
N_FUZZ = 500
# A full analysis costs about half a second, so in `make test` only this
# many of the inputs that load are analysed; bench/robust.py analyses all.
N_ANALYSED = 40


def test_fuzzed_files_give_one_line_errors_or_results(tmp_path):
    """500 damaged MIDI files and onset lists: the library raises only InputError, and the CLI (`tracks` on every MIDI
    file, `analyse` with and without --json on every file the loader refuses and on 40 it reads) exits 0 (with strict
    JSON) or 2 with one error line, never a traceback or a warning."""
    crashes, seen = [], {"refused": 0, "analysed": 0}
    analysed = 0
    for i in range(N_FUZZ):
        h = hostile_input(FUZZ_SEED, i)
        path = tmp_path / f"fuzz{i}{h.suffix}"
        path.write_bytes(h.data)
        replay = f"python bench/hostile.py {FUZZ_SEED} {i} /tmp/case  # {h.case}"
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("error")
                load_notes(path)
            loads = True
        except InputError:
            loads = False
        except Exception as exc:  # the finding this test exists for
            crashes.append(f"load_notes: {type(exc).__name__}: {exc} <- {replay}")
            continue
        commands = [["tracks", str(path)]] if h.suffix == ".mid" else []
        if not loads or analysed < N_ANALYSED:
            # Alternate the JSON and the text summary, so that both ways of printing meet odd results.
            commands.append(["analyse", "--json", str(path)] if i % 2 else ["analyse", str(path)])
            analysed += loads
        for args in commands:
            outcome = run_cli(args)
            if outcome.verdict == "crash":
                crashes.append(f"{args[0]}: {outcome.detail} <- {replay}")
            elif args[0] == "analyse":
                seen[outcome.verdict] += 1
    assert not crashes, "\n".join(crashes)
    # The stream must exercise both outcomes, or this test proves nothing.
    assert seen["refused"] >= 200 and seen["analysed"] >= 10, seen


RECORDINGS_SEED = 31  # bench/robust.py runs seed 4242
N_RECORDINGS = 150  # about 10 s: most inputs are refused in milliseconds


def test_fuzzed_recordings_give_one_line_errors_or_results(tmp_path):
    """150 hostile recordings (bench/hostile_audio.py: odd content, rates and channels; damaged headers and bytes; wrong
    suffixes), each under the command it names (analyse with --json, --kit, --no-kit or --band-weights, or check -s
    4/4): a result (check's verdicts included) or one error line with exit 2, never a traceback or a warning."""
    pytest.importorskip("soundfile")
    from hostile_audio import hostile_recording

    crashes, seen = [], {"refused": 0, "analysed": 0}
    for i in range(N_RECORDINGS):
        h = hostile_recording(RECORDINGS_SEED, i)
        path = tmp_path / f"rec{i}{h.suffix}"
        path.write_bytes(h.data)
        outcome = h.run(path)
        if outcome.verdict == "crash":
            crashes.append(f"{' '.join(h.command)}: {outcome.detail} <- python bench/hostile_audio.py {RECORDINGS_SEED} {i} "
                           f"/tmp/case  # {h.case}")
        else:
            seen[outcome.verdict] += 1
        path.unlink()
    assert not crashes, "\n".join(crashes)
    # Both outcomes must occur, or this test proves nothing.
    assert seen["refused"] >= 50 and seen["analysed"] >= 10, seen


# ---- degenerate but parseable onsets, from hypothesis ----

@st.composite
def degenerate_onsets(draw):
    """Onset arrays that parse but stress the pipeline: clusters, single pitches, far offsets, gaps, extreme weights."""
    n = draw(st.integers(1, 60))
    kind = draw(st.sampled_from(["grid", "cluster", "random", "two-blocks"]))
    step = draw(st.sampled_from([0.001, 0.03, 0.1, 0.5, 2.0, 7.0]))
    if kind == "grid":
        t = np.arange(n) * step
    elif kind == "cluster":
        t = np.repeat(np.arange(max(n // 10, 1)) * step, 10)[:n]
    elif kind == "random":
        t = np.sort(np.asarray(draw(st.lists(st.floats(0, 60, allow_nan=False), min_size=n, max_size=n))))
    else:
        gap = draw(st.floats(0.0, 600.0))
        t = np.concatenate([np.arange(n) * step, gap + np.arange(n) * step])
    t = t + draw(st.sampled_from([0.0, 1e-9, 3.7, 5e4, 99_000.0]))
    weights = draw(st.sampled_from([None, "zeros", "equal", "huge", "tiny", "mixed"]))
    w = {None: None, "zeros": np.zeros(len(t)), "equal": np.full(len(t), 3.0), "huge": np.full(len(t), 1e300),
         "tiny": np.full(len(t), 1e-300), "mixed": np.where(np.arange(len(t)) % 3 == 0, 1e300, 1e-300)}[weights]
    pitches = draw(st.sampled_from([None, "one", "octaves"]))
    p = {None: None, "one": np.full(len(t), 60), "octaves": 36 + 12 * (np.arange(len(t)) % 4)}[pitches]
    return t, w, p


@settings(max_examples=20, derandomize=True, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(degenerate_onsets())
def test_degenerate_onsets_give_input_errors_or_sane_results(case):
    """Degenerate onsets: an InputError, or a result with finite numbers, sorted beats, confidences in 0..1 and strict
    JSON; never another exception or a warning."""
    t, w, p = case
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            result = metertop.analyse(metertop.notes_from_onsets(t, w, p))
        except InputError:
            return
    d = result.to_dict()
    json.dumps(d, allow_nan=False)
    assert np.all(np.diff(result.beats_s) > 0) and np.all(np.diff(result.downbeats_s) > 0)
    assert 0.0 <= result.confidence <= 1.0
    assert all(0.0 <= lv.confidence <= 1.0 + 1e-12 and lv.period_s > 0 for lv in result.levels)
    assert result.bar_s > 0 and result.beat_s > 0 and np.isfinite(result.tempo_bpm)


# ---- hostile onset lists the fuzzer found, kept as named cases ----

ROWS = "".join(f"{0.25 + 0.4 * k},{1 + (k % 4 == 0)},{60 + k % 5}\n" for k in range(24))

NAMED = {
    "json-huge-integer": ("onsets.json", "[1" + "0" * 400 + ", 1, 2, 3]", "too large"),
    "json-5000-digits": ("onsets.json", "[1" + "0" * 5000 + ", 1, 2, 3]", "too long"),
    "json-deep-nesting": ("onsets.json", "[" * 100_000, "nested too deeply"),
    "json-pitch-inf": ("onsets.json", json.dumps([{"time_s": 0.5, "pitch": 1e300}, {"time_s": 1.0}]), "not a MIDI note number"),
    "csv-pitch-inf": ("onsets.csv", "time_s,weight,pitch\n" + ROWS + "9.9,1,inf\n", "line 26: pitch inf is not a MIDI note"),
    "csv-pitch-fraction": ("onsets.csv", "time_s,pitch\n0.5,60.5\n", "pitch 60.5 is not a MIDI note number"),
    "csv-mixed-separators": ("onsets.csv", "time_s,weight,pitch\n" + ROWS + "9.9;1;60\n", "another separator than the header"),
    "utf-16-without-bom": ("onsets.csv", ("time_s\n" + ROWS).encode("utf-16-le"), "UTF-16 text without a byte-order mark"),
    "latin-1": ("onsets.csv", "t\u00eame_s\n0.5\n".encode("latin-1"), "not UTF-8 text \\(byte 1\\)"),
    "comments-only": ("onsets.csv", "# nothing but a comment\n", "holds no onsets"),
    "nul-in-csv": ("onsets.csv", "time_s\n0.5\n\x001.0\n", "NUL characters"),
}


@pytest.mark.parametrize("case", sorted(NAMED))
def test_named_hostile_onset_lists(tmp_path, case):
    """Each hostile onset list the fuzzer turned up is an InputError naming the problem, and one CLI line with exit 2."""
    name, content, expected = NAMED[case]
    path = tmp_path / name
    path.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    with pytest.raises(InputError, match=expected):
        load_notes(path)
    outcome = run_cli(["analyse", str(path)])
    assert outcome.verdict == "refused", outcome
    assert str(path) in outcome.detail


def test_utf16_with_byte_order_mark_reads_like_utf8(tmp_path):
    """An onset list saved as UTF-16 with a byte-order mark (a spreadsheet's "Unicode text") reads exactly like its UTF-8 twin."""
    text = "time_s\tweight\tpitch\n" + ROWS.replace(",", "\t")
    a, b = tmp_path / "a.tsv", tmp_path / "b.tsv"
    a.write_text(text, encoding="utf-8")
    b.write_bytes(text.encode("utf-16"))
    na, nb = load_notes(a), load_notes(b)
    np.testing.assert_array_equal(na.onsets_s, nb.onsets_s)
    np.testing.assert_array_equal(na.weights, nb.weights)
    np.testing.assert_array_equal(na.pitches, nb.pitches)


def test_huge_weights_do_not_overflow(tmp_path):
    """Weights near the largest float give the same reading as the same weights scaled down, and no overflow warning."""
    t = 0.5 + 0.45 * np.arange(30)
    w = np.where(np.arange(30) % 3 == 0, 3.0, 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        big = metertop.analyse(metertop.notes_from_onsets(t, w * 1e307))
    small = metertop.analyse(metertop.notes_from_onsets(t, w))
    assert big.time_signature == small.time_signature
    np.testing.assert_allclose(big.downbeats_s, small.downbeats_s)


# ---- the limits (metertop/limits.py), each refused before the expensive work ----

def test_far_onset_is_refused_by_the_span_limit(monkeypatch):
    """Onsets spanning more than MAX_SPAN_S are a LimitError that states the limit, raised before the tempo stage runs."""
    import metertop.pipeline as pipeline

    def no_tempo(*args, **kwargs):
        raise AssertionError("the tempo stage ran on an input over the span limit")

    monkeypatch.setattr(pipeline, "track_pulse", no_tempo)
    t = np.concatenate([0.5 * np.arange(20), [MAX_SPAN_S + 60.0]])
    with pytest.raises(LimitError, match=f"at most {MAX_SPAN_S / 3600:g} hours"):
        metertop.analyse(t)


def test_too_many_onset_rows_refused_before_reading_numbers(tmp_path, monkeypatch):
    """An onset list of MAX_NOTES + 1 rows is refused, stating the limit, before a single number is parsed."""
    import metertop.load as load

    def no_parse(*args, **kwargs):
        raise AssertionError("numbers were parsed in a file over the limit")

    monkeypatch.setattr(load, "_parse_float", no_parse)
    path = tmp_path / "many.csv"
    path.write_text("time_s\n" + "0.5\n" * (MAX_NOTES + 1))
    with pytest.raises(LimitError, match=f"{MAX_NOTES + 1:,} notes; metertop analyses at most {MAX_NOTES:,}"):
        load_notes(path)


def test_too_many_notes_in_a_table(tmp_path):
    """A NoteTable handed to analyse with more than MAX_NOTES notes is refused before events are merged."""
    t = np.linspace(0.0, 3600.0, MAX_NOTES + 1)
    with pytest.raises(LimitError, match=f"at most {MAX_NOTES:,} notes"):
        metertop.analyse(t)


def test_oversized_file_refused_unread(tmp_path):
    """A file larger than MAX_FILE_BYTES is refused from its size alone (a sparse file: no bytes are read), with one CLI line."""
    path = tmp_path / "huge.mid"
    with open(path, "wb") as fh:
        fh.truncate(MAX_FILE_BYTES + 1)
    with pytest.raises(LimitError, match=f"at most {MAX_FILE_BYTES // 2**20} MB"):
        load_notes(path)
    outcome = run_cli(["analyse", str(path)])
    assert outcome.verdict == "refused" and "32 MB" in outcome.detail


def test_time_signature_no_notation_uses_is_left_out(tmp_path):
    """A time-signature event with a denominator of 2**200 (a damaged byte) is left out rather than reported as the file's
    metre; the notes are still analysed."""
    from hostile import _encode, meta, midi_seeds

    seed = midi_seeds()[0].copy()  # its conductor track: name, tempo, 3/4, key
    seed.tracks[0][2][1] = meta(0x58, bytes([13, 200, 24, 8]))
    path = tmp_path / "odd_metre.mid"
    path.write_bytes(_encode(seed))
    assert load_notes(path).time_signatures == ()
    outcome = run_cli(["analyse", str(path)])
    assert outcome.verdict == "analysed"


@pytest.mark.parametrize("index", [3396, 3491, 7630, 9906])
def test_fuzz_cases_where_no_window_can_measure_the_main_reading(tmp_path, index):
    """Damaged files from `make bench-robust` (seed 2026) whose metre-change windows all lack onsets: once a
    'Mean of empty slice' warning from the gate's median; now a result with one segment and no warning."""
    h = hostile_input(2026, index)
    path = tmp_path / f"case{h.suffix}"
    path.write_bytes(h.data)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = metertop.analyse(path)
    assert len(r.segments) == 1 and r.time_signature
