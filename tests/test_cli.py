"""The command line (metertop.cli), through typer's CliRunner."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

import metertop
from metertop.cli import app

from conftest import REPO, render_tune, rendering_to_midi, write_midi, AMAZING_GRACE, ODE_TO_JOY

TOP_KEYS = {"metertop_version", "time_signature", "beats_per_bar", "beat_division", "grouping", "bar_s", "beat_s",
            "tempo_bpm", "downbeats_s", "beats_s", "levels", "confidence", "alternatives", "segments"}

runner = CliRunner()


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


@pytest.fixture(scope="module")
def tune_files(tmp_path_factory):
    """A MIDI file (Amazing Grace, 3/4) and an onset list (Ode to Joy, 4/4), rendered from their notation."""
    d = tmp_path_factory.mktemp("cli")
    midi = rendering_to_midi(d / "grace.mid", render_tune(AMAZING_GRACE, 0.45, seed=41), time_signature=(3, 4))
    ode = render_tune(ODE_TO_JOY, 0.5, seed=42)
    csv = d / "ode.csv"
    nt = ode.notes
    csv.write_text("time_s,weight,pitch\n" + "\n".join(f"{float(t)!r},{1.0 + 0.5 * (k == 1)},{int(p)}"
                                                       for t, k, p in zip(nt.onsets_s, nt.track, nt.pitches)) + "\n")
    return midi, csv


def test_help():
    """``--help`` lists the commands and exits 0."""
    res = _run("--help")
    assert res.exit_code == 0
    assert "analyse" in res.stdout and "tracks" in res.stdout


def test_analyse_help():
    """``analyse --help`` documents --json and exits 0."""
    res = _run("analyse", "--help")
    assert res.exit_code == 0
    assert "--json" in res.stdout


def test_version():
    """``--version`` prints the package version and exits 0."""
    res = _run("--version")
    assert res.exit_code == 0
    assert metertop.__version__ in res.stdout


def test_analyse_summary_names_time_signature(tune_files):
    """``analyse FILE`` exits 0 and its summary names the proposed time signature."""
    midi, csv = tune_files
    for path, ts in ((midi, "3/4"), (csv, "4/4")):
        res = _run("analyse", path)
        assert res.exit_code == 0, res.stderr
        expected = metertop.analyse(path).time_signature
        assert f"time signature {expected}" in res.stdout
        assert res.stderr == ""


def test_analyse_json_one_line_per_file(tune_files):
    """``analyse --json`` prints one parseable JSON line per file, with every contract key and the library's answer."""
    midi, csv = tune_files
    res = _run("analyse", "--json", midi, csv)
    assert res.exit_code == 0, res.stderr
    lines = res.stdout.strip().splitlines()
    assert len(lines) == 2
    for line, path in zip(lines, (midi, csv)):
        obj = json.loads(line)
        assert TOP_KEYS <= obj.keys()
        lib = metertop.analyse(path)
        assert obj["time_signature"] == lib.time_signature
        assert obj["bar_s"] == pytest.approx(lib.bar_s, abs=1e-5)


def test_analyse_engines_agree(tune_files):
    """``--engine unionfind`` gives the same JSON answer as the default dionysus engine."""
    midi, _ = tune_files
    a = json.loads(_run("analyse", "--json", midi).stdout)
    b = json.loads(_run("analyse", "--json", "--engine", "unionfind", midi).stdout)
    assert a["time_signature"] == b["time_signature"]
    np.testing.assert_allclose(a["downbeats_s"], b["downbeats_s"], atol=1e-5)


def test_tracks_lists_tracks(tmp_path):
    """``tracks FILE`` lists each note-bearing track with its index, kind, note count and name."""
    path = write_midi(tmp_path / "band.mid", [("fiddle", 40, False, [(0.0, 0.4, 67, 80), (0.5, 0.9, 69, 80)]),
                                              ("kit", 0, True, [(0.0, 0.1, 36, 100)])])
    res = _run("tracks", path)
    assert res.exit_code == 0, res.stderr
    lines = res.stdout.strip().splitlines()
    assert len(lines) == 2
    assert lines[0].split()[0] == "0" and "fiddle" in lines[0] and "2 notes" in lines[0]
    assert lines[1].split()[0] == "1" and "kit" in lines[1] and "drums" in lines[1] and "1 notes" in lines[1]


def test_track_option_selects_track(tmp_path):
    """``--track`` restricts the analysis to the chosen track; a track that does not exist is exit code 2."""
    played = render_tune(ODE_TO_JOY, 0.5, seed=43)
    path = rendering_to_midi(tmp_path / "ode.mid", played)
    n_bass = int((played.notes.track == 1).sum())
    res = _run("analyse", "--json", "--track", "1", path)
    assert res.exit_code == 0, res.stderr
    assert json.loads(res.stdout)["n_events"] == n_bass
    assert json.loads(_run("analyse", "--json", path).stdout)["n_events"] > n_bass
    bad = _run("analyse", "--track", "9", path)
    assert bad.exit_code == 2


def _bad_inputs(tmp_path):
    """Every kind of bad input, as (id, path)."""
    out = {}
    out["missing"] = tmp_path / "nowhere.mid"
    (tmp_path / "empty.csv").write_bytes(b"")
    out["empty"] = tmp_path / "empty.csv"
    out["midi-no-notes"] = write_midi(tmp_path / "silent.mid", [("empty", 0, False, [])])
    good = write_midi(tmp_path / "good.mid", [("p", 0, False, [(k * 0.5, k * 0.5 + 0.4, 60, 80) for k in range(16)])])
    data = good.read_bytes()
    (tmp_path / "truncated.mid").write_bytes(data[: len(data) // 2])
    out["corrupt-midi"] = tmp_path / "truncated.mid"
    (tmp_path / "garbage.mid").write_bytes(b"MThd" + bytes(range(64)))
    out["garbage-midi"] = tmp_path / "garbage.mid"
    for name, bad in (("text", "abc"), ("negative", "-2.0"), ("nan", "nan")):
        p = tmp_path / f"{name}.csv"
        p.write_text("time_s,weight\n" + "".join(f"{k * 0.5},1\n" for k in range(10)) + f"{bad},1\n")
        out[f"csv-{name}"] = p
    (tmp_path / "few.csv").write_text("time_s\n0.0\n0.5\n1.0\n")
    out["too-few-onsets"] = tmp_path / "few.csv"
    (tmp_path / "nohead.csv").write_text("onset,weight\n0.5,1\n")
    out["header-without-time_s"] = tmp_path / "nohead.csv"
    return out


BAD_IDS = ["missing", "empty", "midi-no-notes", "corrupt-midi", "garbage-midi", "csv-text", "csv-negative", "csv-nan",
           "too-few-onsets", "header-without-time_s"]


@pytest.mark.parametrize("json_flag", [False, True], ids=["summary", "json"])
@pytest.mark.parametrize("case", BAD_IDS)
def test_bad_input_exit_code_2_and_one_line(tmp_path, case, json_flag):
    """Each bad input: exit code 2, nothing on stdout, and one error line on stderr without a traceback."""
    path = _bad_inputs(tmp_path)[case]
    args = ["analyse"] + (["--json"] if json_flag else []) + [path]
    res = _run(*args)
    assert res.exit_code == 2
    assert res.stdout == ""
    err = res.stderr.strip().splitlines()
    assert len(err) == 1, res.stderr
    assert err[0].startswith("metertop: error:")
    assert "Traceback" not in res.stderr
    assert res.exception is None or isinstance(res.exception, SystemExit)


def test_bad_file_among_good_ones(tmp_path, tune_files):
    """One bad file among good ones: the good ones still print, and the exit code is 2."""
    midi, csv = tune_files
    res = _run("analyse", "--json", midi, tmp_path / "missing.csv", csv)
    assert res.exit_code == 2
    assert len(res.stdout.strip().splitlines()) == 2
    assert len(res.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("args", [["analyse", "--engine", "nope", "x.mid"], ["analyse", "--merge-ms", "-5", "x.mid"],
                                  ["tracks", "nowhere.mid"]])
def test_bad_options_exit_code_2(args, tmp_path):
    """An unknown engine, a negative merge window, or tracks of a missing file: exit code 2 and one error line."""
    res = _run(*args)
    assert res.exit_code == 2
    assert len(res.stderr.strip().splitlines()) == 1
    assert "Traceback" not in res.stderr


def test_tracks_on_corrupt_file_exit_code_2(tmp_path):
    """``tracks`` on a file that is no MIDI: exit code 2 and one error line."""
    p = tmp_path / "onsets.csv"
    p.write_text("time_s\n0\n1\n")
    res = _run("tracks", p)
    assert res.exit_code == 2
    assert len(res.stderr.strip().splitlines()) == 1


def test_python_dash_m_help():
    """``python -m metertop --help`` runs the same command line in a fresh interpreter."""
    proc = subprocess.run([sys.executable, "-m", "metertop", "--help"], capture_output=True, text=True, cwd=REPO, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert "analyse" in proc.stdout
