"""A structural check of Standard MIDI File bytes, before the real parse.

Conventions
-----------
:func:`survey_smf` walks the chunks and events of a file the way the parser
behind pretty_midi (mido) reads them, without building any message objects,
and raises :class:`~metertop.errors.InputError` with a plain description of
the first problem it meets: a missing header, a track cut short, a data byte
out of range, a tempo of zero, a meta event the parser cannot decode, more
notes than :data:`~metertop.limits.MAX_NOTES` (counting stops there, so a
huge file is refused at once), or events beyond the last tick the parser can
map to seconds. A file that passes is one the parser can read.

The byte layout is that of the Standard MIDI File 1.0 specification (MIDI
Manufacturers Association, an open standard): an ``MThd`` chunk (format,
track count, division), then ``MTrk`` chunks of events, each a
variable-length delta time and a channel message (running status allowed),
a system-exclusive message (``F0``/``F7`` and a length) or a meta event
(``FF``, a type and a length).
"""

from __future__ import annotations

import struct
from dataclasses import dataclass

from .errors import InputError
from .limits import MAX_NOTES, check_note_count

__all__ = ["SmfSurvey", "survey_smf", "MAX_TICKS", "MAX_EVENT_BYTES"]

# The parser maps every tick up to the last one to seconds in one array and
# refuses files beyond this many ticks (pretty_midi's own guard).
MAX_TICKS = 10_000_000
# The parser's largest meta or system-exclusive payload (mido's guard).
MAX_EVENT_BYTES = 1_000_000

# Bytes after the status byte, by status: channel messages by their high
# nibble, system common and real-time messages by value. Undefined ones
# (F4, F5, F9, FD) are absent.
_CHANNEL_DATA = {0x80: 2, 0x90: 2, 0xA0: 2, 0xB0: 2, 0xC0: 1, 0xD0: 1, 0xE0: 2}
_SYSTEM_DATA = {0xF1: 1, 0xF2: 2, 0xF3: 1, 0xF6: 0, 0xF8: 0, 0xFA: 0, 0xFB: 0, 0xFC: 0, 0xFE: 0}
# Meta events the parser decodes by position, with the bytes it reads.
_META_MIN_BYTES = {0x20: 1, 0x51: 3, 0x54: 5, 0x58: 4, 0x59: 2}
_META_NAMES = {0x00: "sequence number", 0x20: "channel prefix", 0x51: "tempo", 0x54: "SMPTE offset", 0x58: "time signature",
               0x59: "key signature"}


@dataclass(frozen=True)
class SmfSurvey:
    """What the walk found.

    Attributes
    ----------
    format : int
        0, 1 or 2.
    n_tracks : int
        Track chunks read (the header's count).
    ticks_per_quarter : int
    n_note_ons : int
        Note-on events with a velocity above 0, over all tracks: at least
        the number of notes the parse will give.
    last_tick : int
        The latest event time in ticks, over all tracks.
    """

    format: int
    n_tracks: int
    ticks_per_quarter: int
    n_note_ons: int
    last_tick: int


class _Cut(Exception):
    """The data ended inside an event."""


def survey_smf(data: bytes) -> SmfSurvey:
    """Walk the chunks and events of a Standard MIDI File; raise InputError at the first problem.

    Parameters
    ----------
    data : bytes
        The whole file.

    Returns
    -------
    SmfSurvey

    Raises
    ------
    InputError
        The message names the problem, and the track (counted from 1) and
        byte offset where it was found.

    Examples
    --------
    >>> header = b"MThd" + struct.pack(">IHHH", 6, 0, 1, 96)
    >>> track = bytes([0, 0x90, 60, 100, 48, 60, 0, 0, 0xFF, 0x2F, 0])  # a note, running status for its end
    >>> survey_smf(header + b"MTrk" + struct.pack(">I", len(track)) + track)
    SmfSurvey(format=0, n_tracks=1, ticks_per_quarter=96, n_note_ons=1, last_tick=48)
    >>> survey_smf(header + b"MTrk" + struct.pack(">I", 40) + track)
    Traceback (most recent call last):
    ...
    metertop.errors.InputError: track 1 declares 40 bytes but the file ends 11 bytes later (a truncated file?)
    """
    if data[:4] != b"MThd":
        raise InputError("does not start with a MIDI file header ('MThd')")
    if len(data) < 14:
        raise InputError(f"the MIDI file header is cut short ({len(data)} bytes)")
    header_len = struct.unpack(">I", data[4:8])[0]
    if header_len < 6:
        raise InputError(f"the MIDI file header declares {header_len} bytes; it needs 6")
    fmt, n_tracks, division = struct.unpack(">HHH", data[8:14])
    if fmt > 2:
        raise InputError(f"unknown MIDI file format {fmt} (formats 0, 1 and 2 exist)")
    if division & 0x8000:
        raise InputError("timing is in SMPTE frames, which metertop does not read; save the file with ticks per quarter note")
    if division == 0:
        raise InputError("the header gives 0 ticks per quarter note")
    if n_tracks == 0 or n_tracks & 0x8000:
        raise InputError(f"the header declares {n_tracks} tracks")
    pos = 8 + header_len
    notes = last_tick = 0
    for k in range(1, n_tracks + 1):
        if pos + 8 > len(data):
            raise InputError(f"the header declares {n_tracks} tracks but the file ends after {k - 1} (a truncated file?)")
        tag = data[pos:pos + 4]
        if tag != b"MTrk":
            raise InputError(f"track {k} should start at byte {pos} with 'MTrk' but holds {_shown(tag)}")
        size = struct.unpack(">I", data[pos + 4:pos + 8])[0]
        start = pos + 8
        if start + size > len(data):
            raise InputError(f"track {k} declares {size} bytes but the file ends {len(data) - start} bytes later (a truncated file?)")
        try:
            n, tick = _walk_track(data, start, start + size, k, first=(k == 1), notes_before=notes)
        except _Cut:
            raise InputError(f"track {k}: an event runs past the end of the track (a wrong chunk length?)") from None
        notes += n
        last_tick = max(last_tick, tick)
        pos = start + size
    if last_tick + 1 > MAX_TICKS:
        raise InputError(f"events run to tick {last_tick:,}, beyond the {MAX_TICKS:,} ticks that can be read "
                         "(a corrupt delta time?)")
    return SmfSurvey(fmt, n_tracks, division, notes, last_tick)


def _vlq(data: bytes, p: int, end: int) -> tuple[int, int]:
    value = 0
    while True:
        if p >= end:
            raise _Cut
        byte = data[p]
        p += 1
        value = (value << 7) | (byte & 0x7F)
        if byte < 0x80:
            return value, p


def _walk_track(data: bytes, p: int, end: int, k: int, *, first: bool, notes_before: int) -> tuple[int, int]:
    """Note-ons and the last tick of the track in ``data[p:end]``."""
    if p == end:
        raise InputError(f"track {k} is empty (not even an end-of-track event)")
    tick = notes = 0
    status = None
    while p < end:
        delta, p = _vlq(data, p, end)
        tick += delta
        if p >= end:
            raise _Cut
        byte = data[p]
        if byte < 0x80:  # running status: this is already the first data byte
            if status is None:
                raise InputError(f"track {k}, byte {p}: data without a status byte before it")
            if status >= 0xF0:
                raise InputError(f"track {k}, byte {p}: data after a system message (running status applies to channel messages only)")
            s = status
        else:
            s = byte
            p += 1
            if s != 0xFF:
                status = s  # the parser keeps running status across meta events
        if s == 0xFF:
            if p >= end:
                raise _Cut
            kind = data[p]
            length, p = _vlq(data, p + 1, end)
            if length > MAX_EVENT_BYTES:
                raise InputError(f"track {k}: a meta event of {length:,} bytes (corrupt)")
            if p + length > end:
                raise _Cut
            _check_meta(kind, data[p:p + length], k, tick, first)
            p += length
        elif s in (0xF0, 0xF7):
            length, p = _vlq(data, p, end)
            if length > MAX_EVENT_BYTES:
                raise InputError(f"track {k}: a system-exclusive message of {length:,} bytes (corrupt)")
            if p + length > end:
                raise _Cut
            _check_sysex(data[p:p + length], k, p)
            p += length
        else:
            n_data = _CHANNEL_DATA.get(s & 0xF0) if s < 0xF0 else _SYSTEM_DATA.get(s)
            if n_data is None:
                raise InputError(f"track {k}, byte {p - 1}: undefined status byte 0x{s:02X}")
            if p + n_data > end:
                raise _Cut
            for q in range(p, p + n_data):
                if data[q] > 0x7F:
                    raise InputError(f"track {k}, byte {q}: data byte 0x{data[q]:02X} out of range (0-127)")
            if s & 0xF0 == 0x90 and s < 0xF0 and data[p + 1]:
                notes += 1
                if notes_before + notes > MAX_NOTES:
                    check_note_count(notes_before + notes, at_least=True)
            p += n_data
    return notes, tick


def _check_sysex(payload: bytes, k: int, at: int) -> None:
    # The parser drops an opening F0 and a closing F7, and takes the rest as 7-bit data.
    body = payload[1:] if payload[:1] == b"\xf0" else payload
    body = body[:-1] if body[-1:] == b"\xf7" else body
    if body and max(body) > 0x7F:
        raise InputError(f"track {k}, byte {at}: a system-exclusive message with a byte above 0x7F")


def _shown(raw: bytes) -> str:
    return "'" + "".join(chr(b) if 32 <= b < 127 else "?" for b in raw) + "'"


def _check_meta(kind: int, payload: bytes, k: int, tick: int, first: bool) -> None:
    where = f"track {k}, tick {tick}"
    need = _META_MIN_BYTES.get(kind, 0)
    if kind == 0x00 and len(payload) == 1:
        need = 2
    if len(payload) < need:
        raise InputError(f"{where}: a {_META_NAMES[kind]} event of {len(payload)} bytes; it needs {need}")
    if kind == 0x51 and first and payload[:3] == b"\x00\x00\x00":
        raise InputError(f"{where}: a tempo of 0 microseconds per quarter note")
    elif kind == 0x54 and payload[0] >> 5 > 3:
        raise InputError(f"{where}: an SMPTE offset with an unknown frame rate")
    elif kind == 0x58 and first and payload[0] == 0:
        raise InputError(f"{where}: a time signature with numerator 0")
    elif kind == 0x59:
        sharps = payload[0] - 256 if payload[0] > 127 else payload[0]
        if not -7 <= sharps <= 7 or payload[1] > 1:
            raise InputError(f"{where}: a key signature of {sharps} sharps in mode {payload[1]}, which does not exist")
