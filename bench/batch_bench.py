"""Batch throughput: files per second of ``metertop batch`` on 1,000 Essen tunes, locally and on Dask.

Usage::

    python bench/batch_bench.py               # make bench-batch: 1,000 tunes, writes a section of docs/benchmarks.md
    python bench/batch_bench.py --files 200   # a quicker look; --no-write leaves the docs alone

The tunes are Essen evaluation tunes (bench/split.md), rendered deadpan by
bench/render.py and written as MIDI files to ``bench/cache/batch-midi-<n>/``
(once; later runs reuse them). Then, in one run on this shared machine:

1. *per file, in one process*: pretty_midi's load and metertop's analysis
   of 100 files spread over the sample, timed apart (CPU time, which the
   machine's other jobs disturb less than wall time);
2. *the batch machinery*: 50 other files analysed in this process and in
   one forked batch worker, alternately, CPU time per file of each;
3. *start-up*: a fresh interpreter importing metertop and everything an
   analysis needs, and the cost of one durable line (write and fdatasync);
4. ``metertop batch DIR -o OUT --jobs 2``, wall time from the command to its
   exit (start-up included) and the CPU time of all its processes;
5. the same with ``--scheduler`` on a ``distributed.LocalCluster`` of one
   worker process and of two (one thread each), started before the clock
   starts, as an existing cluster would be.

Figures are files per second beside the CPU time per file of all the
run's processes, which the machine's other jobs disturb less than the wall
time, and the batch worker's cost beside a single process's on the same
files, measured in the same run.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

SAMPLE_SEED = 7070
DOCS = ROOT / "docs" / "benchmarks.md"
SECTION = "batch"
TARGET_FILES_PER_S = 20.0


# ---- the files -----------------------------------------------------------------------

def write_performance(perf, path: Path) -> None:
    """A rendered tune as a one-track MIDI file at the deadpan tempo."""
    import pretty_midi

    from render import DEADPAN_BPM

    pm = pretty_midi.PrettyMIDI(initial_tempo=DEADPAN_BPM)
    inst = pretty_midi.Instrument(program=0, name="melody")
    for start, dur, pitch, vel in zip(perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities):
        inst.notes.append(pretty_midi.Note(int(vel), int(pitch), float(start), float(start + dur)))
    pm.instruments.append(inst)
    pm.write(str(path))


def midi_corpus(n: int) -> Path:
    """``n`` Essen evaluation tunes rendered deadpan, as MIDI files in a cache folder (made once)."""
    folder = HERE / "cache" / f"batch-midi-{n}"
    stamp = folder / ".complete"
    if stamp.exists():
        return folder
    from essen import load_corpus, split_of
    from render import render

    tunes = [t for t in load_corpus(progress=sys.stderr.isatty()) if split_of(t) == "eval"]
    rng = np.random.default_rng(SAMPLE_SEED)
    chosen = np.sort(rng.choice(len(tunes), size=min(n, len(tunes)), replace=False))
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    for i in chosen:
        tune = tunes[i]
        write_performance(render(tune, "deadpan", seed=int(i)), folder / (tune.tune_id.replace("/", "_") + ".mid"))
    stamp.write_text(json.dumps({"seed": SAMPLE_SEED, "files": len(chosen)}))
    return folder


# ---- measurements ----------------------------------------------------------------------

def per_file_times(files: list[Path]) -> dict:
    """Load and analysis time of each file in this process, after a warm-up: wall and CPU time."""
    import metertop
    from metertop.load import load_notes

    metertop.analyse(load_notes(files[0]))
    wall = {"load": [], "analyse": []}
    cpu = {"load": [], "analyse": []}
    for path in files:
        w0, c0 = time.perf_counter(), time.process_time()
        notes = load_notes(path)
        w1, c1 = time.perf_counter(), time.process_time()
        try:
            metertop.analyse(notes)
        except metertop.InputError:
            pass
        w2, c2 = time.perf_counter(), time.process_time()
        wall["load"].append(w1 - w0)
        wall["analyse"].append(w2 - w1)
        cpu["load"].append(c1 - c0)
        cpu["analyse"].append(c2 - c1)
    return {"files": len(files), "load_wall_s": statistics.fmean(wall["load"]), "analyse_wall_s": statistics.fmean(wall["analyse"]),
            "load_cpu_s": statistics.fmean(cpu["load"]), "analyse_cpu_s": statistics.fmean(cpu["analyse"]),
            "analyse_cpu_median_s": statistics.median(cpu["analyse"])}


def worker_overhead(files: list[Path], repeats: int = 2) -> dict:
    """CPU per file of the same files analysed in this process and in one forked batch worker, alternately.

    The difference is what the batch machinery costs a worker (task
    pickling, the pool, forking); alternating the two keeps the machine's
    load the same for both.
    """
    import resource

    from metertop.batch import BatchOptions, analyse_task, make_task, run_local

    options = BatchOptions()
    tasks = [make_task(str(f)) for f in files]
    analyse_task(tasks[0], options)
    inline, pooled = [], []
    for _ in range(repeats):
        c0 = time.process_time()
        for task in tasks:
            analyse_task(task, options)
        inline.append((time.process_time() - c0) / len(tasks))
        c0 = _children_cpu_s()
        for _ in run_local(tasks, options, 1):
            pass
        pooled.append((_children_cpu_s() - c0) / len(tasks))
    return {"files": len(tasks), "in_process_cpu_s": min(inline), "forked_worker_cpu_s": min(pooled)}


def startup_times(repeats: int = 3) -> dict:
    """A fresh interpreter importing what a worker needs; one durable results line."""
    code = "import metertop.batch, metertop.pipeline, pretty_midi, dionysus"
    env = _env()
    walls = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], check=True, env=env)
        walls.append(time.perf_counter() - t0)
    from metertop.batchfile import ResultsFile

    line = json.dumps({"metertop_version": "0", "path": "x" * 40, "status": "ok", "error": None, "pad": "y" * 4000,
                       "file": {"path": "/x", "size_bytes": 1, "mtime_ns": 1}, "options": {}})
    with tempfile.TemporaryDirectory() as tmp, ResultsFile(Path(tmp) / "r.jsonl") as results:
        t0 = time.perf_counter()
        for _ in range(200):
            results.append(line)
        per_line = (time.perf_counter() - t0) / 200
    return {"import_s": statistics.median(walls), "durable_line_s": per_line}


def _env() -> dict:
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _children_cpu_s() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def timed_batch(folder: Path, n_files: int, extra: list[str]) -> dict:
    """Run ``metertop batch`` to a fresh results file; its wall time, and the CPU time of it and its workers."""
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "results.jsonl"
        cmd = [sys.executable, "-m", "metertop", "batch", str(folder), "-o", str(out)] + extra
        cpu0 = _children_cpu_s()
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, env=_env(), capture_output=True, text=True)
        wall = time.perf_counter() - t0
        cpu = _children_cpu_s() - cpu0
        if proc.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd)} failed: {proc.stderr}")
        lines = [json.loads(line) for line in out.read_text().splitlines()]
    if len(lines) != n_files:
        raise RuntimeError(f"expected {n_files} lines, got {len(lines)}")
    return {"wall_s": wall, "cpu_s": cpu, "files_per_s": n_files / wall, "failed": sum(x["status"] != "ok" for x in lines),
            "lines": {x["path"]: {k: v for k, v in x.items() if k != "path"} for x in lines}}


def cluster_batch(folder: Path, n_files: int, workers: int) -> dict:
    """``metertop batch --scheduler`` on a LocalCluster of ``workers`` single-threaded worker processes.

    The wall time is the batch command's; the CPU time also counts the
    cluster (scheduler thread in this process excepted): its worker
    processes are reaped when it closes.
    """
    from distributed import LocalCluster

    cpu0 = _children_cpu_s()
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
        run = timed_batch(folder, n_files, ["--scheduler", cluster.scheduler_address])
    run["cpu_s"] = _children_cpu_s() - cpu0
    return run


# ---- report ------------------------------------------------------------------------------

def section(figures: dict, n_files: int, elapsed_s: float) -> str:
    per = figures["per_file"]
    start = figures["startup"]
    work = figures["worker"]
    load = figures["load"]
    local = figures["local2"]
    same = figures.get("same_lines", {})
    rows = []
    for name, key in (("local, 2 processes (`--jobs 2`)", "local2"), ("Dask LocalCluster, 1 worker", "dask1"),
                      ("Dask LocalCluster, 2 workers", "dask2")):
        run = figures.get(key)
        if run is not None:
            rows.append(f"| {name} | {run['wall_s']:.1f} s | **{run['files_per_s']:.2f}** | {run['cpu_s'] / n_files * 1000:.0f} ms | {run['failed']} |")
    busy = max(load["start"], load["end"]) > 2.5
    ratio = work["forked_worker_cpu_s"] / work["in_process_cpu_s"]
    machinery = (f"In a forked batch worker a file costs {ratio:.2f} times the CPU time it costs in one process"
                 + (": the pool, the pickled tasks and the synced lines add nothing measurable." if abs(ratio - 1) < 0.1 else "."))
    local_cpu = local["cpu_s"] / n_files
    return f"""## Batch throughput

Measured {dt.date.today().isoformat()} with `make bench-batch` (`python bench/batch_bench.py`) in {elapsed_s / 60:.1f} minutes on this
shared 2-core machine (load average {load['start']:.1f} at the start, {load['end']:.1f} at the end{': other jobs were running' if busy else ''}).
{n_files} Essen evaluation tunes, rendered deadpan by bench/render.py and written as MIDI files, are analysed by `metertop batch`
into a fresh results file. Wall time runs from the command to its exit, start-up included; the Dask clusters were started
before the clock, as an existing cluster would be. CPU time counts every process of the run (for Dask, the cluster's
worker processes too), so it says what the run costs whatever else the machine is doing.

| run | wall time | files/s | CPU per file, all processes | error lines |
|---|---|---|---|---|
{chr(10).join(rows)}

Target: {TARGET_FILES_PER_S:.0f} files/s on 2 local processes; measured {local['files_per_s']:.2f}. The local run used {local_cpu * 1000:.0f} ms of CPU per
file, so two free cores would give it at most {2 / local_cpu:.1f} files/s. Where the time goes:

| per file | CPU time |
|---|---|
| metertop's analysis, mean over {per['files']} files spread over the sample (median {per['analyse_cpu_median_s'] * 1000:.0f} ms) | {per['analyse_cpu_s'] * 1000:.0f} ms |
| pretty_midi's load of the MIDI file | {per['load_cpu_s'] * 1000:.1f} ms |
| {work['files']} other files, analysed in this process / in one forked batch worker, alternately (best of 2) | {work['in_process_cpu_s'] * 1000:.0f} ms / {work['forked_worker_cpu_s'] * 1000:.0f} ms |
| one durable results line (write and fdatasync), wall time | {start['durable_line_s'] * 1000:.2f} ms |

{machinery} A fresh interpreter takes {start['import_s'] * 1000:.0f} ms to import metertop, pretty_midi and dionysus; the batch pays
it once, since its workers are forked with everything imported. The Dask runs also pay for the cluster's own processes
(nanny, worker event loop, heartbeats) for as long as the run lasts, and ship each file's bytes with its task.

Lines identical to the local run's (every key): {same.get('dask1', '-')} of {n_files} with 1 worker, {same.get('dask2', '-')} of {n_files} with 2 workers.
"""


def replace_section(text: str, name: str, body: str) -> str:
    """``text`` with the marked section ``name`` replaced by ``body``, or ``body`` appended."""
    start, end = f"<!-- section: {name} -->", f"<!-- end section: {name} -->"
    block = f"{start}\n{body.rstrip()}\n{end}\n"
    if start in text and end in text:
        head, rest = text.split(start, 1)
        return head + block + rest.split(end, 1)[1].lstrip("\n")
    return text.rstrip("\n") + "\n\n" + block


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--files", type=int, default=1000)
    parser.add_argument("--profile-files", type=int, default=100, help="files timed one by one in this process")
    parser.add_argument("--no-dask", action="store_true", help="skip the LocalCluster runs")
    parser.add_argument("--no-write", action="store_true", help=f"print the section instead of writing {DOCS.name}")
    args = parser.parse_args()
    t0 = time.time()
    load_start = os.getloadavg()[0]
    folder = midi_corpus(args.files)
    files = sorted(folder.glob("*.mid"))
    n = len(files)
    print(f"{n} MIDI files in {folder}", file=sys.stderr)
    step = max(n // args.profile_files, 1)  # a sample spread over every source file, not the first ones
    figures = {"per_file": per_file_times(files[::step][: args.profile_files]), "startup": startup_times(),
               "worker": worker_overhead(files[step // 2::step][:50])}
    print(f"per file: {figures['per_file']}", file=sys.stderr)
    figures["local2"] = timed_batch(folder, n, ["--jobs", "2"])
    print(f"local 2: {figures['local2']['files_per_s']:.2f} files/s", file=sys.stderr)
    if not args.no_dask:
        figures["same_lines"] = {}
        for workers in (1, 2):
            key = f"dask{workers}"
            figures[key] = cluster_batch(folder, n, workers)
            same = sum(figures[key]["lines"].get(p) == line for p, line in figures["local2"]["lines"].items())
            figures["same_lines"][key] = same
            print(f"dask {workers}: {figures[key]['files_per_s']:.2f} files/s, {same} lines equal to local", file=sys.stderr)
    figures["load"] = {"start": load_start, "end": os.getloadavg()[0]}
    body = section(figures, n, time.time() - t0)
    print(body)
    if not args.no_write:
        from metertop.outputs import atomic_write

        atomic_write(DOCS, replace_section(DOCS.read_text(), SECTION, body))
        out = HERE / "out"
        out.mkdir(exist_ok=True)
        for run in ("local2", "dask1", "dask2"):
            figures.get(run, {}).pop("lines", None)
        atomic_write(out / f"batch-{dt.date.today().isoformat()}.json", json.dumps(figures, indent=1))
        print(f"wrote {DOCS}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
