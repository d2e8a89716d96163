"""Robustness benchmark: fuzzing (MIDI files, onset lists, recordings), stability under dropped notes, and large input.

Usage::

    python bench/robust.py                 # make bench-robust: everything below
    python bench/robust.py --fuzz 2000 --grooves 20 --no-large   # a quicker look
    python bench/robust.py --fuzz 0 --grooves 0 --no-large --recordings 1000   # recordings only

Four parts, each reported in one table (stdout, and in full in
``bench/out/robust-<date>.json``):

1. **Fuzzing.** ``--fuzz`` inputs (10,000) of the seeded stream of
   ``bench/hostile.py`` (damaged MIDI files and onset lists) go through the
   command line, ``metertop analyse`` (with ``--json`` for every other
   input) and ``metertop tracks`` for MIDI files, in this process's interpreter via typer's CliRunner. A
   *crash* is anything but exit 0 with strict JSON or exit 2 with one error
   line: a traceback, an uncaught exception, a warning, several lines. The
   count must be 0; each crash is listed with the command that rebuilds it.
2. **Recordings.** ``--recordings`` inputs (1,000) of the seeded stream of
   ``bench/hostile_audio.py`` (WAV, FLAC and OGG files with odd content,
   sample rates and channels, damaged headers and bytes, wrong suffixes) go
   through the command each input names (``analyse``, with ``--json``,
   ``--kit``, ``--no-kit`` or ``--band-weights``, or ``check -s 4/4``) and
   are judged as above; ``check``'s verdicts (exit 1 and 3) count as
   results. Inputs slower than ``SLOW_S`` (10 s) are listed too, and
   count against the run as crashes do (exit code 1).
3. **Dropped notes.** ``--grooves`` (100) drum grooves of the accuracy
   benchmark (``bench/grooves.py``, the evaluation seed of ``bench/run.py``)
   are analysed whole and with 5% of their notes dropped at random (seeded);
   the share whose reading (time signature and grouping) is unchanged is
   reported, against the target of 95%.
4. **Large input**, each analysis in a fresh subprocess that reports its
   own wall time and peak resident memory (``resource.getrusage``): one hour
   of continuous drumming (about 40,000 notes) beside pretty_midi's parse of
   the same file; 200,000 notes (the note limit) over four hours; two short
   stretches of playing four hours apart (the span limit, sparse); and a
   file of 1,000,000 notes, which is refused at once, beside pretty_midi's
   parse of it.

The machines are shared and noisy: compare the times as ratios within one
run, not across runs.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import json
import multiprocessing as mp
import os
import resource
import subprocess
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from hostile import chunk, hostile_input, run_cli, vlq  # noqa: E402
from hostile_audio import hostile_recording  # noqa: E402

ROOT = HERE.parent
OUT = HERE / "out"
FUZZ_SEED = 2026  # tests/test_robust.py uses another seed
RECORDINGS_SEED = 4242  # the recordings stream's; tests/test_robust.py uses another
SLOW_S = 10.0  # a recording slower than this to refuse or analyse is a finding too
DROP_SEED = 505
DROP_FRACTION = 0.05
GROOVE_SEED = 20261202  # bench/run.py's SAMPLE_SEED: the evaluation grooves


# ---- 1. fuzzing --------------------------------------------------------------------

def _written(build, seed: int, lo: int, hi: int):
    """``(i, input, path)`` for inputs lo..hi-1 of ``build``'s stream, each written to a file that is gone afterwards."""
    with tempfile.TemporaryDirectory(prefix="metertop-fuzz-") as folder:
        for i in range(lo, hi):
            h = build(seed, i)
            path = Path(folder) / f"input{h.suffix}"
            path.write_bytes(h.data)
            yield i, h, path
            path.unlink()


def _fuzz_chunk(args: tuple[int, int, int]) -> list[dict]:
    out = []
    for i, h, path in _written(hostile_input, *args):
        start = time.perf_counter()
        outcomes = [run_cli(["analyse", "--json", str(path)] if i % 2 else ["analyse", str(path)])]
        if h.suffix == ".mid":
            outcomes.append(run_cli(["tracks", str(path)]))
        seconds = time.perf_counter() - start
        crash = next((o for o in outcomes if o.verdict == "crash"), None)
        out.append({"index": i, "case": h.case, "family": h.family, "verdict": outcomes[0].verdict,
                    "crash": None if crash is None else f"{crash.command}: {crash.detail}", "seconds": round(seconds, 3)})
    return out


def _pooled(work, n: int, seed: int, jobs: int, step: int, label: str, every: int, dead: dict) -> list[dict]:
    """Rows of inputs 0..n-1 run by ``work`` over chunks of ``step`` in a pool of ``jobs``, sorted by index; progress
    on stderr every ``every`` inputs.

    A worker that dies (a segfault or an abort inside a C library: nothing Python can catch) breaks the pool; the
    chunks it took down are run again one input at a time, each input whose own worker dies becomes a crash row
    (``dead`` with its index), and the run goes on.
    """
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from concurrent.futures.process import BrokenProcessPool

    rows: list[dict] = []

    def run(chunks, workers):
        lost = []
        with ProcessPoolExecutor(workers, mp_context=mp.get_context("spawn")) as pool:
            futures = {pool.submit(work, c): c for c in chunks}
            for fut in as_completed(futures):
                try:
                    part = fut.result()
                except BrokenProcessPool:
                    lost.append(futures[fut])
                    continue
                rows.extend(part)
                if len(rows) % every < len(part):
                    print(f"  {label}: {len(rows):,}/{n:,} inputs, {sum(r['crash'] is not None for r in rows)} crashes",
                          file=sys.stderr, flush=True)
        return lost

    lost = run([(seed, lo, min(lo + step, n)) for lo in range(0, n, step)], jobs)
    for _, lo, hi in sorted(lost):
        for i in range(lo, hi):
            if run([(seed, i, i + 1)], 1):
                print(f"  {label}: input {i}: the worker process died", file=sys.stderr, flush=True)
                rows.append({**dead, "index": i, "crash": "the worker process died (a segfault or abort in a C library)"})
    return sorted(rows, key=lambda r: r["index"])


def fuzz(n: int, seed: int, jobs: int) -> dict:
    """Run ``n`` hostile inputs through the command line; counts, crashes and timing."""
    start = time.perf_counter()
    rows = _pooled(_fuzz_chunk, n, seed, jobs, step=50, label="fuzz", every=1000,
                   dead={"case": "?", "family": "?", "verdict": "crash", "seconds": 0.0})
    crashes = [r for r in rows if r["crash"] is not None]
    verdicts = Counter((r["family"], r["verdict"]) for r in rows)
    steps = Counter(step for r in crashes for step in r["case"].split("/")[-1].split("+"))
    return {
        "inputs": n, "seed": seed, "crashes": len(crashes),
        "by_outcome": {f"{fam} {verdict}": c for (fam, verdict), c in sorted(verdicts.items())},
        "crash_cases": [{"case": r["case"], "crash": r["crash"], "replay": f"python bench/hostile.py {seed} {r['index']} /tmp/case"}
                        for r in crashes],
        "crash_mutations": dict(steps),
        "wall_s": round(time.perf_counter() - start, 1),
        "median_s_per_input": float(np.median([r["seconds"] for r in rows])) if rows else None,
        "slowest": sorted(({"case": r["case"], "seconds": r["seconds"]} for r in rows), key=lambda r: -r["seconds"])[:5],
    }


# ---- 2. recordings -------------------------------------------------------------------

def _recordings_chunk(args: tuple[int, int, int]) -> list[dict]:
    out = []
    for i, h, path in _written(hostile_recording, *args):
        start = time.perf_counter()
        outcome = h.run(path)
        seconds = time.perf_counter() - start
        out.append({"index": i, "case": h.case, "command": " ".join(h.command), "verdict": outcome.verdict,
                    "crash": None if outcome.verdict != "crash" else f"{outcome.command}: {outcome.detail}",
                    "seconds": round(seconds, 3), "bytes": len(h.data)})
    return out


def recordings(n: int, seed: int, jobs: int) -> dict:
    """Run ``n`` hostile recordings through the command line; counts, crashes, slow inputs and timing."""
    start = time.perf_counter()
    rows = _pooled(_recordings_chunk, n, seed, jobs, step=25, label="recordings", every=250,
                   dead={"case": "audio/?/?/?", "command": "?", "verdict": "crash", "seconds": 0.0, "bytes": 0})
    crashes = [r for r in rows if r["crash"] is not None]
    slow = [r for r in rows if r["seconds"] > SLOW_S]

    def replay(r):
        return f"python bench/hostile_audio.py {seed} {r['index']} /tmp/case"

    by_format = Counter((r["case"].split("/")[2].split(">")[0], r["verdict"]) for r in rows)
    return {
        "inputs": n, "seed": seed, "crashes": len(crashes), "slow": len(slow), "slow_limit_s": SLOW_S,
        "by_outcome": dict(sorted(Counter(r["verdict"] for r in rows).items())),
        "by_command": dict(sorted(Counter(f"{r['command'].split()[0]} {r['verdict']}" for r in rows).items())),
        "by_format": {f"{fmt} {verdict}": c for (fmt, verdict), c in sorted(by_format.items())},
        "intact_analysed": sum(r["verdict"] == "analysed" for r in rows if r["case"].endswith("/intact")),
        "intact": sum(r["case"].endswith("/intact") for r in rows),
        "crash_cases": [{"case": r["case"], "command": r["command"], "crash": r["crash"], "replay": replay(r)} for r in crashes],
        "slow_cases": [{"case": r["case"], "command": r["command"], "seconds": r["seconds"], "replay": replay(r)} for r in slow],
        "wall_s": round(time.perf_counter() - start, 1),
        "median_s_per_input": float(np.median([r["seconds"] for r in rows])) if rows else None,
        "max_s_per_input": max((r["seconds"] for r in rows), default=None),
        "mean_bytes": float(np.mean([r["bytes"] for r in rows])) if rows else None,
        "slowest": sorted(({"case": r["case"], "command": r["command"], "seconds": r["seconds"]} for r in rows),
                          key=lambda r: -r["seconds"])[:5],
    }


# ---- 3. dropped notes --------------------------------------------------------------

def drop_notes(notes, fraction: float, rng: np.random.Generator):
    """The same NoteTable without ``round(fraction * n)`` notes chosen at random."""
    n = len(notes)
    keep = np.ones(n, bool)
    keep[rng.choice(n, size=int(round(fraction * n)), replace=False)] = False
    fields = ("onsets_s", "durations_s", "pitches", "velocities", "weights", "is_drum", "track")
    return dataclasses.replace(notes, **{f: getattr(notes, f)[keep] for f in fields})


def _reading(result) -> tuple:
    return result.time_signature, tuple(result.grouping or ())


def _drop_one(args) -> dict:
    index, perf, fraction, seed = args
    import metertop

    notes = perf.note_table()
    whole = metertop.analyse(notes)
    dropped = metertop.analyse(drop_notes(notes, fraction, np.random.default_rng([seed, index])))
    return {"piece_id": perf.piece_id, "truth": perf.time_signature, "whole": _reading(whole), "dropped": _reading(dropped),
            "bar_ratio": dropped.bar_s / whole.bar_s, "confidence": whole.confidence}


def drop_stability(grooves, fraction: float = DROP_FRACTION, seed: int = DROP_SEED, jobs: int = 1) -> list[dict]:
    """Analyse each groove whole and with ``fraction`` of its notes dropped (``default_rng([seed, i])``); one record each."""
    work = [(i, g, fraction, seed) for i, g in enumerate(grooves)]
    if jobs <= 1:
        return [_drop_one(w) for w in work]
    with mp.get_context("spawn").Pool(jobs) as pool:
        return pool.map(_drop_one, work)


def drops(n_grooves: int, jobs: int) -> dict:
    from grooves import make_grooves

    start = time.perf_counter()
    records = drop_stability(make_grooves(n_grooves, GROOVE_SEED), jobs=jobs)
    same = [r["whole"] == r["dropped"] for r in records]
    changed = [r for r, s in zip(records, same) if not s]
    right = [r["whole"][0] == r["truth"] for r in records]
    unchanged_when_right = [s for s, ok in zip(same, right) if ok]
    return {
        "grooves": len(records), "fraction_dropped": DROP_FRACTION, "unchanged": int(sum(same)),
        "unchanged_share": float(np.mean(same)), "target_share": 0.95,
        "unchanged_share_when_whole_is_right": float(np.mean(unchanged_when_right)) if unchanged_when_right else None,
        "bar_within_5pct_share": float(np.mean([abs(r["bar_ratio"] - 1) <= 0.05 for r in records])),
        "median_confidence_unchanged": float(np.median([r["confidence"] for r, s in zip(records, same) if s])) if any(same) else None,
        "median_confidence_changed": float(np.median([r["confidence"] for r in changed])) if changed else None,
        "changes": [{"piece_id": r["piece_id"], "truth": r["truth"], "whole": r["whole"][0], "dropped": r["dropped"][0],
                     "confidence": round(r["confidence"], 3)} for r in changed],
        "wall_s": round(time.perf_counter() - start, 1),
    }


# ---- 4. large input ----------------------------------------------------------------

def _child(mode: str, path: str) -> None:
    """Run one measurement in this (fresh) process and print its figures as JSON."""
    start = time.perf_counter()
    out: dict = {}
    if mode == "parse":
        import pretty_midi

        pm = pretty_midi.PrettyMIDI(path)
        out["notes"] = sum(len(i.notes) for i in pm.instruments)
    elif mode == "analyse":
        import metertop

        try:
            r = metertop.analyse(path)
            out.update(result=f"{r.time_signature} at {r.tempo_bpm:.1f} bpm", events=r.n_events, duration_s=round(r.duration_s, 1))
        except metertop.InputError as exc:
            out["refused"] = str(exc).replace(path, Path(path).name)
    out["wall_s"] = round(time.perf_counter() - start, 3)
    out["peak_rss_mb"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1)  # kilobytes on Linux
    print(json.dumps(out))


def measure(mode: str, path: Path) -> dict:
    proc = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", mode, str(path)],
                          capture_output=True, text=True, cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT)})
    if proc.returncode != 0:
        return {"error": proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else f"exit {proc.returncode}"}
    return json.loads(proc.stdout.strip().splitlines()[-1])


def write_notes_smf(path: Path, n_notes: int, *, chord: int = 4, step_ticks: int = 24, ticks_per_quarter: int = 96) -> float:
    """A format-0 file of ``n_notes`` notes in chords of ``chord``, one every ``step_ticks`` (24: a sixteenth at 96 ticks
    a quarter), at 120 bpm, every fourth chord louder; returns its length in seconds. Written as bytes (note-offs as
    running-status note-ons of velocity 0), since a million notes through a MIDI library take minutes."""
    half = step_ticks // 2

    def notes(delta: int, velocity: int) -> bytes:
        return vlq(delta) + b"".join((b"" if j == 0 else b"\x00") + bytes([36 + 7 * j, velocity]) for j in range(chord))

    n_onsets = n_notes // chord
    beat = b"".join(notes(step_ticks - half, 110 if k == 4 else 70) + notes(half, 0) for k in range(1, 5))
    body = (b"\x00\xff\x51\x03\x07\xa1\x20"  # tempo: 500,000 microseconds a quarter
            + b"\x00\x90" + notes(0, 110)[1:] + notes(half, 0)
            + beat * ((n_onsets - 1) // 4)
            + b"".join(notes(step_ticks - half, 70) + notes(half, 0) for _ in range((n_onsets - 1) % 4))
            + b"\x00\xff\x2f\x00")
    header = chunk(b"MThd", (0).to_bytes(2, "big") + (1).to_bytes(2, "big") + ticks_per_quarter.to_bytes(2, "big"))
    path.write_bytes(header + chunk(b"MTrk", body))
    return n_onsets * step_ticks / ticks_per_quarter * 0.5


def large(folder: Path) -> dict:
    from speed import write_groove

    import metertop.limits as limits

    hour = folder / "hour.mid"
    n_hour = write_groove(hour, minutes=60.0, bpm=126.0)
    at_limit = folder / "limit_notes.mid"
    limit_s = write_notes_smf(at_limit, limits.MAX_NOTES, chord=2)
    sparse = folder / "limit_span.csv"
    block = 0.5 * np.arange(24)
    times = np.concatenate([block, limits.MAX_SPAN_S - 20.0 + block])
    sparse.write_text("time_s\n" + "".join(f"{t:.3f}\n" for t in times))
    million = folder / "million.mid"
    write_notes_smf(million, 1_000_000)
    out = {
        "hour": {"notes": n_hour, "analyse": measure("analyse", hour), "pretty_midi_parse": measure("parse", hour)},
        "note_limit": {"notes": limits.MAX_NOTES, "duration_s": limit_s, "analyse": measure("analyse", at_limit)},
        "span_limit_sparse": {"onsets": len(times), "span_s": float(times[-1] - times[0]), "analyse": measure("analyse", sparse)},
        "million": {"notes": 1_000_000, "bytes": million.stat().st_size, "analyse": measure("analyse", million),
                    "pretty_midi_parse": measure("parse", million)},
    }
    a, p = out["hour"]["analyse"], out["hour"]["pretty_midi_parse"]
    if "wall_s" in a and "wall_s" in p:
        out["hour"]["ratio_to_parse"] = round(a["wall_s"] / p["wall_s"], 2)
    return out


# ---- report ------------------------------------------------------------------------

def report(res: dict) -> str:
    lines = [f"# metertop robustness benchmark, {res['date']}", "", f"Command: `{res['command']}`", ""]
    if "fuzz" in res:
        f = res["fuzz"]
        lines += ["## Fuzzing", "", "| measure | value |", "|---|---|",
                  f"| inputs (seed {f['seed']}) | {f['inputs']:,} |", f"| **crashes** | **{f['crashes']}** |"]
        lines += [f"| {k} | {v:,} |" for k, v in f["by_outcome"].items()]
        lines += [f"| median time per input | {f['median_s_per_input'] * 1000:.0f} ms |", f"| wall time | {f['wall_s']:.0f} s |", ""]
        for c in f["crash_cases"][:20]:
            lines.append(f"- crash: {c['case']}: {c['crash']} (`{c['replay']}`)")
    if "recordings" in res:
        a = res["recordings"]
        lines += ["## Recordings", "", "| measure | value |", "|---|---|",
                  f"| recordings (seed {a['seed']}) | {a['inputs']:,} |", f"| **crashes** | **{a['crashes']}** |",
                  f"| slower than {a['slow_limit_s']:g} s | {a['slow']} |"]
        lines += [f"| {k} | {v:,} |" for k, v in a["by_command"].items()]
        lines += [f"| intact files analysed | {a['intact_analysed']:,} of {a['intact']:,} |",
                  f"| median / slowest time per input | {a['median_s_per_input'] * 1000:.0f} ms / {a['max_s_per_input']:.1f} s |",
                  f"| wall time | {a['wall_s']:.0f} s |", ""]
        for c in a["crash_cases"][:20]:
            lines.append(f"- crash: {c['case']} ({c['command']}): {c['crash']} (`{c['replay']}`)")
        for c in a["slow_cases"][:20]:
            lines.append(f"- slow: {c['case']} ({c['command']}): {c['seconds']:.1f} s (`{c['replay']}`)")
    if "drops" in res:
        d = res["drops"]
        lines += ["## 5% of notes dropped", "", "| measure | value |", "|---|---|",
                  f"| grooves | {d['grooves']} |",
                  f"| reading unchanged | {d['unchanged']} ({d['unchanged_share']:.0%}; target {d['target_share']:.0%}) |",
                  f"| unchanged where the whole groove's reading is right | {d['unchanged_share_when_whole_is_right']:.0%} |",
                  f"| bar length within 5% | {d['bar_within_5pct_share']:.0%} |",
                  f"| median confidence of the whole groove's reading: unchanged / changed | "
                  f"{d['median_confidence_unchanged']:.2f} / {d['median_confidence_changed'] or float('nan'):.2f} |",
                  f"| wall time | {d['wall_s']:.0f} s |", ""]
        for c in d["changes"]:
            lines.append(f"- {c['piece_id']} (truth {c['truth']}): {c['whole']} -> {c['dropped']} (confidence {c['confidence']})")
    if "large" in res:
        g = res["large"]

        def row(name, m):
            if "error" in m:
                return f"| {name} | error: {m['error']} | | |"
            what = m.get("result") or (f"{m['notes']:,} notes read" if "notes" in m else f"refused: {m.get('refused', '')}")
            return f"| {name} | {what} | {m['wall_s']:.1f} s | {m['peak_rss_mb']:.0f} MB |"

        lines += ["", "## Large input (each in a fresh process)", "", "| input | outcome | wall time | peak memory |", "|---|---|---|---|",
                  row(f"one hour of drumming, {g['hour']['notes']:,} notes: metertop analyse", g["hour"]["analyse"]),
                  row("the same file: pretty_midi's parse alone", g["hour"]["pretty_midi_parse"]),
                  row(f"{g['note_limit']['notes']:,} notes over {g['note_limit']['duration_s'] / 3600:.1f} h (the note limit)",
                      g["note_limit"]["analyse"]),
                  row(f"{g['span_limit_sparse']['onsets']} onsets over {g['span_limit_sparse']['span_s'] / 3600:.2f} h (the span limit)",
                      g["span_limit_sparse"]["analyse"]),
                  row(f"1,000,000 notes ({g['million']['bytes'] / 2**20:.1f} MB): metertop analyse", g["million"]["analyse"]),
                  row("the same file: pretty_midi's parse alone", g["million"]["pretty_midi_parse"])]
        if "ratio_to_parse" in g["hour"]:
            lines += ["", f"One hour: analysis / pretty_midi parse = {g['hour']['ratio_to_parse']}x (same run)."]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fuzz", type=int, default=10_000, help="hostile inputs to run (0 to skip)")
    parser.add_argument("--seed", type=int, default=FUZZ_SEED)
    parser.add_argument("--recordings", type=int, default=1_000, help="hostile recordings to run (0 to skip)")
    parser.add_argument("--recordings-seed", type=int, default=RECORDINGS_SEED)
    parser.add_argument("--grooves", type=int, default=100, help="grooves for the dropped-notes check (0 to skip)")
    parser.add_argument("--no-large", action="store_true", help="skip the large-input measurements")
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--child", nargs=2, metavar=("MODE", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        _child(*args.child)
        return 0
    res: dict = {"date": dt.datetime.now().isoformat(timespec="seconds"), "command": "python bench/robust.py " + " ".join(argv or sys.argv[1:])}
    if args.fuzz:
        print(f"fuzzing {args.fuzz:,} inputs ...", file=sys.stderr, flush=True)
        res["fuzz"] = fuzz(args.fuzz, args.seed, args.jobs)
    if args.recordings:
        print(f"fuzzing {args.recordings:,} recordings ...", file=sys.stderr, flush=True)
        res["recordings"] = recordings(args.recordings, args.recordings_seed, args.jobs)
    if args.grooves:
        print(f"dropping 5% of the notes of {args.grooves} grooves ...", file=sys.stderr, flush=True)
        res["drops"] = drops(args.grooves, args.jobs)
    if not args.no_large:
        print("large inputs ...", file=sys.stderr, flush=True)
        with tempfile.TemporaryDirectory(prefix="metertop-large-") as folder:
            res["large"] = large(Path(folder))
    text = report(res)
    print(text)
    OUT.mkdir(parents=True, exist_ok=True)
    (OUT / f"robust-{res['date'][:10]}.json").write_text(json.dumps(res, indent=1))
    rec = res.get("recordings", {})
    return 1 if res.get("fuzz", {}).get("crashes") or rec.get("crashes") or rec.get("slow") else 0


if __name__ == "__main__":
    sys.exit(main())
