"""Recordings benchmark: onsets found in synthesised audio, and the metre from them beside the metre from MIDI.

Usage::

    python bench/audio_bench.py                  # make bench-audio: 300 played tunes + 200 grooves; updates docs/benchmarks.md
    python bench/audio_bench.py --split train    # development data only (training tunes, grooves of seed 777); prints

Sets
----
- *played folk*: Essen evaluation tunes (bench/split.md) rendered played
  (``bench/render.py``) and synthesised as harmonic tones (``bench/synth.py``);
- *drum grooves*: ``bench/grooves.py`` at the benchmark's seed, synthesised
  with simple drum sounds.

Each performance is analysed three ways in the same worker: its notes (the
MIDI figures, as ``bench/run.py`` gets them), its recording written as a WAV
file at 44.1 kHz and read back through ``metertop.load_notes``, and the same
recording with white noise at 20 dB SNR; a groove also a fourth way, from a
recording on drums voiced otherwise (``synth.synthesise(kit="other")``), to
see how far the kit reading's levels, chosen on the first kit, carry. The
onset F-measure is
``mir_eval.onset.evaluate`` (+-50 ms) against the performance's note onsets,
notes within 30 ms merged into one onset (``synth.reference_onsets``). The
metre is scored by ``bench/metrics.py``, as in ``bench/run.py``.

Speed: the 3-minute groove of ``bench/speed.py`` synthesised at 44.1 kHz
(stereo WAV), ``metertop.analyse`` on the WAV file (read, onset detection and
analysis) beside ``metertop.analyse`` on the MIDI file of the same
performance, interleaved, median of 5.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import statistics
import sys
import tempfile
import time
import zlib
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from common import Performance  # noqa: E402

ROOT = HERE.parent
SAMPLE_SEED = 20261202  # as bench/run.py
TRAIN_GROOVE_SEED = 777  # as bench/check_bench.py: development grooves
SAMPLE_RATE = 44_100
SNR_DB = 20.0
SECTION = "## Recordings (audio input)"
OTHER_KIT = "audio, other kit"
VERSIONS = ("MIDI", "audio", f"audio, {SNR_DB:g} dB SNR", OTHER_KIT)
SETS = (("played", "played folk"), ("groove", "drum grooves"))
AUDIO_SETTINGS = None  # --band-weights: the onset detector's settings for this run (development only)


def build(n_tunes: int, n_grooves: int, split: str, seed: int) -> list[Performance]:
    """Played Essen tunes of ``split`` (a seeded sample) and ``n_grooves`` grooves of ``seed``."""
    from essen import load_corpus, split_of
    from grooves import make_grooves
    from render import render

    tunes = [t for t in load_corpus(progress=False) if split_of(t) == split]
    rng = np.random.default_rng(seed)
    pick = np.sort(rng.choice(len(tunes), size=min(n_tunes, len(tunes)), replace=False))
    perfs = [render(tunes[i], "played", seed=20_000 + int(i)) for i in pick]
    return perfs + make_grooves(n_grooves, seed=seed)


def _error_row(perf: Performance, exc: Exception) -> dict:
    row = {"piece": perf.piece_id, "kind": perf.kind, "truth": perf.time_signature, "predicted": "error", "bar_ok": False,
           "family_truth": "", "family_ok": False, "class_ok": False, "top2_ok": False, "f_downbeat": 0.0, "f_beat": 0.0,
           "confidence": 0.0, "seconds": float("nan"), "error": f"{type(exc).__name__}: {exc}"}
    if perf.hypermeasure_bars is not None:
        row["hyper_ok"] = False
    return row


def _one(perf: Performance) -> list[dict]:
    """The three analyses of one performance, one row each."""
    import mir_eval
    import soundfile as sf

    import metertop
    from metertop.load import load_notes
    from metrics import evaluate
    from run import predict_metertop, result_prediction
    from synth import add_noise, reference_onsets, synthesise

    rows = []
    try:
        row = evaluate(perf, predict_metertop(perf))
        row["error"] = None
    except Exception as exc:  # scored as a miss and reported
        row = _error_row(perf, exc)
    rows.append({**row, "version": "MIDI"})
    seed = zlib.crc32(perf.piece_id.encode())
    clean = synthesise(perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities, perf.is_drum,
                       sample_rate=SAMPLE_RATE, seed=seed)
    ref = reference_onsets(perf.onsets_s)
    versions = [(VERSIONS[1], clean), (VERSIONS[2], add_noise(clean, SNR_DB, seed=seed + 1))]
    if perf.kind == "groove":  # the same grooves on drums voiced otherwise (bench/synth.py, kit="other")
        versions.append((OTHER_KIT, synthesise(perf.onsets_s, perf.durations_s, perf.pitches, perf.velocities, perf.is_drum,
                                               sample_rate=SAMPLE_RATE, seed=seed, kit="other")))
    with tempfile.TemporaryDirectory() as tmp:
        for version, audio in versions:
            path = Path(tmp) / "take.wav"
            sf.write(str(path), audio, SAMPLE_RATE, subtype="PCM_16")
            onset = {"onset_f": 0.0, "onset_p": 0.0, "onset_r": 0.0, "n_onsets": 0}
            try:
                start = time.perf_counter()
                notes = load_notes(path, audio=AUDIO_SETTINGS)
                detect_s = time.perf_counter() - start
                scores = mir_eval.onset.evaluate(ref, np.unique(notes.onsets_s))  # a kit's onset may sound several drums
                onset = {"onset_f": scores["F-measure"], "onset_p": scores["Precision"], "onset_r": scores["Recall"],
                         "n_onsets": len(np.unique(notes.onsets_s))}
                start = time.perf_counter()
                r = metertop.analyse(notes)
                row = evaluate(perf, result_prediction(r, time.perf_counter() - start + detect_s))
                row["error"] = None
            except Exception as exc:
                row = _error_row(perf, exc)
            rows.append({**row, **onset, "version": version, "audio_s": len(audio) / SAMPLE_RATE})
    return rows


def figures(rows: list[dict]) -> dict:
    """Per set and version: the metre figures of ``metrics.aggregate``, and the onset F-measure, precision and recall."""
    from metrics import aggregate

    out: dict = {}
    for kind, title in SETS:
        for version in VERSIONS:
            sel = [r for r in rows if r["kind"] == kind and r["version"] == version]
            if not sel:
                continue
            fig = dict(aggregate(sel))
            if version != "MIDI":
                for key, name in (("onset_f", "onset F-measure (+-50 ms)"), ("onset_p", "onset precision"),
                                  ("onset_r", "onset recall")):
                    fig[name] = float(np.mean([r[key] for r in sel]))
            fig["crashes"] = sum(1 for r in sel if r.get("error"))
            out.setdefault(title, {})[version] = fig
    return out


def speed(repeats: int = 5) -> dict:
    """``metertop.analyse`` on a 3-minute WAV (44.1 kHz, stereo) and on the MIDI file of the same performance, interleaved."""
    import soundfile as sf

    import metertop
    from metertop.load import load_notes
    from speed import write_groove
    from synth import synthesise

    out = ROOT / "bench" / "out"
    midi = out / "groove_3min.mid"
    write_groove(midi)
    notes = load_notes(midi)
    mono = synthesise(notes.onsets_s, notes.durations_s, notes.pitches, notes.velocities, notes.is_drum,
                      sample_rate=SAMPLE_RATE, seed=3)
    wav = out / "groove_3min.wav"
    sf.write(str(wav), np.column_stack([mono, mono]), SAMPLE_RATE, subtype="PCM_16")
    audio_t, midi_t, detect_t = [], [], []
    for _ in range(repeats):
        start = time.perf_counter()
        load_notes(wav)
        detect_t.append(time.perf_counter() - start)
        start = time.perf_counter()
        metertop.analyse(wav)
        audio_t.append(time.perf_counter() - start)
        start = time.perf_counter()
        metertop.analyse(midi)
        midi_t.append(time.perf_counter() - start)
    return {"recording_s": len(mono) / SAMPLE_RATE, "audio_analyse_s": statistics.median(audio_t),
            "audio_read_detect_s": statistics.median(detect_t), "midi_analyse_s": statistics.median(midi_t),
            "ratio": statistics.median(audio_t) / statistics.median(midi_t)}


def _fmt(v) -> str:
    if isinstance(v, (int, np.integer)):
        return str(v)
    return "-" if v is None or (isinstance(v, float) and np.isnan(v)) else (f"{v:.3f}" if isinstance(v, float) else str(v))


_SHOWN = ("pieces", "onset F-measure (+-50 ms)", "onset precision", "onset recall", "bar length correct",
          "duple/triple family correct", "metre class correct", "macro class recall", "top-2 metre", "beat F", "downbeat F",
          "hypermeasure correct", "crashes")


def markdown(fig: dict, sp: dict | None, info: str) -> str:
    md = [SECTION, "", info, ""]
    for _, title in SETS:
        if title not in fig:
            continue
        per = fig[title]
        keys = [k for k in _SHOWN if any(k in per[v] for v in per)]
        keys += [k for k in per["MIDI"] if k not in keys]
        md += [f"### {title}", "", "| measure | " + " | ".join(per) + " |", "|---|" + "---|" * len(per)]
        for k in keys:
            md.append(f"| {k} | " + " | ".join(_fmt(per[v].get(k)) for v in per) + " |")
        md.append("")
    if sp:
        md += ["### Speed", "",
               f"A {sp['recording_s'] / 60:.1f}-minute recording at 44.1 kHz (stereo WAV, the groove of `bench/speed.py`), median of 5, "
               "interleaved in the same process:", "",
               "| input | `metertop.analyse` | of which reading and onset detection |", "|---|---|---|",
               f"| WAV recording | {sp['audio_analyse_s']:.2f} s | {sp['audio_read_detect_s']:.2f} s |",
               f"| MIDI file of the same performance | {sp['midi_analyse_s']:.2f} s | - |",
               "", f"Recording / MIDI: {sp['ratio']:.2f}x.", ""]
    return "\n".join(md)


def run_section(n_tunes: int = 300, n_grooves: int = 200, jobs: int | None = None, split: str = "eval",
                with_speed: bool = True) -> tuple[str, dict]:
    """The section for docs/benchmarks.md (bench/run.py calls this), and the figures."""
    jobs = jobs or os.cpu_count() or 1
    seed = SAMPLE_SEED if split == "eval" else TRAIN_GROOVE_SEED
    start = time.time()
    perfs = build(n_tunes, n_grooves, split, seed)
    from check_bench import _pool_map

    rows = [row for rows_of_one in _pool_map(_one, perfs, jobs, "audio") for row in rows_of_one]
    fig = figures(rows)
    sp = speed() if with_speed else None
    info = (f"Measured {dt.date.today().isoformat()} with `python bench/audio_bench.py --tunes {n_tunes} --grooves {n_grooves}"
            f"{' --split train' if split == 'train' else ''}` in {(time.time() - start) / 60:.1f} minutes: {n_tunes} Essen "
            f"{'evaluation' if split == 'eval' else 'training'} tunes played (drift, jitter, downbeat accents) and synthesised as "
            f"harmonic tones, and {n_grooves} grooves synthesised with simple drum sounds (`bench/synth.py`), each analysed from "
            f"its notes (MIDI), from its recording (a 44.1 kHz WAV file), and from the recording with white noise at "
            f"{SNR_DB:g} dB SNR; the grooves also from a recording on drums voiced otherwise (`kit=\"other\"`: the kit "
            f"reading's levels were chosen on the first kit only). Onset figures: `mir_eval.onset.evaluate` (+-50 ms) against the note onsets, notes within "
            f"30 ms counted as one. Metre figures: `bench/metrics.py`, as in the tables above. The detector's parameters were "
            f"chosen on training tunes and grooves of another seed (`--split train`). Code: `bench/audio_bench.py`.")
    return markdown(fig, sp, info), {"audio": fig, "speed": sp, "rows": rows}


def flux_settings(assignments: list[str]):
    """FluxSettings with the fields named in ``NAME=VALUE`` strings (tuples comma-separated; true, false or none)."""
    import dataclasses

    from metertop.flux import FluxSettings

    fields = {f.name for f in dataclasses.fields(FluxSettings)}
    changes = {}
    for item in assignments:
        name, _, value = item.partition("=")
        if name not in fields:
            raise SystemExit(f"audio_bench: no FluxSettings field '{name}' (fields: {', '.join(sorted(fields))})")
        words = {"true": True, "false": False, "none": None}
        changes[name] = words[value.lower()] if value.lower() in words else (
            tuple(float(v) for v in value.split(",")) if "," in value else float(value))
    return FluxSettings(**changes)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    # 300 tunes and 200 grooves: a metre-class difference between two versions of
    # 100 pieces has a standard error of about 5 points, the size of the target.
    parser.add_argument("--tunes", type=int, default=300)
    parser.add_argument("--grooves", type=int, default=200)
    parser.add_argument("--split", choices=("eval", "train"), default="eval",
                        help="train: development data only (training tunes, grooves of seed 777); printed, not written")
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--no-speed", action="store_true")
    parser.add_argument("--band-weights", default=None, help="LOW,MID,HIGH band weights of the onset strengths (to compare on --split train)")
    parser.add_argument("--flux", action="append", default=[], metavar="NAME=VALUE",
                        help="set a field of metertop.flux.FluxSettings (repeatable; e.g. kit=false, kit_levels=0.3,0.5,0.3,1.4), "
                             "to compare on --split train")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "benchmarks.md")
    args = parser.parse_args()
    if args.band_weights:
        args.flux.append(f"band_weights={args.band_weights}")
    if args.flux:
        global AUDIO_SETTINGS
        AUDIO_SETTINGS = flux_settings(args.flux)
    text, fig = run_section(args.tunes, args.grooves, args.jobs, args.split, not args.no_speed)
    print(text)
    if args.split == "eval":
        from check_bench import update_section

        update_section(args.out, text, SECTION)
        print(f"updated {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
