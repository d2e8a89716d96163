"""Fit the reading model on the training side of the development corpus.

Usage::

    python bench/train.py            # fit, write metertop/data/reading_model.json
    python bench/train.py --dry-run  # fit and print, write nothing
    python bench/train.py --model-out bench/models/candidate.json   # fit without shipping

Data: training-file Essen tunes (bench/split.md), rendered deadpan and
played (bench/render.py), and drum grooves from a seed the evaluation never
uses. No evaluation file is read.

For every piece, metertop's own pipeline measures every candidate reading
(the features of :mod:`metertop.model`). A candidate is *right* when its
metre class is right (bar within 5%, family, division) and its downbeats
fall on the true downbeats (F-measure at +-70 ms of at least 0.5). The model
is a conditional logit: it maximises, over the pieces, the log of the total
probability of the right candidates (folk tunes and grooves weighing half
each), with a small L2 penalty; the
temperature is then 1. Pieces where no candidate is right (the pulse was
lost) teach nothing and are counted.

The same fit on the persistence features alone
(``metertop.model.PERSISTENCE_FEATURES``) is written to
bench/models/persistence_only.json for the ablation in bench/run.py.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import multiprocessing as mp
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from common import Performance  # noqa: E402
from metrics import reading_matches  # noqa: E402

ROOT = HERE.parent
CACHE = HERE / "cache"
MODEL_PATH = ROOT / "metertop" / "data" / "reading_model.json"
ABLATION_PATH = HERE / "models" / "persistence_only.json"
TRAIN_SEED = 4242  # tune sample and renderings; grooves use TRAIN_GROOVE_SEED
TRAIN_GROOVE_SEED = 777  # the evaluation uses bench/run.py's SAMPLE_SEED
L2 = 1e-2


def _candidate_rows(perf: Performance):
    """Features of every candidate of one piece and which are right; None if the analysis fails."""
    import mir_eval

    from metertop import analyse_detailed
    from metertop.errors import MetertopError
    from metertop.model import FEATURES
    from metertop.pipeline import _grid_times

    try:
        a = analyse_detailed(perf.note_table())
    except MetertopError:
        return None
    pulse_s = a.pulse.median_period_s
    t0, t1 = float(a.times_s[0]), float(a.times_s[-1])
    X, right = [], []
    for c in a.tree.candidates:
        bar = float(c.bar)
        reading = {"beats_per_bar": c.beats_per_bar, "beat_division": c.division, "grouping": c.grouping, "bar_s": bar * pulse_s}
        ok = reading_matches(reading, perf)
        if ok:
            # The candidate's downbeats, laid out as metertop lays out its answer's.
            downbeats = _grid_times(a.pulse, c.downbeat_pulses, np.array([0.0]), bar, t0, t1, 0.05)
            ok = len(downbeats) > 0 and mir_eval.onset.f_measure(np.asarray(perf.downbeats_s), downbeats, window=0.07)[0] >= 0.5
        X.append([c.terms.get(f, 0.0) for f in FEATURES])
        right.append(bool(ok))
    return np.asarray(X, float), np.asarray(right, bool)


def collect(n_tunes: int, n_grooves: int, jobs: int, progress: bool) -> tuple[list, dict]:
    from essen import load_corpus, split_of
    from grooves import make_grooves
    from render import render

    tunes = [t for t in load_corpus(progress=progress) if split_of(t) == "train"]
    rng = np.random.default_rng(TRAIN_SEED)
    if n_tunes < len(tunes):
        tunes = [tunes[i] for i in np.sort(rng.choice(len(tunes), n_tunes, replace=False))]
    perfs = []
    for i, tune in enumerate(tunes):
        perfs.append(render(tune, "deadpan", seed=TRAIN_SEED + i))
        perfs.append(render(tune, "played", seed=TRAIN_SEED + 50_000 + i))
    perfs += make_grooves(n_grooves, seed=TRAIN_GROOVE_SEED)
    start = time.time()
    data = []
    with mp.get_context("fork").Pool(jobs) as pool:
        for k, rows in enumerate(pool.imap(_candidate_rows, perfs, chunksize=4), 1):
            data.append(rows)
            if progress and (k % 100 == 0 or k == len(perfs)):
                print(f"\r  {k}/{len(perfs)} pieces, {k / (time.time() - start):.1f}/s", end="", file=sys.stderr, flush=True)
    if progress:
        print(file=sys.stderr)
    info = {"train tunes": len(tunes), "grooves": n_grooves, "pieces": len(perfs),
            "files": sorted({t.source_file for t in tunes})}
    return data, info


def _code_hash() -> str:
    """Hash of the measuring code: cached features are reused only while it is unchanged."""
    import hashlib

    h = hashlib.sha1()
    for name in ("accents", "events", "persistence", "pipeline", "scan", "tempo", "tree", "model"):
        h.update((ROOT / "metertop" / f"{name}.py").read_bytes())
    for name in ("render", "grooves", "essen", "common", "metrics"):
        h.update((HERE / f"{name}.py").read_bytes())
    return h.hexdigest()[:12]


def collect_cached(n_tunes: int, n_grooves: int, jobs: int, progress: bool) -> tuple[list, dict]:
    """:func:`collect`, cached in bench/cache/ by its arguments and the code hash."""
    import pickle

    path = CACHE / f"train-{n_tunes}-{n_grooves}-{_code_hash()}.pkl"
    if path.exists():
        with open(path, "rb") as fh:
            return pickle.load(fh)
    result = collect(n_tunes, n_grooves, jobs, progress)
    CACHE.mkdir(parents=True, exist_ok=True)
    with open(path, "wb") as fh:
        pickle.dump(result, fh)
    return result


def evaluate_weights(data: list, sources: list[str], w: np.ndarray, temperature: float) -> dict:
    """Log-loss and top-1 of given weights (over all features) on the collected pieces, by source."""
    out = {}
    for src in sorted(set(sources)):
        pieces = [d for d, s2 in zip(data, sources) if s2 == src and d is not None and d[1].any()]
        losses, top1 = [], []
        for X, r in pieces:
            z = (X @ w) / temperature
            z -= z.max()
            p = np.exp(z)
            p /= p.sum()
            losses.append(-np.log(p[r].sum() + 1e-300))
            top1.append(r[np.argmax(z)])
        out[f"{src}: mean log-loss"] = float(np.mean(losses))
        out[f"{src}: train top-1 right"] = float(np.mean(top1))
    return out


def _sources(data: list, info: dict) -> list[str]:
    """``folk`` or ``groove`` for each collected piece (folk pieces come first)."""
    n_folk = 2 * info["train tunes"]
    return ["folk" if i < n_folk else "groove" for i in range(len(data))]


def fit(data: list, sources: list[str], features: list[str], all_features: list[str], l2: float = L2) -> tuple[np.ndarray, dict]:
    """Conditional-logit fit; returns the weights over ``features`` and fit statistics.

    Folk tunes and drum grooves each carry half the total weight, so that
    neither kind of user's music dominates the fit by sheer number.
    """
    from scipy.optimize import minimize

    cols = [all_features.index(f) for f in features]
    kept = [(X[:, cols], r, src) for d, src in zip(data, sources) if d is not None for X, r in [d] if r.any()]
    pieces = [(X, r) for X, r, _ in kept]
    counts = {src: sum(1 for *_, s2 in kept if s2 == src) for src in set(sources)}
    weight = np.array([0.5 / counts[src] for *_, src in kept])
    scale = np.std(np.concatenate([X for X, _ in pieces]), axis=0)
    scale[scale == 0] = 1.0

    def nll(w):
        total, grad = 0.0, np.zeros_like(w)
        for (X, r), wt in zip(pieces, weight):
            xs = X / scale
            z = xs @ w
            z -= z.max()
            p = np.exp(z)
            p /= p.sum()
            pr = p[r].sum()
            total -= wt * np.log(pr + 1e-300)
            # d(-log sum_r p)/dw = E_p[x] - E_{p|r}[x]
            grad += wt * (p @ xs - (p[r] @ xs[r]) / pr)
        total += 0.5 * l2 * w @ w
        grad += l2 * w
        return total, grad

    res = minimize(nll, np.zeros(len(features)), jac=True, method="L-BFGS-B")
    w = res.x / scale
    stats = {"pieces used": len(pieces), "weighted log-loss": float(res.fun), "converged": bool(res.success)}
    for src in sorted(counts):
        stats[f"train top-1 right, {src}"] = float(np.mean([r[np.argmax(X @ w)] for X, r, s2 in kept if s2 == src]))
    return w, stats


def main() -> int:
    from metertop.model import FEATURES, PERSISTENCE_FEATURES, ReadingModel

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tunes", type=int, default=1500, help="training tunes (each rendered twice)")
    parser.add_argument("--grooves", type=int, default=400)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--dry-run", action="store_true")
    parser.add_argument("--model-out", type=Path, default=MODEL_PATH,
                        help="where to write the fitted model (default: the shipped metertop/data/reading_model.json)")
    args = parser.parse_args()
    progress = sys.stderr.isatty()
    data, info = collect_cached(args.tunes, args.grooves, args.jobs, progress)
    lost = sum(1 for d in data if d is None or not d[1].any())
    stamp = dt.date.today().isoformat()
    sources = _sources(data, info)
    w, stats = fit(data, sources, list(FEATURES), list(FEATURES))
    model = ReadingModel(weights={f: round(float(v), 5) for f, v in zip(FEATURES, w)}, temperature=1.0,
                         fitted_on=f"bench/train.py {stamp}: {info['train tunes']} Essen training tunes (deadpan and played), "
                                   f"{info['grooves']} grooves (seed {TRAIN_GROOVE_SEED}); {stats['pieces used']} pieces used")
    wa, stats_a = fit(data, sources, list(PERSISTENCE_FEATURES), list(FEATURES))
    ablation = ReadingModel(weights={f: round(float(v), 5) for f, v in zip(PERSISTENCE_FEATURES, wa)}, temperature=1.0,
                            fitted_on=f"bench/train.py {stamp}: persistence features only")
    hand = ReadingModel()
    print(json.dumps({"info": {k: v for k, v in info.items() if k != "files"}, "pieces without a right candidate": lost,
                      "hand-set weights": evaluate_weights(data, sources, hand.vector(), hand.temperature),
                      "all features": stats, "persistence only": stats_a}, indent=1))
    print(model.to_json())
    print(ablation.to_json())
    if not args.dry_run:
        args.model_out.write_text(model.to_json() + "\n")
        ABLATION_PATH.parent.mkdir(parents=True, exist_ok=True)
        ABLATION_PATH.write_text(ablation.to_json() + "\n")
        print(f"wrote {args.model_out} and {ABLATION_PATH}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
