"""The development corpus: Essen folksongs, read from the ABC files music21 ships.

Usage::

    python bench/essen.py                    # build or load the cache, print the report
    python bench/essen.py --rebuild          # parse again, ignoring the cache
    python bench/essen.py --write-split bench/split.md
    python bench/essen.py --show essen/altdeu10/28   # ABC text beside the extracted data

Each tune with one notated metre among the classes of ``common.METRES``
becomes a :class:`common.ScoreTune`; every other tune is left out and counted
by reason. The tunes are split into a training and an evaluation side by
source file (``TRAIN_FILES``, ``EVAL_FILES``; see bench/split.md).

Conventions
-----------
- Time is in quarter notes from the first sounding note (``onsets_q[0] == 0``).
- A tied chain of notes is one onset, at the start of the chain, whose
  duration is the sum of the chain. Rests and grace notes give no onset;
  a chord gives one onset with its top pitch. Pitches are MIDI numbers.
- ``downbeats_q`` holds the start of every bar from the first note on, up to
  and including the last bar in which a note starts. A pickup makes
  ``pickup_q = downbeats_q[0] > 0``; a tune that starts on a downbeat has
  ``pickup_q == 0``.
- The bars are music21's measures, built from the ABC barlines. The Essen
  files end each phrase with a line break and leave out a barline that falls
  at a line end (rarely, one inside a line too). music21 splits an overlong
  measure once, at the notated bar (``abcFormat.translate.reBar``); where a
  measure still spans several whole bars, :func:`bar_starts` adds the missing
  bar starts, one every notated bar. The time signatures music21 inserts
  while splitting are ignored: no Essen tune notates a second ``M:`` field.
- An accidental holds to the end of its bar (ABC 2.1). The files carry no
  version line, and music21 reads such files as ABC 1.3, where an accidental
  holds for one note only; but in the collection a note that repeats an
  accidental earlier in its bar never repeats the accidental (2,616 notes
  leave it out), while 136 notes cancel it with an explicit natural or
  another accidental. The files are therefore read as ABC 2.1.
- A tune is kept only when every bar but the first and the last lasts a
  whole number of notated bars and the first lasts at most one bar (a shorter
  first bar is the pickup) or a whole number of them; otherwise it is counted
  as ``irregular bars``. A tune with fewer than two barlines has no reliable
  bars: ``too few barlines``. ``free metre`` is ``M:none`` and the ``FREI``
  prefix; ``other metre`` is a single metre outside ``METRES``.
- The same melody in the same rhythm (:func:`melody_key`) sometimes occurs in
  two files. An evaluation tune whose melody occurs on the training side is
  left out (``duplicate of a training tune``); the training side keeps its
  copy.
- Tunes are numbered from 1 in the order of their ``X:`` fields within a
  file; ``tune_id`` is ``"essen/<file stem>/<index>"``.
- The test files music21 ships beside the collection (``test*.abc``) belong
  to neither side and are not read.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import re
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

from common import METRES, ScoreTune, class_key  # noqa: E402

#: Bump when the extraction changes, so that old caches are rebuilt.
CACHE_VERSION = 5
#: The ABC version the files are read as: from 2.0 on, music21 carries an
#: accidental to the end of its bar, as the Essen files assume (see Conventions).
ABC_VERSION = (2, 1, 0)
DEFAULT_CACHE_DIR = HERE / "cache"

#: Source files whose tunes may be used for anything trained or tuned.
TRAIN_FILES: list[str] = [
    "altdeu10", "ballad10", "ballad20", "ballad50", "ballad70", "ballad80", "boehme10",
    "erk10", "erk30", "fink0", "han2", "irl", "kinder0", "lux", "variant0",
]
#: Source files held out for every reported figure.
EVAL_FILES: list[str] = [
    "altdeu20", "ballad30", "ballad40", "ballad60", "boehme20", "dva0", "erk5",
    "erk20", "folkHaydn", "han1", "lot", "zuccal0",
]
#: Files music21 ships beside the collection for its own tests: not used.
IGNORED_FILES: tuple[str, ...] = ("test0", "test1", "testd", "teste")

#: Reasons for leaving a tune out, in report order.
EXCLUSION_REASONS: tuple[str, ...] = (
    "free metre", "other metre", "metre change", "irregular bars", "too few barlines", "no notes",
    "parse error", "duplicate of a training tune",
)

_FIELD = re.compile(r"^([A-Za-z]):\s*(.*?)\s*$")
_INLINE_METRE = re.compile(r"\[M:\s*([^\]]*)\]")
_EPS = 1e-9


class _Excluded(Exception):
    """A tune left out of the corpus: ``reason`` is one of EXCLUSION_REASONS."""

    def __init__(self, reason: str, detail: str = ""):
        super().__init__(f"{reason}: {detail}" if detail else reason)
        self.reason = reason
        self.detail = detail


# ---- reading the files ---------------------------------------------------------

def essen_dir() -> Path:
    """The folder of the Essen ABC files inside the installed music21 package.

    Returns
    -------
    pathlib.Path
        ``<music21>/corpus/essenFolksong``.
    """
    import music21

    return Path(music21.__file__).resolve().parent / "corpus" / "essenFolksong"


def corpus_files() -> list[str]:
    """Stems of the collection's ABC files, sorted, without the test files.

    Returns
    -------
    list of str
        E.g. ``["altdeu10", "altdeu20", ...]``.
    """
    return sorted(p.stem for p in essen_dir().glob("*.abc") if p.stem not in IGNORED_FILES)


def split_abc_text(text: str) -> list[str]:
    """Cut the text of a multi-tune ABC file into tunes, at each ``X:`` line.

    Parameters
    ----------
    text : str
        The whole file.

    Returns
    -------
    list of str
        One string per tune, each starting with its ``X:`` line; anything
        before the first ``X:`` line is dropped.

    Examples
    --------
    >>> [t.splitlines()[0] for t in split_abc_text("%c\\nX:1\\nK:C\\nC\\n\\nX:2\\nK:G\\nG\\n")]
    ['X:1', 'X:2']
    """
    tunes: list[list[str]] = []
    for line in text.splitlines():
        if line.startswith("X:"):
            tunes.append([])
        if tunes:
            tunes[-1].append(line)
    return ["\n".join(lines).strip() + "\n" for lines in tunes]


def tune_header(tune_text: str) -> tuple[dict[str, str], list[str]]:
    """The header fields of one ABC tune, and every metre field in it.

    Parameters
    ----------
    tune_text : str
        One tune, from its ``X:`` line.

    Returns
    -------
    header : dict
        First value of each header field (``X``, ``T``, ``M``, ...), up to and
        including ``K:``.
    metres : list of str
        Every ``M:`` value in the tune, in order: header, body lines and
        inline ``[M:...]`` fields.

    Examples
    --------
    >>> h, m = tune_header("X:3\\nT:A\\nM:3/4\\nK:C\\nCDE|[M:2/4]CD|\\n")
    >>> h["T"], m
    ('A', ['3/4', '2/4'])
    """
    header: dict[str, str] = {}
    metres: list[str] = []
    in_body = False
    for line in tune_text.splitlines():
        match = _FIELD.match(line)
        if match:
            key, value = match.groups()
            if key == "M":
                metres.append(value)
            if not in_body:
                header.setdefault(key, value)
            if key == "K":
                in_body = True
        elif in_body:
            metres += [m.strip() for m in _INLINE_METRE.findall(line)]
    return header, metres


def classify_metre(metres: list[str]) -> tuple[str | None, str | None]:
    """Decide from a tune's metre fields whether it belongs to the corpus.

    Parameters
    ----------
    metres : list of str
        The ``M:`` values of the tune, as from :func:`tune_header`.

    Returns
    -------
    time_signature : str or None
        The notated metre when it is a single one of ``METRES``.
    reason : str or None
        Otherwise the exclusion reason: ``"free metre"`` (``none``, or the
        ``FREI`` prefix some Essen tunes carry), ``"metre change"`` or
        ``"other metre"``.

    Examples
    --------
    >>> classify_metre(["6/8"]), classify_metre(["none"]), classify_metre(["4/1"])
    (('6/8', None), (None, 'free metre'), (None, 'other metre'))
    """
    distinct = list(dict.fromkeys(m.replace(" ", "") for m in metres))
    if not distinct:
        return None, "free metre"
    if len(distinct) > 1:
        return None, "metre change"
    metre = distinct[0]
    if metre.lower() in ("none", "") or metre.upper().startswith("FREI"):
        return None, "free metre"
    if metre in METRES:
        return metre, None
    return None, "other metre"


# ---- one tune ------------------------------------------------------------------

def _score_from_text(tune_text: str):
    """Parse one ABC tune with music21's ABC reader; returns its first Part."""
    from music21 import abcFormat
    from music21.abcFormat import translate

    handler = abcFormat.ABCHandler(abcVersion=ABC_VERSION)
    handler.process(tune_text)
    score = translate.abcToStreamScore(handler)
    parts = score.parts
    if len(parts) != 1:
        raise _Excluded("parse error", f"{len(parts)} parts")
    return parts[0]


def _notes_of(part) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Onsets, durations and pitches of a part, ties merged, grace notes and rests left out."""
    onsets: list[float] = []
    durations: list[float] = []
    pitches: list[int] = []
    open_ties: dict[int, int] = {}  # MIDI pitch -> index of the note its tie chain started on
    for el in part.flatten().notes:
        if el.duration.isGrace or el.quarterLength <= 0:
            continue
        pitch = max(p.midi for p in el.pitches)  # a chord counts once, by its top pitch
        tie = el.tie.type if el.tie is not None else None
        if tie in ("stop", "continue") and open_ties:
            # The same pitch, else the latest open tie: a few Essen tunes tie
            # across a barline without repeating the accidental, and music21
            # then reads the continuation a semitone off.
            held = pitch if pitch in open_ties else max(open_ties, key=open_ties.get)
            start = open_ties.pop(held)
            durations[start] += float(el.quarterLength)
            if tie == "continue":
                open_ties[held] = start
            continue
        onsets.append(float(el.offset))
        durations.append(float(el.quarterLength))
        pitches.append(pitch)
        if tie in ("start", "continue"):
            open_ties[pitch] = len(onsets) - 1
    return np.asarray(onsets, float), np.asarray(durations, float), np.asarray(pitches, np.int64)


def _bar_lines(part) -> np.ndarray:
    """Offsets of every barline of a part: each measure's start, and the last measure's end."""
    from music21 import stream

    measures = list(part.getElementsByClass(stream.Measure))
    if not measures:
        return np.zeros(0)
    ends = [float(m.offset) + float(m.highestTime) for m in measures]
    return np.unique(np.round([float(m.offset) for m in measures] + [max(ends)], 9))


def bar_starts(bar_lines: np.ndarray, bar_q: float) -> tuple[np.ndarray, int]:
    """The start of every bar, from a tune's barlines and its notated bar length.

    Parameters
    ----------
    bar_lines : numpy.ndarray
        Sorted offsets of the barlines in quarters, from the start of the
        first bar (pickup or full) to the end of the last.
    bar_q : float
        The notated bar, in quarters.

    Returns
    -------
    starts : numpy.ndarray
        Bar starts. A first bar shorter than ``bar_q`` is a pickup and gives
        none. Where the barlines enclose a whole number of bars (the Essen
        files leave out a barline that falls at a line end), bar starts are
        restored every ``bar_q``; the last bar may end short.
    restored : int
        How many bar starts were restored that way.

    Raises
    ------
    ValueError
        If a bar other than the first and last does not last a whole number
        of notated bars, if the first is longer than one bar without being a
        whole number of them, or if there are fewer than two bars.

    Examples
    --------
    >>> bar_starts(np.array([0.0, 1.0, 4.0, 12.0, 14.0]), 3.0)
    Traceback (most recent call last):
    ...
    ValueError: bar 3 lasts 8 quarters; the notated bar is 3
    >>> starts, restored = bar_starts(np.array([0.0, 1.0, 4.0, 10.0, 12.0]), 3.0)
    >>> starts.tolist(), restored
    ([1.0, 4.0, 7.0, 10.0], 1)
    """
    lines = np.asarray(bar_lines, float)
    lengths = np.diff(lines)
    if len(lengths) < 2:
        raise ValueError("fewer than two bars")
    whole = np.round(lengths / bar_q)
    is_whole = (np.abs(lengths - whole * bar_q) < 1e-6) & (whole >= 1)
    inner_bad = np.flatnonzero(~is_whole[1:-1])
    if len(inner_bad):
        k = inner_bad[0] + 1
        raise ValueError(f"bar {k + 1} lasts {lengths[k]:g} quarters; the notated bar is {bar_q:g}")
    if lengths[0] > bar_q + 1e-6 and not is_whole[0]:
        raise ValueError(f"the first bar lasts {lengths[0]:g} quarters; the notated bar is {bar_q:g}")
    starts = []
    for k, (start, length) in enumerate(zip(lines[:-1], lengths)):
        if k == 0 and length < bar_q - 1e-6:
            continue  # a pickup
        starts += list(start + bar_q * np.arange(np.ceil(length / bar_q - 1e-6)))
    restored = len(starts) - len(lengths) + (lengths[0] < bar_q - 1e-6)
    return np.asarray(starts, float), int(restored)


def tune_record(tune_text: str, source_file: str, index: int) -> dict:
    """Extract one tune into plain data, or raise the reason it is left out.

    Parameters
    ----------
    tune_text : str
        One ABC tune, from its ``X:`` line.
    source_file : str
        Stem of its file, e.g. ``"altdeu10"``.
    index : int
        Its position in the file, from 1.

    Returns
    -------
    dict
        The fields of :class:`common.ScoreTune`, as plain data, and
        ``restored_bars`` (see :func:`bar_starts`).

    Raises
    ------
    _Excluded
        With the reason (one of ``EXCLUSION_REASONS``) and a detail.
    """
    header, metres = tune_header(tune_text)
    time_signature, reason = classify_metre(metres)
    if reason is not None:
        raise _Excluded(reason, "|".join(metres) or "no M: field")
    bar_q = METRES[time_signature][2]

    try:
        part = _score_from_text(tune_text)
        onsets, durations, pitches = _notes_of(part)
        lines = _bar_lines(part)
    except _Excluded:
        raise
    except Exception as exc:  # music21 raises many kinds; each is a parse failure here
        raise _Excluded("parse error", f"{type(exc).__name__}: {exc}") from exc

    if len(onsets) == 0:
        raise _Excluded("no notes")
    if len(lines) < 3:
        raise _Excluded("too few barlines")
    try:
        downbeats, restored = bar_starts(lines, bar_q)
    except ValueError as exc:
        raise _Excluded("irregular bars", str(exc)) from exc

    first = onsets[0]
    onsets = onsets - first
    downbeats = downbeats - first
    downbeats = downbeats[(downbeats >= -_EPS) & (downbeats <= onsets[-1] + _EPS)]
    if len(downbeats) == 0:
        raise _Excluded("irregular bars", "no bar starts from the first note on")
    downbeats = np.where(np.abs(downbeats) < _EPS, 0.0, downbeats)
    return {
        "tune_id": f"essen/{source_file}/{index}",
        "source_file": source_file,
        "index": index,
        "title": header.get("T", ""),
        "time_signature": time_signature,
        "onsets_q": onsets,
        "durations_q": durations,
        "pitches": pitches,
        "downbeats_q": downbeats,
        "pickup_q": float(downbeats[0]),
        "restored_bars": restored,
    }


def _work(task: tuple[str, int, str]) -> tuple[dict | None, dict | None]:
    """Pool worker: (file, index, text) -> (record, None) or (None, exclusion)."""
    source_file, index, text = task
    try:
        return tune_record(text, source_file, index), None
    except _Excluded as exc:
        metres = tune_header(text)[1]
        return None, {"tune_id": f"essen/{source_file}/{index}", "metre": "|".join(metres) or "-",
                      "reason": exc.reason, "detail": exc.detail}


# ---- the corpus and its cache ----------------------------------------------------

def _cache_key() -> dict:
    import music21

    return {"cache_version": CACHE_VERSION, "music21": music21.__version__, "files": corpus_files()}


def _cache_path(cache_dir: Path) -> Path:
    import music21

    return Path(cache_dir) / f"essen-v{CACHE_VERSION}-music21-{music21.__version__}.npz"


def _build(jobs: int, progress: bool) -> tuple[list[dict], dict]:
    """Parse every tune of the collection; returns the records and the report."""
    import multiprocessing as mp

    start = time.perf_counter()
    tasks = []
    tunes_per_file: dict[str, int] = {}
    for stem in corpus_files():
        texts = split_abc_text((essen_dir() / f"{stem}.abc").read_text(encoding="utf-8"))
        tunes_per_file[stem] = len(texts)
        tasks += [(stem, i, text) for i, text in enumerate(texts, 1)]

    results = []
    if jobs > 1:
        with mp.get_context("fork").Pool(jobs) as pool:
            for k, result in enumerate(pool.imap_unordered(_work, tasks, chunksize=16), 1):
                results.append(result)
                _progress(progress, k, len(tasks), start)
    else:
        for k, task in enumerate(tasks, 1):
            results.append(_work(task))
            _progress(progress, k, len(tasks), start)
    if progress:
        print(file=sys.stderr)

    order = {stem: n for n, stem in enumerate(corpus_files())}

    def position(result):
        source_file, index = (result[0] or result[1])["tune_id"].split("/")[1:]
        return order[source_file], int(index)

    results.sort(key=position)
    records = [r for r, _ in results if r is not None]
    restored = {r["tune_id"]: n for r in records if (n := r.pop("restored_bars"))}
    excluded = [e for _, e in results if e is not None]
    report = {
        "key": _cache_key(),
        "parse_seconds": round(time.perf_counter() - start, 1),
        "jobs": jobs,
        "tunes_per_file": tunes_per_file,
        "excluded": excluded,
        "restored_bars": restored,
    }
    return records, report


def _progress(show: bool, k: int, n: int, start: float) -> None:
    if show and (k % 50 == 0 or k == n):
        print(f"\r  essen: {k}/{n} tunes parsed, {time.perf_counter() - start:.0f} s",
              end="", file=sys.stderr, flush=True)


def _save(path: Path, records: list[dict], report: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    arrays = {}
    for name in ("onsets_q", "durations_q", "pitches", "downbeats_q"):
        parts = [r[name] for r in records]
        arrays[name] = np.concatenate(parts) if parts else np.zeros(0)
        arrays[name + "_len"] = np.array([len(p) for p in parts], np.int64)
    meta = [{k: r[k] for k in ("tune_id", "source_file", "index", "title", "time_signature", "pickup_q")}
            for r in records]
    arrays["meta_json"] = np.array(json.dumps({"tunes": meta, "report": report}))
    tmp = path.with_name(f"{path.stem}.{os.getpid()}.tmp.npz")
    np.savez_compressed(tmp, **arrays)
    tmp.replace(path)


def _load(path: Path) -> tuple[list[ScoreTune], dict] | None:
    try:
        with np.load(path, allow_pickle=False) as data:
            meta = json.loads(str(data["meta_json"]))
            if meta["report"]["key"] != _cache_key():
                return None
            columns = {}
            for name in ("onsets_q", "durations_q", "pitches", "downbeats_q"):
                bounds = np.concatenate([[0], np.cumsum(data[name + "_len"])])
                flat = data[name]
                columns[name] = [flat[a:b] for a, b in zip(bounds[:-1], bounds[1:])]
    except (OSError, KeyError, ValueError):
        return None
    tunes = [ScoreTune(**m, **{name: columns[name][n] for name in columns})
             for n, m in enumerate(meta["tunes"])]
    return tunes, meta["report"]


def melody_key(tune: ScoreTune) -> str:
    """A fingerprint of what a detector sees of a tune: its onsets and its melodic intervals.

    Two tunes with the same key are the same melody in the same rhythm, in
    any transposition, whatever metre they are notated in.

    Parameters
    ----------
    tune : ScoreTune

    Returns
    -------
    str
        A hex digest.
    """
    text = json.dumps([np.round(tune.onsets_q, 6).tolist(), np.diff(tune.pitches).tolist()])
    return hashlib.sha1(text.encode()).hexdigest()


def _drop_eval_duplicates(tunes: list[ScoreTune]) -> tuple[list[ScoreTune], list[dict]]:
    """Leave out the evaluation tunes whose melody (:func:`melody_key`) is also on the training side."""
    train_keys: dict[str, str] = {}
    for t in tunes:
        if split_of(t) == "train":
            train_keys.setdefault(melody_key(t), t.tune_id)
    kept, dropped = [], []
    for t in tunes:
        twin = train_keys.get(melody_key(t)) if split_of(t) == "eval" else None
        if twin is None:
            kept.append(t)
        else:
            dropped.append({"tune_id": t.tune_id, "metre": t.time_signature,
                            "reason": "duplicate of a training tune", "detail": twin})
    return kept, dropped


def _summarise(tunes: list[ScoreTune], raw: dict, duplicates: list[dict]) -> dict:
    """The corpus report, from the kept tunes and the build record."""
    per_split: dict[str, Counter] = {"train": Counter(), "eval": Counter()}
    per_file: dict[str, Counter] = {f: Counter() for f in raw["tunes_per_file"]}
    for t in tunes:
        per_split[split_of(t)][t.time_signature] += 1
        per_file[t.source_file][t.time_signature] += 1
    excluded = raw["excluded"] + duplicates
    reasons = Counter(e["reason"] for e in excluded)
    metres_left_out = Counter(e["metre"] for e in excluded if e["reason"] in ("other metre", "free metre"))
    by_metre: dict[str, Counter] = {}
    for e in excluded:
        if e["reason"] not in ("other metre", "free metre"):
            by_metre.setdefault(e["reason"], Counter())[e["metre"]] += 1

    def in_order(counts: Counter) -> dict[str, int]:
        return {ts: counts[ts] for ts in METRES if counts[ts]}

    return {
        "music21": raw["key"]["music21"],
        "cache_version": raw["key"]["cache_version"],
        "parse_seconds": raw["parse_seconds"],
        "total_tunes": sum(raw["tunes_per_file"].values()),
        "kept": len(tunes),
        "tunes_per_split": {s: sum(c.values()) for s, c in per_split.items()},
        "classes": {s: in_order(c) for s, c in per_split.items()},
        "excluded": {r: reasons.get(r, 0) for r in EXCLUSION_REASONS},
        "excluded_metres": dict(metres_left_out.most_common()),
        "excluded_by_metre": {r: dict(c.most_common()) for r, c in by_metre.items()},
        "tunes_with_restored_bars": len(raw["restored_bars"]),
        "restored_bars": sum(raw["restored_bars"].values()),
        "files": {f: {"split": _side_of_file(f), "tunes": n, "kept": sum(per_file[f].values()),
                      "classes": in_order(per_file[f])}
                  for f, n in raw["tunes_per_file"].items()},
        "excluded_tunes": excluded,
    }


def load_corpus_with_report(cache_dir: Path = DEFAULT_CACHE_DIR, progress: bool = True,
                            rebuild: bool = False, jobs: int = 2) -> tuple[list[ScoreTune], dict]:
    """The Essen tunes with a single metre of ``METRES``, and the corpus report.

    The first call parses every tune (about three minutes with two
    processes) and stores the result in ``cache_dir``; later calls read the
    cache. The cache is keyed on ``CACHE_VERSION``, the music21 version and
    the list of source files. Evaluation tunes whose melody and rhythm are
    also on the training side (:func:`melody_key`) are left out.

    Parameters
    ----------
    cache_dir : pathlib.Path, optional
        Folder of the cache file; default ``bench/cache``.
    progress : bool, optional
        Show a counter on stderr while parsing.
    rebuild : bool, optional
        Parse again even when a valid cache exists.
    jobs : int, optional
        Worker processes for parsing.

    Returns
    -------
    tunes : list of ScoreTune
        In file order (``corpus_files()``), then tune order.
    report : dict
        ``total_tunes`` (in the collection's files), ``kept``,
        ``tunes_per_split``, ``classes`` (count per notated metre, per
        split), ``excluded`` (count per reason of ``EXCLUSION_REASONS``),
        ``excluded_metres`` (the metres left out, with counts),
        ``excluded_by_metre`` (the other reasons, per notated metre),
        ``tunes_with_restored_bars`` and ``restored_bars`` (see
        :func:`bar_starts`), ``files`` (per source file: split, tunes, kept,
        classes), ``excluded_tunes`` (tune id, metre, reason and detail of
        each tune left out), ``parse_seconds`` (of the build that made the
        cache), ``music21`` and ``cache_version``.
    """
    path = _cache_path(cache_dir)
    loaded = None if rebuild or not path.exists() else _load(path)
    if loaded is None:
        records, raw = _build(jobs, progress)
        _save(path, records, raw)
        loaded = _load(path)
        if loaded is None:
            raise RuntimeError(f"the corpus cache {path} could not be read back")
    tunes, raw = loaded
    tunes, duplicates = _drop_eval_duplicates(tunes)
    return tunes, _summarise(tunes, raw, duplicates)


def load_corpus(cache_dir: Path = DEFAULT_CACHE_DIR, progress: bool = True) -> list[ScoreTune]:
    """The Essen tunes with a single metre of ``METRES``, parsed once and cached.

    Parameters
    ----------
    cache_dir : pathlib.Path, optional
        Folder of the cache file; default ``bench/cache``.
    progress : bool, optional
        Show a counter on stderr while parsing.

    Returns
    -------
    list of ScoreTune
        See :func:`load_corpus_with_report`.
    """
    return load_corpus_with_report(cache_dir, progress)[0]


def corpus_report(cache_dir: Path = DEFAULT_CACHE_DIR, progress: bool = True) -> dict:
    """The counts of the corpus: kept tunes per class and split, left-out tunes per reason.

    Parameters
    ----------
    cache_dir : pathlib.Path, optional
        Folder of the cache file; default ``bench/cache``.
    progress : bool, optional
        Show a counter on stderr if the corpus must be parsed.

    Returns
    -------
    dict
        See :func:`load_corpus_with_report`.
    """
    return load_corpus_with_report(cache_dir, progress)[1]


def _side_of_file(source_file: str) -> str:
    if source_file in TRAIN_FILES:
        return "train"
    if source_file in EVAL_FILES:
        return "eval"
    raise ValueError(f"{source_file} is on neither side of the split")


def split_of(tune: ScoreTune) -> str:
    """The side of the fixed split a tune is on, from its source file.

    Parameters
    ----------
    tune : ScoreTune
        A tune of the corpus.

    Returns
    -------
    str
        ``"train"`` or ``"eval"``.

    Raises
    ------
    ValueError
        For a tune from a file on neither side.
    """
    return _side_of_file(tune.source_file)


# ---- command line ------------------------------------------------------------------

def _exclusion_detail(report: dict, reason: str) -> str:
    """The notated metres behind one exclusion count, e.g. ``"4/1 58, 3/1 34"``."""
    if reason in ("free metre", "other metre"):
        per = {m: c for m, c in report["excluded_metres"].items() if classify_metre([m])[1] == reason}
    else:
        per = report["excluded_by_metre"].get(reason, {})
    return ", ".join(f"{m} {c}" for m, c in per.items())


def format_report(report: dict) -> str:
    """The corpus report as plain text.

    Parameters
    ----------
    report : dict
        From :func:`corpus_report`.

    Returns
    -------
    str
    """
    split = report["tunes_per_split"]
    lines = [
        f"Essen folksongs from music21 {report['music21']} (cache v{report['cache_version']}, "
        f"built in {report['parse_seconds']:.0f} s)",
        f"tunes in {len(report['files'])} files: {report['total_tunes']}; kept {report['kept']}: "
        f"train {split['train']} ({split['train'] / max(report['kept'], 1):.0%}), eval {split['eval']}",
        "",
        f"  {'metre':<6}{'train':>7}{'eval':>7}{'total':>7}",
    ]
    for ts in METRES:
        tr, ev = report["classes"]["train"].get(ts, 0), report["classes"]["eval"].get(ts, 0)
        note = f"  (evaluated as {class_key(ts)})" if class_key(ts) != ts else ""
        lines.append(f"  {ts:<6}{tr:>7}{ev:>7}{tr + ev:>7}{note}")
    lines += ["", "left out:"]
    for reason, n in report["excluded"].items():
        detail = _exclusion_detail(report, reason)
        lines.append(f"  {reason:<29}{n:>5}" + (f"   ({detail})" if detail else ""))
    lines.append(f"bar starts added inside measures that span whole bars: {report['restored_bars']} "
                 f"in {report['tunes_with_restored_bars']} tunes")
    return "\n".join(lines)


def format_split_md(report: dict) -> str:
    """The text of bench/split.md: the files on each side, with their tune counts.

    Parameters
    ----------
    report : dict
        From :func:`corpus_report`.

    Returns
    -------
    str
        Markdown.
    """
    metres = [ts for ts in METRES if any(ts in report["classes"][s] for s in ("train", "eval"))]
    dup = report["excluded"]["duplicate of a training tune"]
    out = [
        "# The fixed split of the Essen development corpus",
        "",
        "Written by `python bench/essen.py --write-split bench/split.md` from",
        f"`TRAIN_FILES` and `EVAL_FILES` in bench/essen.py (music21 {report['music21']}, cache",
        f"v{report['cache_version']}). Anything trained or tuned uses the training files only;",
        "every reported figure is on the evaluation files.",
        "",
        "## How the split was chosen",
        "",
        "By hand, once, from the tune counts per file and metre below alone; no",
        "detector's result on any file was looked at. The rules:",
        "",
        "1. Split by source file, never inside a file: variants of one song (A, B, C",
        "   versions) sit in the same file.",
        "2. Every collection that spans several files has files on both sides:",
        "   altdeu (old German songs), ballad, boehme, erk, han (Chinese).",
        "3. The one-file collections alternate, so that each side mixes regions:",
        "   German (fink0, kinder0 | dva0, zuccal0), Swiss variant0 and Irish irl",
        "   on one side, the songs in Haydn's settings (folkHaydn) on the other, and",
        "   Luxembourg (lux) opposite Lorraine (lot).",
        "4. About 60% of the kept tunes train and 40% evaluate. Every metre class",
        "   the collection has is on the evaluation side, and the rarer classes",
        "   (4/2, 3/2, 6/4, 3/8) fall on both sides in similar proportions. The",
        "   classes with a handful of tunes (9/8, 5/4, 7/8) cannot be balanced;",
        "   12/8 does not occur in the collection.",
        "",
        "The test files music21 ships beside the collection (`test0`, `test1`,",
        "`testd`, `teste`) are on neither side and are not read. The same melody",
        "in the same rhythm sometimes occurs in two files (another printing,",
        f"another region); the {dup} evaluation tunes whose melody and rhythm also",
        "occur on the training side are left out, so that no evaluation tune is",
        "seen in training.",
        "",
        "## Files",
        "",
        "`tunes`: in the file; `kept`: with one metre of the benchmark's classes and",
        "regular bars (after dropping duplicates of training tunes on the evaluation side).",
        "",
    ]
    header = "| side | file | tunes | kept | " + " | ".join(metres) + " |"
    out += [header, "|" + "---|" * (4 + len(metres))]
    for side in ("train", "eval"):
        files = [f for f, v in report["files"].items() if v["split"] == side]
        for f in files:
            v = report["files"][f]
            out.append(f"| {side} | {f} | {v['tunes']} | {v['kept']} | "
                       + " | ".join(str(v["classes"].get(ts, "")) for ts in metres) + " |")
        total = {ts: report["classes"][side].get(ts, 0) for ts in metres}
        n_tunes = sum(report["files"][f]["tunes"] for f in files)
        out.append(f"| **{side}** | {len(files)} files | {n_tunes} | {report['tunes_per_split'][side]} | "
                   + " | ".join(str(total[ts]) for ts in metres) + " |")
    out += ["", f"## Left out (of {report['total_tunes']} tunes in these files)", ""]
    for reason, n in report["excluded"].items():
        detail = _exclusion_detail(report, reason)
        out.append(f"- {reason}: {n}" + (f" ({detail})" if detail else ""))
    out.append("")
    return "\n".join(out)


def show_tune(tune_id: str, tunes: list[ScoreTune]) -> str:
    """One tune's ABC text beside its extracted onsets and bar starts, for checking by eye.

    Parameters
    ----------
    tune_id : str
        E.g. ``"essen/altdeu10/28"``.
    tunes : list of ScoreTune
        The corpus.

    Returns
    -------
    str
    """
    _, stem, index = tune_id.split("/")
    text = split_abc_text((essen_dir() / f"{stem}.abc").read_text(encoding="utf-8"))[int(index) - 1]
    lines = [text.rstrip()]
    match = [t for t in tunes if t.tune_id == tune_id]
    if not match:
        return "\n".join(lines + ["(not in the corpus)"])
    t = match[0]
    lines += [f"{t.tune_id}  {t.time_signature}  bar {t.bar_q:g} q  pickup {t.pickup_q:g} q  "
              f"{len(t.onsets_q)} notes  split {split_of(t)}",
              "onsets_q    " + " ".join(f"{x:g}" for x in t.onsets_q),
              "durations_q " + " ".join(f"{x:g}" for x in t.durations_q),
              "pitches     " + " ".join(str(p) for p in t.pitches),
              "downbeats_q " + " ".join(f"{x:g}" for x in t.downbeats_q)]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """Build or load the corpus cache and print the report."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rebuild", action="store_true", help="parse again, ignoring the cache")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes for parsing (default 2)")
    parser.add_argument("--cache-dir", type=Path, default=DEFAULT_CACHE_DIR, help="default bench/cache")
    parser.add_argument("--json", action="store_true", help="print the whole report as JSON")
    parser.add_argument("--write-split", type=Path, metavar="PATH", help="write the split table (bench/split.md)")
    parser.add_argument("--show", nargs="+", metavar="TUNE_ID", default=[],
                        help="print tunes' ABC text with their onsets and bar starts, e.g. essen/altdeu10/28")
    args = parser.parse_args(argv)
    tunes, report = load_corpus_with_report(args.cache_dir, progress=True, rebuild=args.rebuild, jobs=args.jobs)
    if args.show:
        print("\n\n".join(show_tune(t, tunes) for t in args.show))
    elif args.json:
        print(json.dumps(report, indent=1))
    else:
        print(format_report(report))
    if args.write_split:
        args.write_split.write_text(format_split_md(report), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
