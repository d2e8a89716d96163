"""``metertop batch``: one results file for a corpus, resumable, locally or on a Dask cluster.

The corpus is public-domain tunes rendered from their notation (conftest.py
names each source), written as MIDI files, with bad files mixed in. The
reference for every batch line is the single-file ``metertop analyse
--json`` of the same file.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest
from typer.testing import CliRunner

from metertop.batch import BatchOptions, Task, analyse_task, find_inputs
from metertop.batchfile import ResultsFile
from metertop.cli import app
from metertop.errors import InputError, OutputError
from metertop.progress import ProgressBar

from conftest import AMAZING_GRACE, ODE_TO_JOY, REPO, ROW_YOUR_BOAT, render_tune, rendering_to_midi, write_midi

BATCH_KEYS = ("path", "status", "error", "file", "options")
runner = CliRunner()


def _run(*args):
    return runner.invoke(app, [str(a) for a in args], prog_name="metertop")


def _good_corpus(folder, copies=1):
    """MIDI files of three tunes (4/4, 3/4, 6/8) at different tempi; returns their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k in range(copies):
        for tune, quarter_s, ts in ((ODE_TO_JOY, 0.5, (4, 4)), (AMAZING_GRACE, 0.45, (3, 4)), (ROW_YOUR_BOAT, 0.3, (6, 8))):
            played = render_tune(tune, quarter_s * (1 + 0.1 * k), seed=70 + k)
            paths.append(rendering_to_midi(folder / f"{k}_{tune.name}.mid", played, time_signature=ts))
    return paths


def _bad_files(folder):
    """A truncated MIDI file, an empty one, text named .mid and a MIDI file without notes."""
    folder.mkdir(parents=True, exist_ok=True)
    good = write_midi(folder / "tmp.mid", [("p", 0, False, [(k * 0.5, k * 0.5 + 0.4, 60, 80) for k in range(16)])])
    data = good.read_bytes()
    good.unlink()
    (folder / "truncated.mid").write_bytes(data[: len(data) // 2])
    (folder / "empty.mid").write_bytes(b"")
    (folder / "text.mid").write_text("these are not notes\n")
    write_midi(folder / "silent.mid", [("empty", 0, False, [])])
    return sorted(folder.glob("*.mid"))


def _lines(path):
    return [json.loads(line) for line in path.read_text().splitlines()]


def _analysis_only(line):
    return {k: v for k, v in line.items() if k not in BATCH_KEYS}


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    """A folder of good tunes with bad files in a subfolder, and each good file's single-file ``analyse --json``."""
    root = tmp_path_factory.mktemp("corpus")
    good = _good_corpus(root / "tunes")
    bad = _bad_files(root / "tunes" / "broken")
    res = _run("analyse", "--json", *good)
    assert res.exit_code == 0, res.stderr
    single = {str(p): json.loads(line) for p, line in zip(good, res.stdout.strip().splitlines())}
    return root / "tunes", good, bad, single


@pytest.fixture(scope="module")
def local_run(corpus, tmp_path_factory):
    """One local batch over the corpus with two processes, and a flat table."""
    folder, good, bad, _ = corpus
    out = tmp_path_factory.mktemp("run") / "results.jsonl"
    table = out.with_name("results.csv")
    res = _run("batch", folder, "-o", out, "--csv", table, "--jobs", 2)
    return res, out, table


def test_batch_equals_single_file(corpus, local_run):
    """Each good file's line is exactly its ``analyse --json`` object plus the batch keys."""
    _, good, _, single = corpus
    res, out, _ = local_run
    assert res.exit_code == 0, res.stderr
    lines = {line["path"]: line for line in _lines(out)}
    for path in good:
        line = lines[str(path)]
        assert line["status"] == "ok" and line["error"] is None
        assert _analysis_only(line) == single[str(path)]
        assert line["file"]["path"] == os.path.realpath(path)
        assert line["file"]["size_bytes"] == path.stat().st_size
        assert line["options"]["engine"] == "dionysus" and line["options"]["merge_ms"] == 35.0


def test_bad_files_mixed_in(corpus, local_run):
    """Each bad file gives an error line with its reason; the good ones are all analysed; exit code 0."""
    _, good, bad, _ = corpus
    res, out, table = local_run
    assert res.exit_code == 0
    lines = {line["path"]: line for line in _lines(out)}
    assert len(lines) == len(good) + len(bad) == len(out.read_text().splitlines())
    reasons = {os.path.basename(p): lines[str(p)]["error"] for p in bad}
    assert all(lines[str(p)]["status"] == "error" for p in bad)
    assert "empty" in reasons["empty.mid"]
    assert "no notes" in reasons["silent.mid"]
    assert "Standard MIDI File" in reasons["truncated.mid"] and "Standard MIDI File" in reasons["text.mid"]
    assert f"{len(good) + len(bad)} files: {len(good)} analysed, {len(bad)} failed" in res.stdout
    assert f"{len(bad)} failures:" in res.stdout
    metres = [line for line in res.stdout.splitlines() if line.startswith("  ") and "%" in line]
    assert sum(int(m.split()[-2]) for m in metres) == len(good)
    rows = table.read_text().splitlines()
    assert rows[0].startswith("path,status,error,time_signature")
    assert len(rows) == 1 + len(good) + len(bad)


def test_rerun_is_a_no_op_and_csv_refused(local_run, corpus):
    """A rerun with the same -o analyses nothing and appends nothing; an existing --csv needs --force."""
    folder = corpus[0]
    _, out, table = local_run
    before = out.read_bytes()
    res = _run("batch", folder, "-o", out)
    assert res.exit_code == 0, res.stderr
    assert out.read_bytes() == before
    assert f"({len(before.splitlines())} done in an earlier run)" in res.stdout
    refused = _run("batch", folder, "-o", out, "--csv", table)
    assert refused.exit_code == 2 and "--force" in refused.stderr
    assert _run("batch", folder, "-o", out, "--csv", table, "--force").exit_code == 0


def _wait_for_lines(path, n, proc, timeout_s=180):
    start = time.monotonic()
    while time.monotonic() - start < timeout_s:
        if path.exists() and path.read_bytes().count(b"\n") >= n:
            return
        if proc.poll() is not None:
            pytest.fail(f"batch ended before it could be killed: {proc.stderr.read()}")
        time.sleep(0.02)
    pytest.fail("batch wrote no lines in time")


@pytest.fixture(scope="module")
def six_tunes(tmp_path_factory):
    """Six good MIDI files: enough work to stop a batch part-way."""
    folder = tmp_path_factory.mktemp("six") / "corpus"
    return folder, _good_corpus(folder, copies=2)


def _start_batch(folder, out):
    """``metertop batch`` in a fresh interpreter and its own process group, one worker."""
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    cmd = [sys.executable, "-m", "metertop", "batch", str(folder), "-o", str(out), "--jobs", "1"]
    return subprocess.Popen(cmd, cwd=out.parent, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True)


def test_resume_after_killed_run(tmp_path, six_tunes):
    """Kill a real batch process part-way, rerun: finished lines are kept byte for byte, nothing is duplicated or missing."""
    folder, good = six_tunes
    out = tmp_path / "results.jsonl"
    proc = _start_batch(folder, out)
    try:
        _wait_for_lines(out, 2, proc)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the batch and its worker, as a crash or a kill -9 would
        proc.wait(timeout=60)
        proc.stdout.close()
        proc.stderr.close()
    kept = out.read_bytes()
    kept = kept[: kept.rfind(b"\n") + 1]  # a torn last line, if the kill landed mid-write, is not finished
    n_kept = kept.count(b"\n")
    assert 2 <= n_kept < len(good), "the kill came too late to test a resume"

    res = _run("batch", folder, "-o", out, "--jobs", 2)
    assert res.exit_code == 0, res.stderr
    after = out.read_bytes()
    assert after.startswith(kept)
    lines = _lines(out)
    assert sorted(line["path"] for line in lines) == sorted(str(p) for p in good)
    assert all(line["status"] == "ok" for line in lines)
    assert f"({n_kept} done in an earlier run)" in res.stdout


def _children(pid):
    """Process ids whose parent is ``pid`` (Linux /proc)."""
    out = []
    for entry in os.listdir("/proc"):
        try:
            with open(f"/proc/{entry}/stat") as handle:
                fields = handle.read().rsplit(")", 1)[1].split()
        except (OSError, IndexError):
            continue
        if entry.isdigit() and int(fields[1]) == pid:
            out.append(entry)
    return out


def test_sigterm_stops_cleanly(tmp_path, six_tunes):
    """SIGTERM (a job scheduler's stop) ends the batch like Ctrl-C: exit code 130, a rerun hint, its worker gone."""
    if not sys.platform.startswith("linux"):
        pytest.skip("reads worker processes from /proc")
    folder, good = six_tunes
    out = tmp_path / "results.jsonl"
    proc = _start_batch(folder, out)
    try:
        _wait_for_lines(out, 1, proc)
        workers = _children(proc.pid)
        assert workers, "the batch should have a worker process while it runs"
        proc.terminate()
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=60)
    assert proc.returncode == 130, err
    assert "interrupted" in err and "rerun the same command" in err and "Traceback" not in err
    n = out.read_bytes().count(b"\n")
    assert 1 <= n < len(good) and out.read_bytes().endswith(b"\n")
    for pid in workers:  # gone, or a zombie waiting to be reaped by init
        status = f"/proc/{pid}/status"
        assert not os.path.exists(status) or "zombie" in open(status).read()


def test_torn_last_line_is_dropped_and_redone(tmp_path, corpus):
    """A last line cut short (a kill mid-write) is removed, its file analysed again, the other lines kept."""
    folder, good, _, single = corpus
    out = tmp_path / "results.jsonl"
    files = [str(p) for p in good[:2]]
    assert _run("batch", *files, "-o", out, "--jobs", 1).exit_code == 0
    full = out.read_bytes()
    first_end = full.index(b"\n") + 1
    out.write_bytes(full[: first_end + (len(full) - first_end) // 2])
    res = _run("batch", *files, "-o", out, "--jobs", 1)
    assert res.exit_code == 0, res.stderr
    assert "incomplete last line" in res.stderr
    assert out.read_bytes().startswith(full[:first_end])
    lines = _lines(out)
    assert sorted(line["path"] for line in lines) == sorted(files)
    for line in lines:
        assert _analysis_only(line) == single[line["path"]]


def test_changed_file_or_options_are_done_again(tmp_path, corpus):
    """A file rewritten since its line, or other options, count as not done; the old lines are kept."""
    good = corpus[1]
    src = good[0]
    target = tmp_path / "piece.mid"
    target.write_bytes(src.read_bytes())
    out = tmp_path / "results.jsonl"
    assert _run("batch", target, "-o", out, "--jobs", 1).exit_code == 0
    res = _run("batch", target, "-o", out, "--jobs", 1, "--merge-ms", 30)
    assert res.exit_code == 0
    assert "1 earlier line in the results file belongs" in res.stdout
    os.utime(target, ns=(target.stat().st_atime_ns, target.stat().st_mtime_ns + 10**9))
    assert _run("batch", target, "-o", out, "--jobs", 1).exit_code == 0
    lines = _lines(out)
    assert len(lines) == 3
    assert [line["options"]["merge_ms"] for line in lines] == [35.0, 30.0, 35.0]
    assert lines[0]["file"]["mtime_ns"] != lines[2]["file"]["mtime_ns"]


def test_retry_errors_replaces_error_lines(tmp_path):
    """``--retry-errors`` analyses failed files again and replaces their lines instead of adding to them."""
    bad = _bad_files(tmp_path / "in")
    out = tmp_path / "results.jsonl"
    assert _run("batch", tmp_path / "in", "-o", out, "--jobs", 1).exit_code == 0
    res = _run("batch", tmp_path / "in", "-o", out, "--jobs", 1, "--retry-errors")
    assert res.exit_code == 0
    lines = _lines(out)
    assert len(lines) == len(bad) and all(line["status"] == "error" for line in lines)
    assert "done in an earlier run" not in res.stdout


def test_worker_crash_gives_error_line(tmp_path, corpus, monkeypatch):
    """A file that kills its worker process gets an error line, and the batch goes on with a fresh worker."""
    if not sys.platform.startswith("linux"):
        pytest.skip("the crash is planted through fork, which copies the patched module into the workers")
    import metertop.pipeline

    original = metertop.pipeline.analyse_detailed

    def crash_on_marked(source, **kwargs):
        if "crash" in str(source):
            os._exit(3)
        return original(source, **kwargs)

    monkeypatch.setattr(metertop.pipeline, "analyse_detailed", crash_on_marked)
    good = corpus[1]
    crash = tmp_path / "crash.mid"
    crash.write_bytes(good[0].read_bytes())
    out = tmp_path / "results.jsonl"
    res = _run("batch", good[1], crash, good[2], "-o", out, "--jobs", 2)
    assert res.exit_code == 0, res.stderr
    lines = {line["path"]: line for line in _lines(out)}
    assert len(lines) == 3
    assert lines[str(crash)]["status"] == "error" and "worker process died" in lines[str(crash)]["error"]
    assert lines[str(good[1])]["status"] == "ok" and lines[str(good[2])]["status"] == "ok"


def test_dask_local_cluster_equals_local_run(tmp_path, corpus, local_run):
    """``--scheduler`` on a Dask LocalCluster writes the same lines as the local processes."""
    distributed = pytest.importorskip("distributed")
    folder = corpus[0]
    _, local_out, _ = local_run
    out = tmp_path / "results.jsonl"
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None) as cluster:
        res = _run("batch", folder, "-o", out, "--scheduler", cluster.scheduler_address)
    assert res.exit_code == 0, res.stderr
    local = sorted(_lines(local_out), key=lambda line: line["path"])
    remote = sorted(_lines(out), key=lambda line: line["path"])
    assert remote == local


def test_scheduler_without_dask_says_how_to_install(tmp_path, corpus, monkeypatch):
    """Without the cluster extra, ``--scheduler`` is one line naming ``pip install 'metertop[cluster]'``, exit code 2."""
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as if it were not installed
    res = _run("batch", corpus[1][0], "-o", tmp_path / "r.jsonl", "--scheduler", "tcp://127.0.0.1:1")
    assert res.exit_code == 2
    assert res.stderr.strip() == ("metertop: error: --scheduler needs Dask's distributed scheduler, which is not "
                                  "installed: pip install 'metertop[cluster]'")
    assert not (tmp_path / "r.jsonl").exists()


def test_unreachable_scheduler_is_one_line(tmp_path, corpus, monkeypatch):
    """A scheduler address where nothing listens: exit code 2 and one error line."""
    pytest.importorskip("distributed")
    import metertop.cluster

    monkeypatch.setattr(metertop.cluster, "CONNECT_TIMEOUT_S", 1.0)
    res = _run("batch", corpus[1][0], "-o", tmp_path / "r.jsonl", "--scheduler", "tcp://127.0.0.1:9")
    assert res.exit_code == 2
    assert res.stderr.startswith("metertop: error: cannot reach the Dask scheduler at tcp://127.0.0.1:9")
    assert len(res.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("args, message", [
    (["nowhere/"], "no such file or folder"),
    (["nowhere/*.mid"], "matches no files"),
    (["--jobs", "0", "."], "--jobs must be at least 1"),
    (["--engine", "abacus", "."], "unknown engine"),
])
def test_bad_usage_is_one_line(tmp_path, args, message, monkeypatch):
    """Missing inputs, empty patterns and bad options: exit code 2, one line, no results file."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "x.mid").write_bytes(b"")
    res = _run("batch", *args, "-o", "r.jsonl")
    assert res.exit_code == 2
    assert message in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "r.jsonl").exists()


def test_foreign_results_file_is_left_alone(tmp_path, corpus):
    """An -o that holds other data is refused and not changed, torn-looking last line or not."""
    for content in (b"time_s\n0.5\n", b'{"a": 1}\n{"b": 2', b"no newline at all"):
        out = tmp_path / "data.jsonl"
        out.write_bytes(content)
        res = _run("batch", corpus[1][0], "-o", out)
        assert res.exit_code == 2 and "not a metertop batch result" in res.stderr
        assert out.read_bytes() == content


def test_output_named_as_input_is_refused(tmp_path, corpus):
    """Naming an input file as -o is refused before anything is written."""
    target = tmp_path / "piece.mid"
    data = corpus[1][0].read_bytes()
    target.write_bytes(data)
    res = _run("batch", target, "-o", target)
    assert res.exit_code == 2 and "refusing to write over the input file" in res.stderr
    assert target.read_bytes() == data


def test_second_writer_is_locked_out(tmp_path):
    """While one batch holds the results file, another stops with a clear error instead of writing duplicates."""
    if sys.platform.startswith("win"):
        pytest.skip("the lock is POSIX flock")
    out = tmp_path / "r.jsonl"
    with ResultsFile(out):
        with pytest.raises(OutputError, match="another metertop batch"):
            ResultsFile(out).open()


def test_find_inputs_folders_patterns_and_suffixes(tmp_path):
    """Folders give their MIDI files (hidden ones left out), patterns their matches, --suffix other types; no repeats."""
    (tmp_path / "a" / "deep").mkdir(parents=True)
    (tmp_path / "a" / ".hidden").mkdir()
    for name in ("a/one.mid", "a/deep/two.MIDI", "a/.hidden/three.mid", "a/notes.csv", "a/.dot.mid"):
        (tmp_path / name).write_bytes(b"x")
    found = find_inputs([str(tmp_path / "a")])
    assert [os.path.relpath(p, tmp_path) for p in found] == [os.path.join("a", "one.mid"), os.path.join("a", "deep", "two.MIDI")]
    assert find_inputs([str(tmp_path / "a" / "*.csv")]) == [str(tmp_path / "a" / "notes.csv")]
    both = find_inputs([str(tmp_path / "a"), str(tmp_path / "a" / "one.mid")], suffixes=["csv", ".mid", "MIDI"])
    assert sorted(os.path.basename(p) for p in both) == ["notes.csv", "one.mid", "two.MIDI"]
    assert find_inputs([str(tmp_path / "**" / "two.*")]) == [str(tmp_path / "a" / "deep" / "two.MIDI")]
    with pytest.raises(InputError, match="no input files found"):
        find_inputs([str(tmp_path / "a" / "deep")], suffixes=[".csv"])


def test_analyse_task_with_sent_bytes_matches_path(corpus):
    """A task carrying the file's bytes (as sent to a cluster) gives the same line as one reading the path."""
    path = str(corpus[1][0])
    by_path = Task(path, os.path.realpath(path), 1, 2)
    with open(path, "rb") as handle:
        by_bytes = Task(path, os.path.realpath(path), 1, 2, handle.read())
    options = BatchOptions()
    assert analyse_task(by_bytes, options) == analyse_task(by_path, options)
    broken = Task("x/broken.mid", "/x/broken.mid", 1, 2, b"MThd\x00")
    line = json.loads(analyse_task(broken, options))
    assert line["status"] == "error" and "metertop-" not in line["error"]


def test_progress_bar_quiet_off_a_terminal():
    """The bar draws nothing on a stream that is not a terminal."""
    import io

    stream = io.StringIO()
    bar = ProgressBar(5, stream)
    bar.update(3)
    bar.close()
    assert stream.getvalue() == ""


def test_recordings_in_a_batch_match_analyse(tmp_path):
    """A recording found with --suffix .ogg (the demo's phone recording of its drum groove, synthesised) gets the line
    'metertop analyse --json' gives it, 'recording' (read as a drum kit) included, plus the batch keys."""
    pytest.importorskip("soundfile")
    import shutil

    src = REPO / "demo_rhythms" / "tidewater_deck_groove_4-4_phone.ogg"
    folder = tmp_path / "takes"
    folder.mkdir()
    take = folder / src.name
    shutil.copy(src, take)
    out = tmp_path / "results.jsonl"
    res = _run("batch", folder, "--suffix", ".ogg", "-o", out, "--jobs", 1)
    assert res.exit_code == 0, res.stderr
    (line,) = _lines(out)
    single = json.loads(_run("analyse", "--json", take).stdout)
    assert line["status"] == "ok" and line["recording"]["kit"] is True
    assert _analysis_only(line) == single
