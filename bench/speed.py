"""Speed benchmark: metertop against pretty_midi's parse of the same file, in one run.

Usage: python bench/speed.py   (bench/run.py includes this table in docs/benchmarks.md)

A 3-minute drum groove (about 2,000 onsets, sixteenth-note hi-hats, kick and
snare, crashes every four bars, seeded timing noise) is written to
bench/out/, then timed three ways: pretty_midi's parse, metertop's analysis
of the parsed notes inside the process, and the whole ``metertop analyse``
command. The machine is shared and noisy, so the figures that matter are the
ratios measured side by side in the same run.
"""

from __future__ import annotations

import argparse
import datetime as dt
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "bench" / "out"


def write_groove(path: Path, minutes: float = 3.0, bpm: float = 104.0, seed: int = 11) -> int:
    """A steady rock groove with drift-free timing noise; returns the note count."""
    import pretty_midi

    rng = np.random.default_rng(seed)
    pm = pretty_midi.PrettyMIDI(initial_tempo=bpm)
    kit = pretty_midi.Instrument(0, is_drum=True, name="kit")
    beat = 60.0 / bpm
    bar, t = 0, 0.25
    while t < minutes * 60:
        for k in range(16):
            at = t + k * beat / 4
            jitter = rng.normal(0, 0.010)
            kit.notes.append(pretty_midi.Note(int(np.clip(60 + 20 * (k % 2 == 0) + rng.normal(0, 6), 1, 127)), 42, at + jitter, at + jitter + 0.05))
            if k in (0, 8, 10):
                kit.notes.append(pretty_midi.Note(100, 36, at + jitter - 0.008, at + jitter + 0.1))
            if k in (4, 12):
                kit.notes.append(pretty_midi.Note(96, 38, at + jitter - 0.008, at + jitter + 0.1))
        if bar % 4 == 0:
            kit.notes.append(pretty_midi.Note(110, 49, t, t + 1.0))
        t += 4 * beat
        bar += 1
    pm.instruments.append(kit)
    path.parent.mkdir(parents=True, exist_ok=True)
    pm.write(str(path))
    return len(kit.notes)


def median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def speed_table(repeats: int = 7) -> tuple[str, dict]:
    """Time pretty_midi's parse, metertop's analysis and the CLI on a 3-minute groove; a markdown table and the figures."""
    import pretty_midi

    import metertop
    from metertop.load import load_notes

    groove = OUT / "groove_3min.mid"
    n_notes = write_groove(groove)
    notes = load_notes(groove)
    parse_s = median_time(lambda: pretty_midi.PrettyMIDI(str(groove)), repeats)
    analyse_s = median_time(lambda: metertop.analyse(notes), repeats)
    cli = ROOT / ".venv" / "bin" / "metertop"
    cli_cmd = [str(cli)] if cli.exists() else [sys.executable, "-m", "metertop"]
    wall_s = median_time(lambda: subprocess.run(cli_cmd + ["analyse", str(groove)], check=True, capture_output=True), repeats)
    result = metertop.analyse(notes)
    rows = [
        ("file", f"3-minute drum groove, {n_notes} notes, {result.n_events} events"),
        ("proposed", f"{result.time_signature} at {result.tempo_bpm:.1f} bpm (played: 4/4 at 104 bpm)"),
        ("pretty_midi parse, median", f"{parse_s * 1000:.0f} ms"),
        ("metertop analysis after loading, median", f"{analyse_s * 1000:.0f} ms"),
        ("ratio analysis / parse", f"{analyse_s / parse_s:.1f}x"),
        ("`metertop analyse` wall time incl. start-up, median", f"{wall_s * 1000:.0f} ms"),
    ]
    table = (f"Median of {repeats} runs.\n\n| measure | value |\n|---|---|\n" + "\n".join(f"| {k} | {v} |" for k, v in rows))
    figures = {"notes": n_notes, "parse_s": parse_s, "analyse_s": analyse_s, "ratio": analyse_s / parse_s, "cli_wall_s": wall_s}
    return table, figures


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    table, _ = speed_table(args.repeats)
    print(table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
