"""Accuracy and speed benchmark: metertop beside an autocorrelation baseline, in one run.

Usage::

    python bench/run.py                 # the fixed sample (make bench)
    python bench/run.py --full          # every evaluation tune, 1,000 grooves (make bench-full)

Sets
----
- *deadpan folk*: Essen evaluation tunes (bench/split.md) rendered deadpan;
- *played folk*: the same tunes with drift, jitter and velocity accents;
- *played folk, flat velocity*: the same timing, every velocity equal;
- *drum grooves*: bench/grooves.py, with exact ground truth.

Both detectors get the same notes. Figures go to ``docs/benchmarks.md``
(with the command and the date) and, in full, to
``bench/out/results-<date>.json`` so that two runs can be compared.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import multiprocessing as mp
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from common import Performance  # noqa: E402
from metrics import aggregate, confusion, evaluate  # noqa: E402

ROOT = HERE.parent
OUT = HERE / "out"
SAMPLE_SEED = 20261202
DETECTORS = ("metertop", "baseline", "persistence only")
ABLATION_MODEL = HERE / "models" / "persistence_only.json"
SETS = (("deadpan", "deadpan folk"), ("score", "folk read as scores (score time)"), ("played", "played folk"),
        ("played-flat", "played folk, flat velocity"), ("groove", "drum grooves"))


# ---- detectors -------------------------------------------------------------

def _reading_dict(reading) -> dict:
    return {"time_signature": reading.time_signature, "beats_per_bar": reading.beats_per_bar,
            "beat_division": reading.beat_division, "grouping": reading.grouping, "bar_s": reading.bar_s}


MODEL_OVERRIDE: Path | None = None  # --model: score metertop's readings with another model file


def _model_settings(path: Path):
    from metertop.model import ReadingModel
    from metertop.pipeline import Settings
    from metertop.tree import TreeSettings

    return Settings(tree=TreeSettings(model=ReadingModel.from_dict(json.loads(Path(path).read_text()))))


def predict_metertop(perf: Performance, settings=None) -> dict:
    import metertop

    if settings is None and MODEL_OVERRIDE is not None:
        settings = _model_settings(MODEL_OVERRIDE)
    notes = perf.note_table()
    start = time.perf_counter()
    r = metertop.analyse(notes) if settings is None else metertop.analyse(notes, settings=settings)
    return result_prediction(r, time.perf_counter() - start)


def result_prediction(r, seconds: float) -> dict:
    """A MetreResult as the prediction dict that ``metrics.evaluate`` scores."""
    hyper = r.level("hypermeasure")
    return {
        "time_signature": r.time_signature, "beats_per_bar": r.beats_per_bar, "beat_division": r.beat_division,
        "grouping": r.grouping, "bar_s": r.bar_s, "beat_s": r.beat_s, "downbeats_s": r.downbeats_s, "beats_s": r.beats_s,
        "confidence": r.confidence, "alternatives": [_reading_dict(a) for a in r.alternatives],
        "hyper_period_s": hyper.period_s if hyper else None, "seconds": seconds,
    }


def predict_baseline(perf: Performance) -> dict:
    from baseline import analyse_baseline
    from common import METRES

    notes = perf.note_table()
    start = time.perf_counter()
    b = analyse_baseline(notes)
    seconds = time.perf_counter() - start
    alts = []
    for alt in b.get("alternatives") or []:
        if isinstance(alt, dict):
            alts.append(alt)
            continue
        beats, division, bar_q, _, grouping = METRES[alt]
        beat_q = bar_q / beats if grouping is None else 1.0
        alts.append({"time_signature": alt, "beats_per_bar": beats, "beat_division": division, "grouping": grouping,
                     "bar_s": b["beat_s"] * bar_q / beat_q})
    hyper = b.get("hypermeasure_bars")
    return {**b, "alternatives": alts, "seconds": seconds,
            "hyper_period_s": hyper * b["bar_s"] if hyper else None}


def predict_persistence_only(perf: Performance) -> dict:
    """metertop with the model fitted on the persistence features alone (the ablation)."""
    return predict_metertop(perf, _model_settings(ABLATION_MODEL))


PREDICT = {"metertop": predict_metertop, "baseline": predict_baseline, "persistence only": predict_persistence_only}


def _parse_seconds(perf: Performance) -> float:
    """pretty_midi's parse time of the piece written as a MIDI file (median of 3), for the speed ratio."""
    import tempfile

    import pretty_midi
    from grooves import write_midi

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "piece.mid"
        write_midi(perf, path)
        times = []
        for _ in range(3):
            start = time.perf_counter()
            pretty_midi.PrettyMIDI(str(path))
            times.append(time.perf_counter() - start)
    return float(np.median(times))


# The ablation runs on deadpan folk and the grooves only, to keep make bench short.
ABLATION_KINDS = ("deadpan", "groove")


def _run_one(perf: Performance) -> list[dict]:
    parse_s = _parse_seconds(perf) if perf.kind == "groove" else float("nan")
    rows = []
    for name in DETECTORS:
        if name == "persistence only" and perf.kind not in ABLATION_KINDS:
            continue
        try:
            pred = PREDICT[name](perf)
            row = evaluate(perf, pred)
            row["error"] = None
        except Exception as exc:  # a crash is scored as a miss and reported
            row = {"piece": perf.piece_id, "kind": perf.kind, "truth": perf.time_signature, "predicted": "error",
                   "bar_ok": False, "family_truth": "", "family_ok": False, "class_ok": False, "top2_ok": False,
                   "f_downbeat": 0.0, "f_beat": 0.0, "confidence": 0.0, "seconds": float("nan"),
                   "error": f"{type(exc).__name__}: {exc}"}
            if perf.hypermeasure_bars is not None:
                row["hyper_ok"] = False
        row["detector"] = name
        row["parse_seconds"] = parse_s
        rows.append(row)
    return rows


# ---- sets --------------------------------------------------------------------

def build_performances(n_tunes: int | None, n_grooves: int, progress: bool) -> tuple[list[Performance], dict]:
    from essen import format_report, load_corpus_with_report, split_of
    from grooves import make_grooves
    from render import render

    tunes, report = load_corpus_with_report(progress=progress)
    eval_tunes = [t for t in tunes if split_of(t) == "eval"]
    rng = np.random.default_rng(SAMPLE_SEED)
    if n_tunes is not None and n_tunes < len(eval_tunes):
        idx = np.sort(rng.choice(len(eval_tunes), size=n_tunes, replace=False))
        eval_tunes = [eval_tunes[i] for i in idx]
    perfs = []
    for i, tune in enumerate(eval_tunes):
        perfs.append(render(tune, "deadpan", seed=i))
        perfs.append(render(tune, "played", seed=10_000 + i))
        perfs.append(render(tune, "played-flat", seed=10_000 + i))
    perfs += make_grooves(n_grooves, seed=SAMPLE_SEED)
    info = {"eval tunes": len(eval_tunes), "grooves": n_grooves, "corpus tunes": len(tunes), "corpus report": format_report(report),
            "tune sample": eval_tunes}
    return perfs, info


def run(perfs: list, jobs: int, progress: bool, work=_run_one) -> list[dict]:
    """``work`` (default: both detectors on a Performance) on every piece in parallel; its lists of rows, joined."""
    rows: list[dict] = []
    start = time.time()
    with mp.get_context("fork").Pool(jobs) as pool:
        for k, result in enumerate(pool.imap_unordered(work, perfs, chunksize=4), 1):
            rows += result
            if progress and (k % 100 == 0 or k == len(perfs)):
                rate = k / (time.time() - start)
                print(f"\r  {k}/{len(perfs)} pieces, {rate:.1f}/s, ETA {(len(perfs) - k) / rate:.0f} s", end="", file=sys.stderr, flush=True)
    if progress:
        print(file=sys.stderr)
    return rows


# ---- report ------------------------------------------------------------------

def _fmt(v) -> str:
    if isinstance(v, (int, np.integer)):
        return str(v)
    if isinstance(v, float) and np.isnan(v):
        return "-"
    return f"{v:.3f}" if isinstance(v, float) else str(v)


def tables(rows: list[dict]) -> tuple[str, dict]:
    """Markdown tables, metertop beside the baseline, per set; and the figures as a dict."""
    figures: dict = {}
    md = []
    for kind, title in SETS:
        per = {d: aggregate([r for r in rows if r["kind"] == kind and r["detector"] == d]) for d in DETECTORS}
        if not per["metertop"].get("pieces"):
            continue
        figures[title] = per
        keys = list(per["metertop"].keys())
        for k in per["baseline"].keys():
            if k not in keys:
                keys.append(k)
        md.append(f"### {title}\n\n| measure | " + " | ".join(DETECTORS) + " |\n|---|" + "---|" * len(DETECTORS))
        for k in keys:
            md.append(f"| {k} | " + " | ".join(_fmt(per[d].get(k, float("nan"))) if per[d].get("pieces") else "-" for d in DETECTORS) + " |")
        md.append("")
    return "\n".join(md), figures


def per_piece_speed(rows: list[dict], figures: dict) -> str:
    """Median analysis time per piece, and its ratio to pretty_midi's parse of the same file (grooves)."""
    lines = ["Per piece, in this run (inside the worker processes, after loading):", "",
             "| set | metertop, median | baseline, median | metertop / pretty_midi parse, median |", "|---|---|---|---|"]
    for kind, title in SETS:
        m = [r for r in rows if r["kind"] == kind and r["detector"] == "metertop" and np.isfinite(r["seconds"])]
        b = [r for r in rows if r["kind"] == kind and r["detector"] == "baseline" and np.isfinite(r["seconds"])]
        if not m:
            continue
        ratio = [r["seconds"] / r["parse_seconds"] for r in m if np.isfinite(r.get("parse_seconds", np.nan))]
        ratio_txt = f"{np.median(ratio):.1f}x" if ratio else "-"
        figures.setdefault("per piece", {})[title] = {"metertop_s": float(np.median([r["seconds"] for r in m])),
                                                       "baseline_s": float(np.median([r["seconds"] for r in b])) if b else None,
                                                       "ratio_to_parse": float(np.median(ratio)) if ratio else None}
        baseline_txt = f"{np.median([r['seconds'] for r in b]) * 1000:.0f} ms" if b else "-"
        lines.append(f"| {title} | {np.median([r['seconds'] for r in m]) * 1000:.0f} ms | {baseline_txt} | {ratio_txt} |")
    return "\n".join(lines)


def confusion_md(rows: list[dict], kind: str, detector: str) -> str:
    sel = [r for r in rows if r["kind"] == kind and r["detector"] == detector]
    if not sel:
        return ""
    truths, preds, table = confusion(sel)
    head = "| true \\ proposed | " + " | ".join(preds) + " |\n|---|" + "---|" * len(preds)
    body = "\n".join(f"| {t} | " + " | ".join(str(v) for v in row) + " |" for t, row in zip(truths, table))
    return head + "\n" + body + "\n"


def kept_sections(path: Path) -> str:
    """Sections other benchmarks wrote into ``path`` between ``<!-- section: NAME -->`` markers, to keep them."""
    import re

    old = path.read_text() if path.exists() else ""
    pattern = re.compile(r"<!-- section: (\S+) -->.*?<!-- end section: \1 -->\n?", flags=re.S)
    return "".join("\n" + m.group(0) for m in pattern.finditer(old))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tunes", type=int, default=1000, help="evaluation tunes in the sample (default 1000)")
    parser.add_argument("--grooves", type=int, default=200)
    parser.add_argument("--full", action="store_true", help="every evaluation tune and 1,000 grooves")
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "benchmarks.md")
    parser.add_argument("--quiet", action="store_true")
    parser.add_argument("--model", type=Path, default=None,
                        help="score metertop's readings with this model JSON instead of the shipped one (to compare fits)")
    args = parser.parse_args()
    progress = not args.quiet and sys.stderr.isatty()
    global MODEL_OVERRIDE
    MODEL_OVERRIDE = args.model
    t0 = time.time()
    n_tunes, n_grooves = (None, 1000) if args.full else (args.tunes, args.grooves)
    perfs, info = build_performances(n_tunes, n_grooves, progress)
    print(f"{len(perfs)} performances ({info['eval tunes']} tunes, {info['grooves']} grooves)", file=sys.stderr)
    rows = run(perfs, args.jobs, progress)
    # The same tunes as barless scores, analysed in score time (bench/score_bench.py).
    from score_bench import score_rows

    rows += score_rows(info.pop("tune sample"), args.jobs, progress)
    md_tables, figures = tables(rows)
    from speed import speed_table

    speed_md, speed_figures = speed_table()
    speed_md += "\n\n" + per_piece_speed(rows, speed_figures)
    from check_bench import run_section as check_section  # metertop check and metre changes, on their own sample

    check_md, check_figures = check_section(jobs=args.jobs)
    from audio_bench import run_section as audio_section  # recordings: onsets, metre beside MIDI, speed

    audio_md, audio_figures = audio_section(jobs=args.jobs)
    audio_figures.pop("rows")
    elapsed = time.time() - t0
    stamp = dt.date.today().isoformat()
    command = "make bench-full" if args.full else "make bench"
    errors = [r for r in rows if r.get("error")]
    from metertop.model import default_model

    model_note = (f"reading model: {json.loads(args.model.read_text())['fitted_on']} ({args.model})" if args.model
                  else f"reading model: {default_model().fitted_on}")
    anchor = figures.get("deadpan folk", {}).get("baseline", {}).get("duple/triple family correct", float("nan"))
    text = f"""# Benchmarks

Measured {stamp} with `{command}` (`python bench/run.py{' --full' if args.full else ''}`) in {elapsed / 60:.1f} minutes on this 2-core machine,
{args.jobs} processes. Sample: {info['eval tunes']} Essen evaluation tunes (of {info['corpus tunes']} usable tunes; files in
[bench/split.md](../bench/split.md); nothing was trained or tuned on them), each rendered deadpan, played, and played with
flat velocity, plus {info['grooves']} generated drum grooves. Definitions: DESIGN.md, Evaluation; code: `bench/metrics.py`.
Crashes: {len(errors)}.

*Folk read as scores* are the same tunes as barless ABC (barlines gone, `M:none`), read and analysed in score time
(`bench/score_bench.py`): bars are compared in quarters, and times laid out at 100 quarters a minute, so that the +-70 ms
window is +-0.117 quarters. The deadpan renderings play each tune's notated beat at 100 bpm; a score states no tempo,
so there the beat unit comes from the note values alone. The baseline does not read scores.

The baseline is autocorrelation metre induction with accent weighting (Brown 1993; Toiviainen & Eerola 2006), in
`bench/baseline.py`. Its duple/triple figure on deadpan folk is {_fmt(anchor)}; the paper reports 96% on about 13,000 folk
melodies (Toiviainen & Eerola, JASA 119 (2006) 1164-1170), over its own classes, so the comparison is close, not exact.

Columns: `metertop` is metertop scored by the {'given' if args.model else 'shipped'} {model_note}; `persistence only` is the ablation, the same pipeline scored
by a model fitted on the persistence features alone (`bench/models/persistence_only.json`), run on deadpan folk and the grooves.

## Accuracy

{md_tables}
### Confusion, metertop, deadpan folk (rows: notated class; columns: proposed)

{confusion_md(rows, 'deadpan', 'metertop')}
### Confusion, metertop, drum grooves

{confusion_md(rows, 'groove', 'metertop')}
{check_md}
{audio_md}
## The corpus

Tunes left out of every figure are counted here (free metre, other metres, irregular bars, ...):

```
{info['corpus report']}
```

## Speed

{speed_md}
"""
    args.out.write_text(text + kept_sections(args.out))
    OUT.mkdir(parents=True, exist_ok=True)
    result_path = OUT / f"results-{stamp}{'-full' if args.full else ''}.json"
    result_path.write_text(json.dumps({"date": stamp, "command": command, "info": info, "figures": figures,
                                       "speed": speed_figures, "check": check_figures, "audio": audio_figures,
                                       "rows": rows}, indent=1, default=float))
    print(md_tables)
    print(f"wrote {args.out} and {result_path} in {elapsed:.0f} s", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
