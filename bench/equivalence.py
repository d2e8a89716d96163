"""Equivalence of two versions of metertop: the full output on a fixed sample, recorded and compared.

Usage::

    PYTHONPATH=<tree A> python bench/equivalence.py record bench/out/equiv-a.json
    PYTHONPATH=<tree B> python bench/equivalence.py record bench/out/equiv-b.json
    python bench/equivalence.py compare bench/out/equiv-a.json bench/out/equiv-b.json

``record`` analyses a fixed sample and stores, per piece, the JSON output
(``MetreResult.to_dict()``, which carries the chosen reading's features as
``score_terms``) and every scored candidate of the metric tree (shape,
downbeat position, score) and every wrapped cycle of it (length, peaks,
relative persistences), with the CPU time (``time.process_time``) each
analysis took. The sample, with ``--tunes 300 --grooves 50`` (the defaults):

- Essen *training* tunes (bench/split.md), every other one rendered deadpan
  and the rest played (drift, jitter, velocity accents; bench/render.py);
- drum grooves of every metre of bench/grooves.py, from seed 5151;
- every file in ``demo_rhythms/`` (score files through
  :func:`metertop.scores.analyse_score`).

``compare`` says, piece by piece, whether the readings (time signatures,
beats, groupings, chosen and alternatives, segments) are identical and how
far the floats moved (largest relative difference), and prints the CPU
time per piece of both records side by side. It exits with 1 when any
reading differs or any float moves by more than ``--rtol``.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

SAMPLE_SEED = 3131
GROOVE_SEED = 5151


def _plain(value):
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    return value


def _candidates(tree) -> list:
    return [[c.time_signature, str(c.beat), str(c.bar), c.division, list(c.grouping) if c.grouping else None,
             float(c.downbeat_pulses), float(c.score)] for c in tree.candidates]


def _cycles(tree) -> list:
    """The wrapped cycle lengths, each with its merge tree's peaks and relative persistences."""
    return [[str(k), tree.cycles[k].diagram.peaks.tolist(), tree.cycles[k].relative_persistence.tolist()]
            for k in sorted(tree.cycles)]


def sample(n_tunes: int, n_grooves: int) -> list[tuple[str, object]]:
    """The pieces, as (id, Performance or demo path)."""
    from essen import load_corpus, split_of
    from grooves import make_grooves
    from render import render

    tunes = [t for t in load_corpus(progress=sys.stderr.isatty()) if split_of(t) == "train"]
    rng = np.random.default_rng(SAMPLE_SEED)
    chosen = np.sort(rng.choice(len(tunes), size=min(n_tunes, len(tunes)), replace=False))
    out: list[tuple[str, object]] = []
    for k, i in enumerate(chosen):
        kind = "deadpan" if k % 2 == 0 else "played"
        out.append((f"{tunes[i].tune_id}:{kind}", render(tunes[i], kind, seed=int(i))))
    for perf in make_grooves(n_grooves, GROOVE_SEED):
        out.append((perf.piece_id, perf))
    for path in sorted((ROOT / "demo_rhythms").iterdir()):
        if path.suffix in (".mid", ".csv", ".abc", ".musicxml"):
            out.append((f"demo/{path.name}", path))
    return out


def analyse_piece(item) -> tuple[dict, float]:
    """The record of one piece, and the CPU time of its analysis alone."""
    from metertop.errors import InputError
    from metertop.pipeline import analyse_detailed
    from metertop.scores import analyse_score, is_score_path

    c0 = time.process_time()
    try:
        if isinstance(item, Path) and is_score_path(item):
            analyses = analyse_score(item)
            cpu = time.process_time() - c0
            record = {"tunes": [{"result": _plain(a.result.to_dict()), "candidates": _candidates(a.analysis.tree),
                                 "cycles": _cycles(a.analysis.tree)} for a in analyses]}
        else:
            a = analyse_detailed(str(item) if isinstance(item, Path) else item.note_table())
            cpu = time.process_time() - c0
            record = {"result": _plain(a.result.to_dict()), "candidates": _candidates(a.tree), "cycles": _cycles(a.tree)}
    except InputError as exc:
        cpu = time.process_time() - c0
        record = {"error": str(exc)}
    return record, cpu


def record(path: Path, n_tunes: int, n_grooves: int) -> None:
    import metertop

    pieces = sample(n_tunes, n_grooves)
    analyse_piece(pieces[0][1])  # warm-up: imports and caches
    out = {"metertop": str(Path(metertop.__file__).resolve().parent), "pieces": {}}
    t0 = time.perf_counter()
    for k, (pid, item) in enumerate(pieces):
        rec, cpu = analyse_piece(item)
        rec["cpu_s"] = cpu
        out["pieces"][pid] = rec
        if sys.stderr.isatty():
            print(f"\r{k + 1}/{len(pieces)}", end="", file=sys.stderr)
    total_cpu = sum(r["cpu_s"] for r in out["pieces"].values())
    print(f"\n{len(pieces)} pieces, {total_cpu:.1f} s CPU, {time.perf_counter() - t0:.1f} s wall ({out['metertop']})", file=sys.stderr)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(out))


# ---- comparison ----------------------------------------------------------------------

READING_KEYS = {"time_signature", "beats_per_bar", "beat_division", "grouping", "rank", "name", "error", "n_events"}


def _walk(a, b, where: str, diffs: list, reading: list) -> float:
    """Largest relative float difference between two JSON values; structural and reading differences are listed."""
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            diffs.append(f"{where}: keys {sorted(set(a) ^ set(b))}")
            reading.append(where)
        worst = 0.0
        for k in sorted(set(a) & set(b)):
            if k == "cpu_s" or k == "metertop_version":
                continue
            worst = max(worst, _walk(a[k], b[k], f"{where}.{k}", diffs, reading))
        return worst
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            diffs.append(f"{where}: length {len(a)} != {len(b)}")
            reading.append(where)
            return math.inf
        return max([_walk(x, y, f"{where}[{i}]", diffs, reading) for i, (x, y) in enumerate(zip(a, b))], default=0.0)
    if isinstance(a, float) or isinstance(b, float):
        if not isinstance(a, (int, float)) or not isinstance(b, (int, float)) or isinstance(a, bool) or isinstance(b, bool):
            diffs.append(f"{where}: {a!r} != {b!r}")
            return math.inf
        if a == b or (math.isnan(a) and math.isnan(b)):
            return 0.0
        return abs(a - b) / max(abs(a), abs(b), 1e-12)
    if a != b:
        diffs.append(f"{where}: {a!r} != {b!r}")
        reading.append(where)
        return math.inf
    return 0.0


def compare(path_a: Path, path_b: Path, rtol: float) -> int:
    a, b = json.loads(path_a.read_text()), json.loads(path_b.read_text())
    pa, pb = a["pieces"], b["pieces"]
    if set(pa) != set(pb):
        print(f"different samples: {len(set(pa) ^ set(pb))} pieces in one record only")
        return 1
    bad, worst_all, cpu_a, cpu_b = 0, 0.0, [], []
    for pid in pa:
        diffs, reading = [], []
        worst = _walk(pa[pid], pb[pid], pid, diffs, reading)
        worst_all = max(worst_all, worst)
        cpu_a.append(pa[pid]["cpu_s"])
        cpu_b.append(pb[pid]["cpu_s"])
        if reading or worst > rtol:
            bad += 1
            print(f"{pid}: largest relative difference {worst:.3g}; {len(reading)} reading differences")
            for line in diffs[:8]:
                print("   ", line)
    n = len(pa)
    print(f"A: {a['metertop']}\nB: {b['metertop']}")
    print(f"{n} pieces; {bad} differ (readings, or floats beyond rtol {rtol:g}); largest relative float difference {worst_all:.3g}")
    ca, cb = np.array(cpu_a), np.array(cpu_b)
    print(f"CPU per piece: A mean {ca.mean() * 1000:.0f} ms (median {np.median(ca) * 1000:.0f}), "
          f"B mean {cb.mean() * 1000:.0f} ms (median {np.median(cb) * 1000:.0f}); A/B {ca.sum() / cb.sum():.2f}x")
    return 1 if bad else 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="cmd", required=True)
    rec = sub.add_parser("record")
    rec.add_argument("out", type=Path)
    rec.add_argument("--tunes", type=int, default=300)
    rec.add_argument("--grooves", type=int, default=50)
    cmp_ = sub.add_parser("compare")
    cmp_.add_argument("a", type=Path)
    cmp_.add_argument("b", type=Path)
    cmp_.add_argument("--rtol", type=float, default=1e-9)
    args = parser.parse_args(argv)
    if args.cmd == "record":
        record(args.out, args.tunes, args.grooves)
        return 0
    return compare(args.a, args.b, args.rtol)


if __name__ == "__main__":
    sys.exit(main())
