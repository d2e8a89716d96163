"""Benchmark of ``metertop check`` and of the metre-change segments.

Usage::

    python bench/check_bench.py                      # 300 evaluation tunes + 100 grooves; updates docs/benchmarks.md
    python bench/check_bench.py --tunes 1000 --grooves 200
    python bench/check_bench.py --calibrate          # training files only: the log-odds limit for "other" readings

Sets
----
- Essen evaluation tunes (bench/split.md), rendered deadpan and played as in
  ``bench/render.py``; drum grooves from ``bench/grooves.py`` (the benchmark's
  seed).
- For each piece, metertop checks its true notated metre, and every *wrong*
  metre: one of another family or another bar length, among 2/4, 3/4, 4/4,
  5/4, 3/8, 6/8, 9/8, 12/8 and 7/8, leaving out the close relatives of the
  truth (the bar doubled or halved, as 2/4 for 4/4; the same bar grouped
  otherwise, as 6/8 for 3/4), which may rightly be ambiguous
  (:func:`metertop.notation.relation`). Notations that look alike in
  seconds count as one (2/2 as 2/4, 4/2 as 4/4, 3/2 as 3/4, 6/4 as 6/8).
- Metre changes: grooves stitched from sections in two metres of different
  families (A, B, A, eight bars each, on one tatum), with the stitch points
  as truth; and the single-metre pieces above, which must keep one segment.

Figures: a true metre is *accepted* when the verdict is consistent or
ambiguous; a wrong metre is *rejected* when it is inconsistent. With
``--calibrate`` the same is measured on training tunes and on grooves from a
seed the benchmark never uses, over a grid of the ``other`` limit of
:class:`metertop.check.CheckLimits`.
"""

from __future__ import annotations

import argparse
import datetime as dt
import multiprocessing as mp
import os
import re
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from common import Performance  # noqa: E402

ROOT = HERE.parent
SAMPLE_SEED = 20261202  # as bench/run.py
TRAIN_GROOVE_SEED = 777
CHANGE_SEED = 5150
SHAPES = ("2/4", "3/4", "4/4", "5/4", "3/8", "6/8", "9/8", "12/8", "7/8")
SAME_SHAPE = {"2/2": "2/4", "4/2": "4/4", "3/2": "3/4", "6/4": "6/8"}
NAMED_PAIRS = (("4/4", "3/4"), ("6/8", "4/4"), ("7/8", "4/4"), ("3/4", "4/4"), ("2/4", "3/4"))
SECTION = "## Checking a notated metre, and metre changes"
LIMITS_GRID = (0.25, 0.35, 0.5, 0.75, 1.0)  # from the tie limit up
CLOSE_GRID = (4.0, 6.0, 8.0, 12.0, 16.0)  # log-odds: 55 to 9 million times as likely


def wrong_metres(truth: str) -> list[str]:
    """The metres of another family or bar length than ``truth``, close relatives left out.

    >>> wrong_metres("4/4")
    ['3/4', '5/4', '3/8', '6/8', '9/8', '12/8', '7/8']
    """
    from metertop.notation import notated_metre, relation

    t = notated_metre(SAME_SHAPE.get(truth, truth))
    g = t.groupings[0] if t.groupings else None
    return [s for s in SHAPES if relation(notated_metre(s), t.beats_per_bar, t.division, g) == "other"]


def _check_one(perf: Performance) -> dict:
    from metertop.check import check_notated
    from metertop.pipeline import analyse_detailed

    start = time.perf_counter()
    a = analyse_detailed(perf.note_table())
    truth = SAME_SHAPE.get(perf.time_signature, perf.time_signature)
    rows = []
    for given in [truth] + wrong_metres(perf.time_signature):
        try:
            v = check_notated(a, given)
            rows.append((given, v.verdict, v.notated.log_odds, v.relation))
        except Exception as exc:  # a metre with no reading in range counts as rejected, and is reported
            rows.append((given, "error", float("inf"), type(exc).__name__))
    return {"piece": perf.piece_id, "kind": perf.kind, "truth": truth, "checks": rows,
            "segments": len(a.result.segments), "seconds": time.perf_counter() - start}


def _change_one(item) -> dict:
    perf, starts, bars = item
    from metertop.pipeline import analyse

    r = analyse(perf.note_table())
    found = np.array([s.start_s for s in r.segments[1:]])
    ok = len(found) == len(starts) and bool(np.all(np.abs(found - starts) < bars))
    return {"piece": perf.piece_id, "truth": perf.time_signature, "found": [s.time_signature for s in r.segments],
            "boundaries_ok": ok, "count_ok": len(found) == len(starts),
            "errors_s": (found - starts).tolist() if len(found) == len(starts) else None}


def _stitch(sections: list[Performance]) -> tuple[Performance, np.ndarray, np.ndarray]:
    """Sections played one after another: each starts on the previous one's closing downbeat, without its pickup."""
    on, du, pi, ve, downs, beats, starts, bars = [], [], [], [], [], [], [], []
    at = float(sections[0].downbeats_s[0])
    for k, sec in enumerate(sections):
        first, last = float(sec.downbeats_s[0]), float(sec.downbeats_s[-1])
        shift = at - first
        keep = (sec.onsets_s >= first - 0.05) & (sec.onsets_s < last - 0.05 if k < len(sections) - 1 else np.ones(len(sec.onsets_s), bool))
        on.append(sec.onsets_s[keep] + shift), du.append(sec.durations_s[keep]), pi.append(sec.pitches[keep]), ve.append(sec.velocities[keep])
        downs.append(sec.downbeats_s[:-1] + shift), beats.append(sec.beats_s[sec.beats_s < last - 1e-6] + shift)
        if k:
            starts.append(at)
            bars.append(min(sec.bar_s, sections[k - 1].bar_s))
        at = last + shift
    names = "+".join(s.time_signature for s in sections)
    perf = Performance(piece_id=f"change-{names}", kind="change", time_signature=names, onsets_s=np.concatenate(on),
                       durations_s=np.concatenate(du), pitches=np.concatenate(pi), velocities=np.concatenate(ve),
                       is_drum=np.ones(sum(len(o) for o in on), bool), downbeats_s=np.concatenate(downs), beats_s=np.concatenate(beats),
                       bar_s=float(sections[0].bar_s), beat_s=float(sections[0].beat_s))
    return perf, np.asarray(starts), np.asarray(bars)


def change_pieces(n: int, seed: int) -> list[tuple[Performance, np.ndarray, np.ndarray]]:
    """``n`` grooves in three sections A, B, A of eight bars, A and B of different families, on one tatum."""
    from grooves import make_groove

    pairs = [("4/4", "3/4"), ("3/4", "4/4"), ("4/4", "6/8"), ("6/8", "4/4"), ("3/4", "6/8"), ("4/4", "7/8"), ("2/4", "3/4"),
             ("12/8", "9/8")]
    out = []
    for i in range(n):
        rng = np.random.default_rng([seed, i])
        a, b = pairs[i % len(pairs)]
        eighth_s = 60.0 / rng.uniform(90.0, 130.0) / 2
        secs = []
        for ts in (a, b, a):
            beat_eighths = 3 if ts in ("6/8", "9/8", "12/8") else 2
            secs.append(make_groove(ts, rng, bpm=60.0 / (eighth_s * beat_eighths), phrase_bars=4, n_bars=8))
        out.append(_stitch(secs))
    return out


def build(n_tunes: int, n_grooves: int, side: str, groove_seed: int) -> list[Performance]:
    from essen import load_corpus, split_of
    from grooves import make_grooves
    from render import render

    side_tunes = [t for t in load_corpus(progress=False) if split_of(t) == side]
    chosen = np.sort(np.random.default_rng(SAMPLE_SEED).choice(len(side_tunes), size=min(n_tunes, len(side_tunes)), replace=False))
    perfs = [render(side_tunes[k], kind, seed=i + (10_000 if kind == "played" else 0))
             for i, k in enumerate(chosen) for kind in ("deadpan", "played")]
    return perfs + make_grooves(n_grooves, seed=groove_seed)


def _pool_map(func, items, jobs: int, label: str) -> list:
    out = []
    start = time.time()
    with mp.get_context("fork").Pool(jobs) as pool:
        for k, row in enumerate(pool.imap_unordered(func, items, chunksize=2), 1):
            out.append(row)
            if sys.stderr.isatty() and (k % 20 == 0 or k == len(items)):
                rate = k / (time.time() - start)
                print(f"\r  {label}: {k}/{len(items)}, ETA {(len(items) - k) / rate:.0f} s", end="", file=sys.stderr, flush=True)
    if sys.stderr.isatty():
        print(file=sys.stderr)
    return out


def _decide(log_odds: float, rel: str, limits) -> str:
    from metertop.check import _decide as decide

    return "inconsistent" if not np.isfinite(log_odds) else decide(log_odds, rel, limits)


def figures(rows: list[dict], limits=None) -> dict:
    """Acceptance of true metres and rejection of wrong ones, per set (verdicts recomputed when ``limits`` is given)."""
    out = {}
    for kind in ("deadpan", "played", "groove"):
        sel = [r for r in rows if r["kind"] == kind]
        if not sel:
            continue
        true_v, wrong_v, pairs = [], [], {}
        for r in sel:
            for given, verdict, lo, rel in r["checks"]:
                v = verdict if limits is None else _decide(lo, rel, limits)
                if given == r["truth"]:
                    true_v.append(v)
                else:
                    wrong_v.append(v)
                    pairs.setdefault((r["truth"], given), []).append(v)
        tc = Counter(true_v)
        out[kind] = {
            "pieces": len(sel),
            "true accepted": (tc["consistent"] + tc["ambiguous"]) / len(true_v),
            "true consistent": tc["consistent"] / len(true_v),
            "true ambiguous": tc["ambiguous"] / len(true_v),
            "wrong checks": len(wrong_v),
            "wrong rejected": float(np.mean([v in ("inconsistent", "error") for v in wrong_v])),
            "pairs": {f"{g} given for {t}": (float(np.mean([v in ("inconsistent", "error") for v in vs])), len(vs))
                      for (t, g), vs in pairs.items() if (t, g) in NAMED_PAIRS},
            "one segment": float(np.mean([r["segments"] == 1 for r in sel])),
        }
    return out


def markdown(fig: dict, changes: list[dict], info: str) -> str:
    lines = [SECTION, "", info, "",
             "| set | pieces | true metre accepted | of which consistent | wrong metre rejected (checks) | one segment |",
             "|---|---|---|---|---|---|"]
    for kind, f in fig.items():
        lines.append(f"| {kind} | {f['pieces']} | {f['true accepted']:.3f} | {f['true consistent']:.3f} | "
                     f"{f['wrong rejected']:.3f} ({f['wrong checks']}) | {f['one segment']:.3f} |")
    lines += ["", "Wrong metres the issue names, rejected as inconsistent (share, checks):", "",
              "| given for | " + " | ".join(fig) + " |", "|---|" + "---|" * len(fig)]
    names = sorted({p for f in fig.values() for p in f["pairs"]})
    for name in names:
        cells = [f"{fig[k]['pairs'][name][0]:.3f} ({fig[k]['pairs'][name][1]})" if name in fig[k]["pairs"] else "-" for k in fig]
        lines.append(f"| {name} | " + " | ".join(cells) + " |")
    if changes:
        ok = np.mean([c["boundaries_ok"] for c in changes])
        count = np.mean([c["count_ok"] for c in changes])
        lines += ["", f"Metre changes: {len(changes)} grooves stitched from three eight-bar sections (A, B, A; A and B of different "
                      f"families, one tatum). Right number of segments: {count:.3f}; every boundary within one bar of the truth: {ok:.3f}."]
    return "\n".join(lines) + "\n"


def update_section(path: Path, text: str, heading: str = SECTION) -> None:
    """Replace a benchmark's section of ``path`` (from its ``heading`` to the next ``## ``), or append it."""
    old = path.read_text() if path.exists() else "# Benchmarks\n"
    pattern = re.compile(re.escape(heading) + r".*?(?=^## |\Z)", re.S | re.M)
    new = pattern.sub(lambda _: text + "\n", old) if pattern.search(old) else old.rstrip("\n") + "\n\n" + text
    path.write_text(new)


def run_section(n_tunes: int = 300, n_grooves: int = 100, n_changes: int = 40, jobs: int | None = None) -> tuple[str, dict]:
    """The section for docs/benchmarks.md (bench/run.py calls this), and the figures."""
    jobs = jobs or os.cpu_count() or 1
    start = time.time()
    perfs = build(n_tunes, n_grooves, "eval", SAMPLE_SEED)
    rows = _pool_map(_check_one, perfs, jobs, "check")
    changes = _pool_map(_change_one, change_pieces(n_changes, CHANGE_SEED), jobs, "changes") if n_changes else []
    fig = figures(rows)
    info = (f"Measured {dt.date.today().isoformat()} with `python bench/check_bench.py --tunes {n_tunes} --grooves {n_grooves} "
            f"--changes {n_changes}` in {(time.time() - start) / 60:.1f} minutes: {n_tunes} Essen evaluation tunes, deadpan and "
            f"played, and {n_grooves} grooves. Each piece is checked against its notated metre and against every metre of another "
            f"family or bar length (close relatives such as 2/4 for 4/4 or 6/8 for 3/4 left out; they may rightly be ambiguous). "
            f"A true metre is accepted when the verdict is consistent or ambiguous; a wrong one is rejected when it is inconsistent. "
            f"The verdict limits were set on training files (`--calibrate`). Code: `bench/check_bench.py`.")
    return markdown(fig, changes, info), {"check": fig, "changes": changes}


def calibrate(n_tunes: int, n_grooves: int, jobs: int) -> None:
    """Acceptance and rejection on training data over a grid of the ``close`` and ``other`` limits."""
    from dataclasses import replace

    from metertop.check import LIMITS

    perfs = build(n_tunes, n_grooves, "train", TRAIN_GROOVE_SEED)
    rows = _pool_map(_check_one, perfs, jobs, "calibrate")
    print(f"training files: {n_tunes} tunes (deadpan and played), {n_grooves} grooves (seed {TRAIN_GROOVE_SEED})")
    best = None
    for close in CLOSE_GRID:
        for other in LIMITS_GRID:
            limits = replace(LIMITS, close=close, other=other)
            fig = figures(rows, limits)
            worst = min(min(f["true accepted"], f["wrong rejected"]) for f in fig.values())
            print(f"close={close:<5} other={other:<5}" + "  ".join(
                f"{k}: accept {f['true accepted']:.3f} reject {f['wrong rejected']:.3f}" for k, f in fig.items()) + f"   worst {worst:.3f}")
            # Ties go to the smaller limits (the grid's order): no more leeway than the data asks for.
            if best is None or worst > best[0] + 1e-12:
                best = (worst, close, other)
    print(f"chosen: close = {best[1]}, other = {best[2]} (the largest worst case of acceptance and rejection over the sets)")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tunes", type=int, default=300)
    parser.add_argument("--grooves", type=int, default=100)
    parser.add_argument("--changes", type=int, default=40)
    parser.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--calibrate", action="store_true", help="measure on training files over a grid of limits instead")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "benchmarks.md")
    args = parser.parse_args()
    if args.calibrate:
        calibrate(args.tunes, args.grooves, args.jobs)
        return 0
    text, fig = run_section(args.tunes, args.grooves, args.changes, args.jobs)
    update_section(args.out, text)
    print(text)
    print(f"updated {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
