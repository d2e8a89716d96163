"""Essen tunes read as scores: barlines and metre stripped, analysed in score time.

Usage::

    python bench/score_bench.py                       # the 1,000 evaluation tunes of make bench
    python bench/score_bench.py --tunes 300 --with-midi   # and deadpan MIDI on the same tunes, side by side
    python bench/score_bench.py --split train --tunes 300 --with-midi   # development figures (training files)

``make bench`` runs the score set through :func:`score_rows` (the hook in
bench/run.py) beside its MIDI sets.

Conventions
-----------
- Each tune's own ABC text is made barless (:func:`barless_abc`): every
  barline goes, and the metre field becomes ``M:none``; the unit note
  length is kept. metertop reads that text as any ABC file
  (:func:`metertop.scores.read_abc_text`) and analyses it in score time.
- The truth is the notated metre and bar starts (bench/essen.py). Both are
  compared in score time laid out at 100 quarter notes per minute (0.6 s a
  quarter), so the definitions of bench/metrics.py apply unchanged: the
  bar within 5% of the notated bar in quarters; family and division as in
  DESIGN.md section 6; downbeat and beat F-measures at +-70 ms, that is
  +-0.117 quarters.
- Unlike the deadpan MIDI rendering of make bench, which plays each tune
  with its notated beat at 100 bpm, the score gives no tempo: the beat unit
  must come from the note values alone. ``--with-midi`` therefore shows two
  MIDI columns: the make bench rendering, and every tune at 100 quarter
  notes a minute, where the tempo tells as little as a score does.
- The read notes are compared with the corpus reader's (onsets and
  durations); tunes where they differ are counted. Pitches can differ
  where an accidental held to the end of a bar: a barless tune has no bars,
  and music21 reads a file without a version line as ABC 1.3, where an
  accidental holds for one note.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import re
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

from common import METRES, Performance, ScoreTune  # noqa: E402

from metertop.scores import abc_default_unit  # noqa: E402

QUARTER_S = 0.6  # the layout of score time for the metrics: 100 quarter notes per minute
KIND = "score"
TITLE = "folk read as scores (score time)"
_FIELD = re.compile(r"^([A-Za-z]):")
_INLINE_METRE = re.compile(r"\[M:[^\]]*\]")


def barless_abc(tune_text: str) -> str:
    """The ABC text of a tune with its barlines and metre removed.

    Every ``|`` (and the ``:`` of repeat signs) leaves the tune body, inline
    metre fields go, and ``M:`` becomes ``M:none``. Where the tune has no
    ``L:`` field, the unit note length its metre implied (ABC 2.1, section
    3.1.7: 1/16 below 3/4, else 1/8) is written in, so that no note changes
    length.

    Examples
    --------
    >>> print(barless_abc("X:1\\nM:2/4\\nL:1/8\\nK:G\\n|: GA Bc | d2 d2 :|\\n"), end="")
    X:1
    M:none
    L:1/8
    K:G
     GA Bc  d2 d2 
    >>> "L:1/16" in barless_abc("X:1\\nM:2/4\\nK:C\\nCDEF|\\n")
    True
    """
    out, in_body, metre, has_unit = [], False, None, False
    for line in tune_text.splitlines():
        match = _FIELD.match(line)
        if match and (not in_body or match.group(1) in "MLK"):
            key = match.group(1)
            value = line[2:].strip()
            if key == "M":
                metre = metre or value
                if in_body:
                    continue
                line = "M:none"
            elif key == "L":
                has_unit = True
            elif key == "K" and not in_body:
                if not has_unit:
                    out.append(f"L:{abc_default_unit(metre)}")
                    has_unit = True
                in_body = True
            out.append(line)
            continue
        if in_body:
            line = _INLINE_METRE.sub("", line)
            line = re.sub(r"\[\||\|\]|:*\|+:*", "", line)
            line = re.sub(r"\[([12])", "", line)  # repeat endings
        out.append(line)
    return "\n".join(out) + "\n"


def tune_text(tune: ScoreTune) -> str:
    """The tune's ABC text in its Essen file."""
    from essen import essen_dir, split_abc_text

    return split_abc_text((essen_dir() / f"{tune.source_file}.abc").read_text(encoding="utf-8"))[tune.index - 1]


def truth_performance(tune: ScoreTune) -> Performance:
    """The tune's notated bars and beats in score time, laid out at QUARTER_S seconds a quarter."""
    from render import _grid_q, beat_q

    downbeats_q, beats_q = _grid_q(tune)
    n = len(tune.onsets_q)
    return Performance(
        piece_id=tune.tune_id, kind=KIND, time_signature=tune.time_signature,
        onsets_s=tune.onsets_q * QUARTER_S, durations_s=tune.durations_q * QUARTER_S, pitches=np.asarray(tune.pitches, np.int64),
        velocities=np.full(n, 72.0), is_drum=np.zeros(n, bool),
        downbeats_s=downbeats_q * QUARTER_S, beats_s=beats_q * QUARTER_S,
        bar_s=tune.bar_q * QUARTER_S, beat_s=beat_q(tune.time_signature) * QUARTER_S,
        extra={"split": "eval", "source_file": tune.source_file},
    )


def predict_score(tune: ScoreTune) -> dict:
    """metertop on the barless ABC text of a tune; times in score time laid out at QUARTER_S, from the first note."""
    from metertop.scores import analyse_tune, read_abc_text

    start = time.perf_counter()
    (read,) = read_abc_text(barless_abc(tune_text(tune)))
    analysis = analyse_tune(read)
    seconds = time.perf_counter() - start
    r = analysis.result
    # The text states no tempo, so seconds are quarters at the default pace, from the score's start.
    assert not analysis.tune.tempo.stated
    spq = 60.0 / r.extra["quarter_bpm"]
    shift = read.first_q * QUARTER_S

    def layout(times_s) -> np.ndarray:
        return np.asarray(times_s, float) / spq * QUARTER_S - shift

    hyper = r.level("hypermeasure")
    same_notes = (len(read.onsets_q) == len(tune.onsets_q)
                  and np.allclose(read.onsets_q - read.first_q, tune.onsets_q, atol=1e-6)
                  and np.allclose(read.durations_q, tune.durations_q, atol=1e-6))
    same_pitches = same_notes and np.array_equal(read.pitches, tune.pitches)
    return {
        "time_signature": r.time_signature, "beats_per_bar": r.beats_per_bar, "beat_division": r.beat_division,
        "grouping": r.grouping, "bar_s": r.extra["bar_quarters"] * QUARTER_S, "beat_s": r.extra["beat_quarters"] * QUARTER_S,
        "downbeats_s": layout(r.downbeats_s), "beats_s": layout(r.beats_s), "confidence": r.confidence,
        "alternatives": [{"time_signature": a.time_signature, "beats_per_bar": a.beats_per_bar, "beat_division": a.beat_division,
                          "grouping": a.grouping, "bar_s": a.bar_quarters * QUARTER_S} for a in r.alternatives],
        "hyper_period_s": hyper.period_s / spq * QUARTER_S if hyper else None, "seconds": seconds,
        "same_notes": bool(same_notes), "same_pitches": bool(same_pitches),
    }


def _score_one(tune: ScoreTune) -> list[dict]:
    from metrics import evaluate

    perf = truth_performance(tune)
    try:
        pred = predict_score(tune)
        row = evaluate(perf, pred)
        row.update(error=None, same_notes=pred["same_notes"], same_pitches=pred["same_pitches"])
    except Exception as exc:  # a crash is scored as a miss and reported
        row = {"piece": perf.piece_id, "kind": KIND, "truth": perf.time_signature, "predicted": "error",
               "bar_ok": False, "family_truth": METRES[perf.time_signature][3], "family_ok": False, "class_ok": False,
               "top2_ok": False, "f_downbeat": 0.0, "f_beat": 0.0, "confidence": 0.0, "seconds": float("nan"),
               "error": f"{type(exc).__name__}: {exc}", "same_notes": False, "same_pitches": False}
    row["detector"] = "metertop"
    row["parse_seconds"] = float("nan")
    return [row]


def score_rows(tunes: list[ScoreTune], jobs: int, progress: bool) -> list[dict]:
    """Rows of bench/metrics.evaluate for every tune read as a barless score (kind ``"score"``)."""
    import run

    return run.run(tunes, jobs, progress, work=_score_one)


def sample_tunes(split: str, n_tunes: int | None, seed: int) -> list[ScoreTune]:
    """The tunes of one side of the split; with ``n_tunes``, the sample bench/run.py draws with the same seed
    (``build_performances``), so that the figures of the two are on the same tunes."""
    from essen import load_corpus, split_of

    tunes = [t for t in load_corpus(progress=False) if split_of(t) == split]
    if n_tunes is not None and n_tunes < len(tunes):
        idx = np.sort(np.random.default_rng(seed).choice(len(tunes), size=n_tunes, replace=False))
        tunes = [tunes[i] for i in idx]
    return tunes


def _midi_rows(tunes: list[ScoreTune], jobs: int, same_quarter: bool) -> list[dict]:
    """Deadpan MIDI renderings of the same tunes, scored as bench/run.py scores them.

    ``same_quarter=False``: as make bench renders them, each tune's notated beat at 100 bpm. ``True``: every tune at
    100 quarter notes a minute (the layout of :func:`truth_performance`), so that the tempo says nothing about the
    notated beat, as in a score.
    """
    import run
    from render import render

    perfs = [truth_performance(t) if same_quarter else render(t, "deadpan", seed=i) for i, t in enumerate(tunes)]
    saved = run.DETECTORS
    run.DETECTORS = ("metertop",)
    try:
        return run.run(perfs, jobs, progress=False)
    finally:
        run.DETECTORS = saved


def main(argv: list[str] | None = None) -> int:
    from metrics import aggregate

    import run

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tunes", type=int, default=1000, help="tunes in the sample (default 1000; 0 for all)")
    parser.add_argument("--split", choices=("eval", "train"), default="eval")
    parser.add_argument("--with-midi", action="store_true", help="also run deadpan MIDI renderings of the same tunes")
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args(argv)
    t0 = time.time()
    tunes = sample_tunes(args.split, args.tunes or None, run.SAMPLE_SEED)
    rows = score_rows(tunes, args.jobs, progress=sys.stderr.isatty())
    columns = {"score time": aggregate(rows)}
    if args.with_midi:
        columns["deadpan MIDI (notated beat at 100 bpm, as make bench)"] = aggregate(_midi_rows(tunes, args.jobs, False))
        columns["deadpan MIDI (quarter at 100 bpm)"] = aggregate(_midi_rows(tunes, args.jobs, True))
    keys = list(columns["score time"].keys())
    for col in columns.values():
        keys += [k for k in col if k not in keys]
    print(f"{len(tunes)} {args.split} tunes, {time.time() - t0:.0f} s; metertop\n")
    print("| measure | " + " | ".join(columns) + " |\n|---|" + "---|" * len(columns))
    for k in keys:
        print(f"| {k} | " + " | ".join(run._fmt(col.get(k, float("nan"))) for col in columns.values()) + " |")
    errors = [r for r in rows if r.get("error")]
    print(f"\ncrashes: {len(errors)}" + (f" (first: {errors[0]['piece']}: {errors[0]['error']})" if errors else ""))
    print(f"notes read differ from the corpus reader's: {sum(not r['same_notes'] for r in rows)} tunes; "
          f"pitches differ: {sum(r['same_notes'] and not r['same_pitches'] for r in rows)} more")
    return 0


if __name__ == "__main__":
    sys.exit(main())
