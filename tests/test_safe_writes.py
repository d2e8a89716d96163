"""Nothing is lost: inputs are never modified, outputs are written whole or not at all (metertop.outputs).

The input check is table-driven: ``COMMANDS`` lists every command that reads
an input file, as argument templates; add a row for each new command (and
each option that writes a file), and every input kind is hashed before and
after it runs.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import stat
from pathlib import Path

import pytest
from typer.testing import CliRunner

from metertop.cli import app
from metertop.errors import OutputError
from metertop.outputs import atomic_path, atomic_write, check_target

from conftest import AMAZING_GRACE, render_tune, rendering_to_midi

# name -> (arguments, input kinds it reads). "{input}" is the input file, "{out}"
# an empty folder for anything the command writes. Every run must exit 0 on
# these valid inputs, leave each input byte for byte as it was, and write
# nothing beside it.
COMMANDS: dict[str, tuple[list[str], set[str]]] = {
    "analyse": (["analyse", "{input}"], {"midi", "csv", "tsv", "json", "wav"}),
    "analyse --json": (["analyse", "--json", "{input}"], {"midi", "csv", "tsv", "json", "wav"}),
    "analyse --onsets-out": (["analyse", "{input}", "--onsets-out", "{out}/onsets.csv"], {"midi", "csv", "wav"}),
    "analyse --track": (["analyse", "--track", "0", "{input}"], {"midi"}),
    "tracks": (["tracks", "{input}"], {"midi"}),
    "check": (["check", "--time-signature", "3/4", "{input}"], {"midi", "csv", "wav"}),
    "analyse --write-midi --beats": (["analyse", "{input}", "--write-midi", "{out}/grid.mid", "--beats", "{out}/beats.tsv"], {"midi", "csv", "wav"}),
    "analyse --time-signature": (["analyse", "--time-signature", "3/4", "{input}"], {"midi"}),
    "plot": (["plot", "{input}", "-o", "{out}/figure.png"], {"midi", "csv", "wav"}),
    "batch": (["batch", "{input}", "-o", "{out}/results.jsonl"], {"midi", "csv"}),
}


@pytest.fixture(scope="module")
def inputs(tmp_path_factory) -> dict[str, Path]:
    """One valid input of each kind, each alone in its own folder: Amazing Grace (3/4), rendered from its notation."""
    played = render_tune(AMAZING_GRACE, 0.45, seed=81)
    nt = played.notes
    rows = list(zip(nt.onsets_s.tolist(), (1.0 + (nt.track == 1)).tolist(), nt.pitches.tolist()))
    out = {}
    for kind in ("midi", "csv", "tsv", "json", "wav"):
        folder = tmp_path_factory.mktemp(f"input-{kind}")
        if kind == "midi":
            out[kind] = rendering_to_midi(folder / "grace.mid", played, time_signature=(3, 4))
            continue
        if kind == "wav":  # the same performance synthesised (bench/synth.py), as a recording
            out[kind] = _recording(folder / "grace.wav", nt)
            continue
        path = folder / f"grace.{kind}"
        if kind == "json":
            path.write_text(json.dumps([{"time_s": t, "weight": w, "pitch": p} for t, w, p in rows]))
        else:
            sep = "," if kind == "csv" else "\t"
            path.write_text(sep.join(["time_s", "weight", "pitch"]) + "\n" + "".join(f"{t!r}{sep}{w}{sep}{p}\n" for t, w, p in rows))
        out[kind] = path
    return out


def _recording(path: Path, nt) -> Path:
    import sys

    import soundfile as sf

    from conftest import REPO

    if str(REPO / "bench") not in sys.path:
        sys.path.insert(0, str(REPO / "bench"))
    from synth import synthesise

    sf.write(str(path), synthesise(nt.onsets_s, nt.durations_s, nt.pitches, nt.velocities, nt.is_drum, sample_rate=22_050), 22_050)
    return path


def _fingerprint(path: Path) -> tuple[str, int, int]:
    st = path.stat()
    return hashlib.sha256(path.read_bytes()).hexdigest(), st.st_mtime_ns, stat.S_IMODE(st.st_mode)


CASES = [(name, kind) for name, (_, kinds) in COMMANDS.items() for kind in sorted(kinds)]


@pytest.mark.parametrize("name, kind", CASES, ids=[f"{n}-{k}" for n, k in CASES])
def test_commands_never_modify_their_input(inputs, tmp_path, name, kind):
    """Each command, on each input kind it reads: exit 0, the input's SHA-256, mtime and mode unchanged, no new file beside it."""
    args, _ = COMMANDS[name]
    source = inputs[kind]
    out = tmp_path / "out"
    out.mkdir()
    before = _fingerprint(source)
    beside = sorted(os.listdir(source.parent))
    res = CliRunner().invoke(app, [a.format(input=source, out=out) for a in args], prog_name="metertop")
    assert res.exit_code == 0, res.stderr
    assert _fingerprint(source) == before
    assert sorted(os.listdir(source.parent)) == beside


# ---- atomic writes: whole or nothing ----

def _leftovers(folder: Path, keep: set[str]) -> list[str]:
    return sorted(set(os.listdir(folder)) - keep)


def test_atomic_write_replaces_whole_and_keeps_the_usual_mode(tmp_path):
    """A write lands whole, under the mode a new file gets from the umask (not mkstemp's private 0600), with no temporary left."""
    target = tmp_path / "result.jsonl"
    atomic_write(target, "line one\n")
    assert target.read_text() == "line one\n"
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~umask
    os.chmod(target, 0o640)
    atomic_write(target, b"line two\n")
    assert target.read_bytes() == b"line two\n"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640  # a replaced file keeps its mode
    assert _leftovers(tmp_path, {"result.jsonl"}) == []


class _FillsUp:
    """A file object that takes ``room`` bytes, then fails like a full disk."""

    def __init__(self, real, room: int):
        self.real, self.room = real, room

    def write(self, data):
        if len(data) > self.room:
            self.real.write(data[: self.room])
            self.real.flush()
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        self.room -= len(data)
        return self.real.write(data)

    def flush(self):
        self.real.flush()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.real.close()


@pytest.mark.parametrize("existing", [False, True], ids=["new-file", "replacing"])
def test_disk_full_leaves_no_partial_file(tmp_path, monkeypatch, existing):
    """The disk filling up half-way through a write: an OutputError naming the target and the cause, no partial or
    temporary file, and an existing target left exactly as it was."""
    import metertop.outputs as outputs

    target = tmp_path / "tempo_map.mid"
    if existing:
        target.write_bytes(b"the old file")
    real_open = open
    monkeypatch.setattr(outputs, "open", lambda path, mode="r", *a, **k: _FillsUp(real_open(path, mode, *a, **k), 100),
                        raising=False)
    with pytest.raises(OutputError, match=r"tempo_map\.mid: could not write \(No space left on device\); nothing was written"):
        atomic_write(target, b"x" * 10_000)
    assert _leftovers(tmp_path, {"tempo_map.mid"}) == []
    if existing:
        assert target.read_bytes() == b"the old file"
    else:
        assert not target.exists()


def test_disk_full_at_sync_leaves_no_partial_file(tmp_path, monkeypatch):
    """A full disk reported only when the data is synced: the same clean failure."""
    def no_room(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", no_room)
    target = tmp_path / "out.json"
    with pytest.raises(OutputError, match="No space left on device"):
        atomic_write(target, "{}")
    assert os.listdir(tmp_path) == []


def test_writer_failing_inside_atomic_path_leaves_nothing(tmp_path):
    """A writer that fails part-way through (as a plotting or MIDI library might) leaves neither target nor temporary file."""
    target = tmp_path / "figure.png"
    with pytest.raises(OutputError, match="figure.png: could not write"):
        with atomic_path(target) as tmp:
            tmp.write_bytes(b"half a picture")
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
    assert os.listdir(tmp_path) == []


def test_folder_without_write_permission_simulated(tmp_path, monkeypatch):
    """A folder that refuses new files (EACCES from the system, simulated so that it holds for root too): a clear OutputError, nothing written."""
    import tempfile

    def refused(*args, **kwargs):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES))

    monkeypatch.setattr(tempfile, "mkstemp", refused)
    target = tmp_path / "result.jsonl"
    with pytest.raises(OutputError, match=r"result\.jsonl: cannot write here \(Permission denied\)"):
        atomic_write(target, "x")
    assert os.listdir(tmp_path) == []


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root writes into read-only folders")
def test_read_only_folder(tmp_path):
    """A real read-only folder: a clear OutputError, and the folder stays empty."""
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        with pytest.raises(OutputError, match="Permission denied"):
            atomic_write(folder / "result.jsonl", "x")
        assert os.listdir(folder) == []
    finally:
        folder.chmod(0o755)


def test_check_target_refuses_inputs_and_existing_files(tmp_path):
    """An output naming an input is refused even with force; an existing output needs force; a missing folder is named."""
    source = tmp_path / "take.mid"
    source.write_bytes(b"MThd")
    with pytest.raises(OutputError, match="refusing to write over the input file"):
        check_target(source, inputs=[source], force=True)
    with pytest.raises(OutputError, match="refusing to write over the input file"):
        check_target(tmp_path / "." / "take.mid", inputs=[source], force=True)
    with pytest.raises(OutputError, match="exists; give --force"):
        check_target(source)
    assert check_target(source, force=True) == source
    with pytest.raises(OutputError, match="does not exist"):
        check_target(tmp_path / "nowhere" / "x.json")
    with pytest.raises(OutputError, match="is a folder"):
        check_target(tmp_path)
