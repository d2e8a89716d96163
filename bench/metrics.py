"""Benchmark metrics: per-piece checks and their aggregates.

Conventions
-----------
- A *prediction* is a dict with ``time_signature``, ``beats_per_bar``,
  ``beat_division``, ``grouping``, ``bar_s``, ``beat_s``, ``downbeats_s``,
  ``beats_s``, ``confidence``, ``alternatives`` (dicts with the same metre
  keys, best first) and ``hyper_period_s`` (or None).
- Definitions follow DESIGN.md, Evaluation:
  - bar length correct: within 5% of the notated bar;
  - family: duple, triple (single, irregular) as in section 6, scored over
    the duple and triple tunes;
  - metre class: bar, family and division all right (2/2 counts as 4/4);
  - macro recall: the mean of the per-class recalls over classes with at
    least ``MIN_CLASS_SIZE`` pieces in the set;
  - downbeat and beat F-measure at +-70 ms, untrimmed, with mir_eval
    (``mir_eval.onset.f_measure``; Dixon 2006; Davies, Degara & Plumbley 2009);
  - Brier score of ``confidence`` against metre-class correctness.
"""

from __future__ import annotations

from collections import Counter, OrderedDict

import numpy as np

from common import METRES, Performance, class_key, family_of

WINDOW_S = 0.07
MIN_CLASS_SIZE = 10  # classes smaller than this are left out of the macro average


def _f_measure(ref, est) -> float:
    import mir_eval

    ref, est = np.asarray(ref, float), np.asarray(est, float)
    if len(ref) == 0 and len(est) == 0:
        return 1.0
    if len(ref) == 0 or len(est) == 0:
        return 0.0
    return float(mir_eval.onset.f_measure(ref, est, window=WINDOW_S)[0])


def truth_metre(time_signature: str) -> tuple[str, int | None]:
    """(family, division) of a notated metre."""
    beats, division, _, family, _ = METRES[time_signature]
    return family, division


def reading_matches(reading: dict, perf: Performance) -> bool:
    """Metre class correct: bar within 5%, same family, same division."""
    family, division = truth_metre(perf.time_signature)
    pred_family = family_of(reading["beats_per_bar"], reading["beat_division"], reading["grouping"])
    pred_division = None if reading["grouping"] is not None else reading["beat_division"]
    bar_ok = abs(reading["bar_s"] - perf.bar_s) <= 0.05 * perf.bar_s
    return bool(bar_ok and pred_family == family and pred_division == division)


def evaluate(perf: Performance, pred: dict) -> dict:
    """Per-piece checks of one prediction."""
    family, _ = truth_metre(perf.time_signature)
    pred_family = family_of(pred["beats_per_bar"], pred["beat_division"], pred["grouping"])
    correct = reading_matches(pred, perf)
    alts = pred.get("alternatives") or [pred]
    top2 = any(reading_matches(a, perf) for a in alts[:2])
    out = {
        "piece": perf.piece_id,
        "kind": perf.kind,
        "truth": class_key(perf.time_signature),
        "predicted": pred["time_signature"],
        "bar_ok": bool(abs(pred["bar_s"] - perf.bar_s) <= 0.05 * perf.bar_s),
        "family_truth": family,
        "family_ok": pred_family == family,
        "class_ok": correct,
        "top2_ok": bool(top2 or correct),
        "f_downbeat": _f_measure(perf.downbeats_s, pred["downbeats_s"]),
        "f_beat": _f_measure(perf.beats_s, pred["beats_s"]),
        "confidence": float(pred["confidence"]),
        "seconds": float(pred.get("seconds", np.nan)),
    }
    if perf.hypermeasure_bars is not None:
        true_period = perf.hypermeasure_bars * perf.bar_s
        hp = pred.get("hyper_period_s")
        out["hyper_ok"] = bool(hp is not None and abs(hp - true_period) <= 0.05 * true_period)
    return out


def aggregate(rows: list[dict]) -> "OrderedDict[str, float]":
    """Readable metric names to values, for one detector on one set."""
    out: OrderedDict[str, float] = OrderedDict()
    n = len(rows)
    out["pieces"] = n
    if n == 0:
        return out
    mean = lambda key, rs=rows: float(np.mean([r[key] for r in rs])) if rs else float("nan")  # noqa: E731
    out["bar length correct"] = mean("bar_ok")
    dt = [r for r in rows if r["family_truth"] in ("duple", "triple")]
    out["duple/triple family correct"] = mean("family_ok", dt)
    out["metre class correct"] = mean("class_ok")
    classes = sorted({r["truth"] for r in rows})
    counts = {c: sum(r["truth"] == c for r in rows) for c in classes}
    recalls = {c: mean("class_ok", [r for r in rows if r["truth"] == c]) for c in classes}
    # Classes with a handful of pieces (Essen has 1-5 tunes in 9/8, 5/4, 7/8)
    # would make the macro average a coin toss; they are listed, not averaged.
    out["macro class recall"] = float(np.mean([v for c, v in recalls.items() if counts[c] >= MIN_CLASS_SIZE] or [np.nan]))
    out["top-2 metre"] = mean("top2_ok")
    out["downbeat F"] = mean("f_downbeat")
    out["beat F"] = mean("f_beat")
    out["Brier score"] = float(np.mean([(r["confidence"] - float(r["class_ok"])) ** 2 for r in rows]))
    hyp = [r for r in rows if "hyper_ok" in r]
    if hyp:
        out["hypermeasure correct"] = mean("hyper_ok", hyp)
    for c in classes:
        out[f"recall {c} (n={counts[c]})"] = recalls[c]
    return out


def confusion(rows: list[dict]) -> tuple[list[str], list[str], np.ndarray]:
    """Counts of (true class, predicted time signature)."""
    truths = sorted({r["truth"] for r in rows}, key=lambda c: METRES[c][2] if c in METRES else 99)
    preds = [p for p, _ in Counter(r["predicted"] for r in rows).most_common()]
    table = np.zeros((len(truths), len(preds)), dtype=int)
    for r in rows:
        table[truths.index(r["truth"]), preds.index(r["predicted"])] += 1
    return truths, preds, table
