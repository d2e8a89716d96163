"""Write a transcription back as MusicXML, barred in a proposed metre.

Conventions
-----------
- Positions are in quarters from the start of the score (music21 offsets).
- Barlines fall at the reading's downbeats: the first one is
  ``pickup_quarters`` after the first note, then one every
  ``bar_quarters``. Music before the first downbeat forms a pickup bar
  (measure 0, shorter than a bar); the last bar may end short.
- A note or chord that crosses a barline is split there and tied; a rest is
  split without a tie. Nothing else about the notes changes: pitches,
  lyrics, articulations, key signatures, clefs, tempo marks and dynamics
  are kept; the input's own barlines, time signatures and repeat signs are
  not (the barlines are the proposal's).
- ``.musicxml`` and ``.xml`` are written as plain MusicXML, ``.mxl`` as
  compressed MusicXML (a zip with ``META-INF/container.xml``). Every write
  goes through :mod:`metertop.outputs`: an existing file is replaced only
  with ``force``, the input never, and the file appears whole or not at all.
"""

from __future__ import annotations

import copy
import io
import os
import zipfile
from pathlib import Path

import numpy as np

from .errors import OutputError
from .outputs import atomic_write, check_target
from .scores import ScoreReading, ScoreTune, _music21

__all__ = ["WRITE_SUFFIXES", "barred_score", "bar_boundaries", "check_score_target", "write_score", "musicxml_bytes"]

WRITE_SUFFIXES = (".musicxml", ".xml", ".mxl")
_EPS = 1e-6
_CONTAINER = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<container>\n  <rootfiles>\n'
    '    <rootfile full-path="score.musicxml" media-type="application/vnd.recordare.musicxml+xml"/>\n'
    '  </rootfiles>\n</container>\n'
)


def bar_boundaries(start_q: float, end_q: float, first_downbeat_q: float, bar_q: float) -> np.ndarray:
    """Measure boundaries from ``start_q`` to ``end_q``: the downbeats between them, and both ends.

    >>> bar_boundaries(0.0, 7.0, 1.0, 3.0).tolist()
    [0.0, 1.0, 4.0, 7.0]
    >>> bar_boundaries(0.0, 5.5, 0.0, 2.0).tolist()
    [0.0, 2.0, 4.0, 5.5]
    """
    if not bar_q > 0:
        raise ValueError("bar_q must be positive")
    k0 = int(np.ceil((start_q - first_downbeat_q) / bar_q - _EPS))
    k1 = int(np.floor((end_q - first_downbeat_q) / bar_q + _EPS))
    inner = first_downbeat_q + bar_q * np.arange(k0, k1 + 1)
    inner = inner[(inner > start_q + _EPS) & (inner < end_q - _EPS)]
    return np.concatenate([[start_q], inner, [end_q]])


def _time_signature(m21, reading: ScoreReading):
    numerator, denominator = reading.time_signature.split("/")
    if reading.grouping and sum(reading.grouping) == int(numerator):
        return m21.meter.TimeSignature(f"{'+'.join(str(g) for g in reading.grouping)}/{denominator}")
    return m21.meter.TimeSignature(reading.time_signature)


def _kept(m21, el) -> bool:
    """Elements carried into the barred score: notes and rests, and the marks that are not bar structure."""
    if isinstance(el, m21.spanner.RepeatBracket):
        return False
    return isinstance(el, (m21.note.GeneralNote, m21.key.KeySignature, m21.clef.Clef, m21.tempo.TempoIndication,
                           m21.dynamics.Dynamic, m21.expressions.TextExpression, m21.instrument.Instrument,
                           m21.spanner.Spanner))


def _part_elements(m21, part):
    """(offset, voice id or None, element) for the kept elements of a part, in order; spanners apart."""
    items, spanners = [], []
    for el in part.recurse():
        if not _kept(m21, el):
            continue
        if isinstance(el, m21.spanner.Spanner):
            spanners.append(el)
            continue
        site = el.activeSite
        voice = site.id if isinstance(site, m21.stream.Voice) else None
        items.append((float(el.getOffsetInHierarchy(part)), voice, el))
    items.sort(key=lambda item: (item[0], not isinstance(item[2], m21.note.GeneralNote)))
    return items, spanners


def _barred_part(m21, part, bounds: np.ndarray, bar_q: float, time_signature, final: bool):
    items, spanners = _part_elements(m21, part)
    voices = sorted({v for _, v, el in items if v is not None and isinstance(el, m21.note.GeneralNote)}, key=str)
    new = m21.stream.Part()
    if isinstance(part.id, str):
        new.id = part.id
    if getattr(part, "partName", None):
        new.partName = part.partName
    measures = []
    pickup = bounds[1] - bounds[0] < bar_q - _EPS
    for k, (a, b) in enumerate(zip(bounds[:-1], bounds[1:])):
        m = m21.stream.Measure(number=k if pickup else k + 1)
        if len(voices) > 1:
            for v in voices:
                voice = m21.stream.Voice()
                voice.id = v
                m.insert(0, voice)
        if b - a < bar_q - _EPS:
            if k == 0:
                m.paddingLeft = bar_q - (b - a)
            else:
                m.paddingRight = bar_q - (b - a)
        measures.append(m)
    measures[0].insert(0, time_signature)

    def place(k: int, offset: float, voice, el) -> None:
        m = measures[k]
        target = m
        if len(voices) > 1 and isinstance(el, m21.note.GeneralNote):
            target = m.getElementById(voice if voice in voices else voices[0])
        target.insert(offset - bounds[k], el)

    last = len(measures) - 1
    for offset, voice, el in items:
        k = min(int(np.searchsorted(bounds, offset + _EPS, side="right")) - 1, last)
        k = max(k, 0)
        if isinstance(el, m21.note.GeneralNote) and el.quarterLength > 0 and not el.duration.isGrace:
            piece, start, end = el, offset, offset + float(el.quarterLength)
            while k < last and end > bounds[k + 1] + _EPS:
                left, right = piece.splitAtQuarterLength(float(bounds[k + 1] - start), addTies=isinstance(piece, m21.note.NotRest))
                place(k, start, voice, left)
                piece, start, k = right, float(bounds[k + 1]), k + 1
            place(k, start, voice, piece)
        else:
            place(k, offset, voice, el)
    for m in measures:
        new.append(m)
    if final:
        measures[-1].rightBarline = m21.bar.Barline("final")
    for sp in spanners:
        new.insert(0, sp)
    return new


def barred_score(tune: ScoreTune, reading: ScoreReading):
    """A copy of the tune's music21 score, barred in the given reading.

    Parameters
    ----------
    tune : ScoreTune
        Read from a file (it keeps its parsed score in ``stream``).
    reading : ScoreReading
        The reading to write (``ScoreAnalysis.reading(n)``).

    Returns
    -------
    music21.stream.Score
    """
    m21 = _music21()
    if tune.stream is None:
        raise OutputError("this tune was not read from a score file, so there is no score to write back")
    source = copy.deepcopy(tune.stream)
    parts = list(source.parts) or [source]
    end_q = max(float(p.highestTime) for p in parts)
    end_q = max(end_q, tune.end_q)
    bar_q = float(reading.bar_quarters)
    bounds = bar_boundaries(0.0, end_q, tune.first_q + float(reading.pickup_quarters), bar_q)
    out = m21.stream.Score()
    out.metadata = copy.deepcopy(source.metadata) if source.metadata is not None else m21.metadata.Metadata()
    if tune.title and not out.metadata.title:
        out.metadata.title = tune.title
    for part in parts:
        out.insert(0, _barred_part(m21, part, bounds, bar_q, _time_signature(m21, reading), final=True))
    for part in out.parts:
        part.makeAccidentals(inPlace=True, overrideStatus=True)
        try:
            part.makeBeams(inPlace=True)  # beams follow the new bars: eighths in threes in 6/8
        except m21.exceptions21.Music21Exception:  # some tuplet and voice layouts cannot be beamed; the score is right without beams
            pass
    return out


def musicxml_bytes(score, compressed: bool = False, *, make_notation: bool = True) -> bytes:
    """The MusicXML text of a music21 score, or a compressed ``.mxl`` archive of it.

    ``make_notation=False`` writes the measures exactly as they are (music21
    otherwise re-bars a measure without a time signature as 4/4); every
    duration must then be a single note value.
    """
    _music21()
    from music21.musicxml.m21ToXml import GeneralObjectExporter

    exporter = GeneralObjectExporter(score)
    exporter.makeNotation = make_notation
    data = exporter.parse()
    if not compressed:
        return data
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as archive:
        archive.writestr(zipfile.ZipInfo("mimetype"), "application/vnd.recordare.musicxml")
        archive.writestr("META-INF/container.xml", _CONTAINER, compress_type=zipfile.ZIP_DEFLATED)
        archive.writestr("score.musicxml", data, compress_type=zipfile.ZIP_DEFLATED)
    return buf.getvalue()


def write_score(tune: ScoreTune, reading: ScoreReading, path: str | os.PathLike, *, force: bool = False,
                inputs=()) -> Path:
    """Write the tune barred in ``reading`` to ``path`` (``.musicxml``, ``.xml`` or ``.mxl``).

    Parameters
    ----------
    tune : ScoreTune
    reading : ScoreReading
    path : str or os.PathLike
    force : bool
        Replace an existing file.
    inputs : iterable of paths
        Files that must never be written over (the input score).

    Raises
    ------
    OutputError
        For another suffix, an existing file without ``force``, the input
        file, or a write the disk refuses; nothing is written then.
    """
    target = check_score_target(path, inputs=inputs, force=force)
    data = musicxml_bytes(barred_score(tune, reading), compressed=target.suffix.lower() == ".mxl")
    return atomic_write(target, data)


def check_score_target(path: str | os.PathLike, *, inputs=(), force: bool = False) -> Path:
    """Check that a score may be written to ``path`` (suffix, existing file, input); return it as a Path."""
    if Path(path).suffix.lower() not in WRITE_SUFFIXES:
        raise OutputError(f"{path}: scores are written as MusicXML; give a name ending in {', '.join(WRITE_SUFFIXES)}")
    return check_target(path, inputs=inputs, force=force)
