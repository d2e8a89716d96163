"""Hostile inputs: seeded mutations of Standard MIDI Files and onset lists.

Usage: imported by ``tests/test_robust.py`` (about 500 inputs in ``make
test``) and ``bench/robust.py`` (10,000 in ``make bench-robust``);
``python bench/hostile.py SEED INDEX OUT`` writes one input to a file so that
a failure can be replayed with ``metertop analyse OUT``.

Conventions
-----------
- Input ``i`` of ``hostile_inputs(n, seed)`` draws only from
  ``np.random.default_rng([seed, i])``: it does not depend on ``n`` and
  :func:`hostile_input` rebuilds it alone.
- Each input is a :class:`Hostile` record: ``case`` names where it came from
  and what was done to it (``midi/type1-band/tempo-zero+flip``), ``suffix``
  is the file suffix to write it under (``.mid``, ``.csv``, ...) and
  ``data`` its bytes.
- MIDI inputs start from small valid files built here event by event, so
  that damage can be done at the level of the file's structure (delta
  times, running status, meta events, chunk lengths, the header) as well as
  to its bytes. The byte layout follows the Standard MIDI File 1.0
  specification (MIDI Manufacturers Association, an open standard).
- Onset lists start from valid CSV, TSV, single-column and JSON lists and
  are damaged as text (numbers, separators, headers) and as bytes
  (encodings, truncation).
- The seed files are neutral clicks and scales: they carry the damage, and
  no metre is checked on them.
"""

from __future__ import annotations

import json
import re
import struct
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

__all__ = ["Hostile", "Outcome", "hostile_input", "hostile_inputs", "run_cli", "midi_seeds", "onset_seeds", "MIDI_MUTATIONS",
           "ONSET_MUTATIONS"]


@dataclass(frozen=True)
class Hostile:
    """One hostile input: where it came from and what was done (``case``), its suffix and bytes."""

    case: str
    suffix: str
    data: bytes

    @property
    def family(self) -> str:
        """``midi`` or ``onsets``: the first part of ``case``."""
        return self.case.split("/", 1)[0]


# ---- Standard MIDI File encoding, permissive on purpose --------------------------------

def vlq(value: int) -> bytes:
    """A variable-length quantity (7 bits a byte, high bit = more follows); any size, no range check.

    >>> vlq(0), vlq(127), vlq(128), vlq(0x0FFFFFFF)
    (b'\\x00', b'\\x7f', b'\\x81\\x00', b'\\xff\\xff\\xff\\x7f')
    """
    out = [value & 0x7F]
    value >>= 7
    while value:
        out.append(0x80 | (value & 0x7F))
        value >>= 7
    return bytes(reversed(out))


def meta(kind: int, payload: bytes, length: int | None = None) -> bytes:
    """A meta event ``FF kind len payload``; ``length`` may lie about the payload."""
    return bytes([0xFF, kind]) + vlq(len(payload) if length is None else length) + payload


def chunk(tag: bytes, body: bytes, length: int | None = None) -> bytes:
    return tag + struct.pack(">I", (len(body) if length is None else length) & 0xFFFFFFFF) + body


# An event is [delta_ticks, raw_bytes]; raw bytes start with their status byte.
Event = list


def encode_track(events: list[Event], *, running_status: bool = True, sloppy: bool = False) -> bytes:
    """Track body bytes. Running status drops repeated channel status bytes;
    ``sloppy`` keeps it alive across meta and sysex events (which the
    specification forbids, and some old sequencers did anyway)."""
    out = bytearray()
    status = None
    for delta, raw in events:
        out += vlq(delta)
        first = raw[0] if raw else None
        if running_status and first is not None and first < 0xF0 and first == status:
            out += raw[1:]
        else:
            out += raw
        if first is not None and first < 0xF0:
            status = first
        elif not sloppy:
            status = None
    return bytes(out)


def smf(fmt: int, division: int, tracks: list[bytes], n_tracks: int | None = None, header_length: int = 6) -> bytes:
    header = struct.pack(">HHH", fmt & 0xFFFF, (len(tracks) if n_tracks is None else n_tracks) & 0xFFFF, division & 0xFFFF)
    header = (header + bytes(max(header_length - 6, 0)))[:header_length]
    return chunk(b"MThd", header, header_length) + b"".join(chunk(b"MTrk", t) for t in tracks)


def _notes(pattern: list[tuple[int, int, int, int, int]]) -> list[Event]:
    """Events from ``(tick, length, channel, pitch, velocity)`` notes; note-offs alternate between
    0x80 and note-on with velocity 0, so running status gets used."""
    raw = []
    for k, (tick, length, ch, pitch, vel) in enumerate(pattern):
        raw.append((tick, 1, bytes([0x90 | ch, pitch, vel])))
        off = bytes([0x80 | ch, pitch, 64]) if k % 2 else bytes([0x90 | ch, pitch, 0])
        raw.append((tick + length, 0, off))
    raw.sort(key=lambda e: (e[0], e[1]))
    out, now = [], 0
    for tick, _, data in raw:
        out.append([tick - now, data])
        now = tick
    return out


def _end() -> Event:
    return [0, meta(0x2F, b"")]


@dataclass
class MidiSeed:
    """A valid file, kept as its parts so that mutations can reach its structure."""

    name: str
    fmt: int
    division: int
    tracks: list[list[Event]]

    def copy(self) -> "MidiSeed":
        return MidiSeed(self.name, self.fmt, self.division, [[list(e) for e in t] for t in self.tracks])


def midi_seeds() -> list[MidiSeed]:
    """Small valid files: a type-1 band (conductor, piano, drums), a type-0 file with tempo changes,
    sysex and controllers, and a sparse type-1 file at 960 ticks a quarter."""
    q = 480
    tempo = meta(0x51, struct.pack(">I", 500000)[1:])
    conductor = [[0, meta(0x03, b"conductor")], [0, tempo], [0, meta(0x58, bytes([3, 2, 24, 8]))],
                 [0, meta(0x59, bytes([0, 0]))], _end()]
    piano = [[0, meta(0x03, b"piano")], [0, bytes([0xC0, 0])]] + _notes(
        [(k * q, q - 40, 0, 60 + (k * 2) % 12, 100 if k % 3 == 0 else 70) for k in range(24)]) + [_end()]
    drums = [[0, bytes([0xB9, 7, 100])]] + _notes(
        [(k * q // 2, 60, 9, 36 if k % 6 == 0 else 42, 110 if k % 6 == 0 else 60) for k in range(48)]) + [
        [0, bytes([0xE9, 0, 64])], _end()]
    band = MidiSeed("type1-band", 1, q, [conductor, piano, drums])

    mixed_notes = _notes([(k * 240, 200, 0 if k % 4 else 9, 36 if k % 4 == 0 else 64 + k % 5, 90) for k in range(40)])
    mixed = [[0, tempo], [0, meta(0x58, bytes([4, 2, 24, 8]))], [0, bytes([0xF0, 5, 0x7E, 0x7F, 9, 1, 0xF7])],
             [0, meta(0x06, b"intro")]] + mixed_notes[:40] + [[0, meta(0x51, struct.pack(">I", 400000)[1:])],
                                                              [0, meta(0x7F, b"\x00\x00\x41\x01")]] + mixed_notes[40:] + [_end()]
    type0 = MidiSeed("type0-mixed", 0, q // 2, [mixed])

    sparse_q = 960
    sparse = MidiSeed("type1-sparse", 1, sparse_q, [
        [[0, tempo], _end()],
        _notes([(k * sparse_q, 100, 1, 48 + 12 * (k % 2), 80) for k in range(12)]) + [_end()],
    ])
    return [band, type0, sparse]


def _encode(seed: MidiSeed, *, running_status=True, sloppy=False, n_tracks=None, header_length=6) -> bytes:
    return smf(seed.fmt, seed.division, [encode_track(t, running_status=running_status, sloppy=sloppy) for t in seed.tracks],
               n_tracks=n_tracks, header_length=header_length)


# ---- MIDI mutations: structure first, then bytes -----------------------------------------

def _any_event(seed: MidiSeed, rng, where: Callable[[bytes], bool] = lambda raw: True):
    spots = [(i, j) for i, t in enumerate(seed.tracks) for j, (_, raw) in enumerate(t) if where(raw)]
    return spots[int(rng.integers(len(spots)))] if spots else None


def _is_note_on(raw: bytes) -> bool:
    return len(raw) == 3 and raw[0] & 0xF0 == 0x90 and raw[2] > 0


def _is_note_off(raw: bytes) -> bool:
    return len(raw) == 3 and (raw[0] & 0xF0 == 0x80 or (raw[0] & 0xF0 == 0x90 and raw[2] == 0))


def _m_huge_delta(seed, rng):
    spot = _any_event(seed, rng)
    seed.tracks[spot[0]][spot[1]][0] = int(rng.choice([0x0FFFFFFF, 0x00FFFFFF, 1 << 21, int(rng.integers(10**5, 1 << 28))]))


def _m_tempo(seed, rng, value=None):
    v = value if value is not None else int(rng.choice([0, 1, 0xFFFFFF]))
    payload = struct.pack(">I", v)[1:]
    found = False
    for t in seed.tracks:
        for e in t:
            if e[1][:2] == b"\xff\x51":
                e[1] = meta(0x51, payload)
                found = True
    if not found:
        seed.tracks[0].insert(0, [0, meta(0x51, payload)])


def _m_tempo_zero(seed, rng):
    _m_tempo(seed, rng, 0)


def _m_tempo_bad_length(seed, rng):
    seed.tracks[0].insert(0, [0, meta(0x51, bytes(int(rng.integers(0, 6))))])


def _m_all_at_once(seed, rng):
    for t in seed.tracks:
        for e in t:
            e[0] = 0


def _m_drop_offs(seed, rng):
    for i, t in enumerate(seed.tracks):
        seed.tracks[i] = [e for e in t if not (_is_note_off(e[1]) and rng.random() < 0.7)]


def _m_drop_ons(seed, rng):
    for i, t in enumerate(seed.tracks):
        seed.tracks[i] = [e for e in t if not (_is_note_on(e[1]) and rng.random() < 0.7)]


def _m_doubled(seed, rng):
    """Every channel event twice at the same tick: exact duplicates and overlapping notes."""
    for i, t in enumerate(seed.tracks):
        out = []
        for delta, raw in t:
            out.append([delta, raw])
            if raw and raw[0] < 0xF0:
                out.append([0, raw])
        seed.tracks[i] = out


def _m_zero_length(seed, rng):
    for t in seed.tracks:
        for e in t:
            if _is_note_off(e[1]):
                e[0] = 0


def _m_bad_meta(seed, rng):
    options = [
        meta(0x58, bytes([0, 2, 24, 8])),  # numerator 0
        meta(0x58, bytes([4, int(rng.choice([31, 64, 255])), 24, 8])),  # denominator 2**31 and worse
        meta(0x58, bytes([4, 2])),  # too short
        meta(0x59, bytes([100, 5])),  # no such key
        meta(0x59, bytes([0xF9, 1])),  # 7 flats, minor: legal edge
        meta(0x54, bytes([0xFF, 99, 99, 99, 99])),  # SMPTE offset out of range
        meta(0x03, bytes(rng.integers(0, 256, 12).astype(np.uint8))),  # name in no encoding
        meta(0x21, bytes([200])),  # port out of range
        meta(0x20, bytes([99, 1])),  # channel prefix: too long, out of range
        meta(int(rng.integers(0, 128)), b"x" * 4, length=int(rng.choice([0x7F, 0x3FFF, 0x0FFFFFFF]))),  # length lies
    ]
    seed.tracks[int(rng.integers(len(seed.tracks)))].insert(0, [0, options[int(rng.integers(len(options)))]])


def _m_bad_sysex(seed, rng):
    raw = bytes([0xF0]) + vlq(int(rng.choice([2, 100, 0x0FFFFFFF]))) + b"\x7e\x01"  # unterminated or length lies
    spot = _any_event(seed, rng)
    seed.tracks[spot[0]].insert(spot[1], [0, raw])


def _m_tracks(seed, rng):
    kind = int(rng.integers(4))
    if kind == 0:
        seed.tracks.append([_end()])  # an empty track
    elif kind == 1:
        seed.tracks[-1] = [e for e in seed.tracks[-1] if e[1][:2] != b"\xff\x2f"]  # no end of track
    elif kind == 2:
        seed.tracks[0].append([10, bytes([0x90, 60, 100])])  # a note after the end of track
    else:
        seed.tracks = [t for t in seed.tracks if not any(_is_note_on(e[1]) for e in t)] or [[_end()]]  # no notes at all


def _m_channels(seed, rng):
    target = int(rng.choice([9, int(rng.integers(16))]))
    for t in seed.tracks:
        for e in t:
            raw = e[1]
            if raw and 0x80 <= raw[0] < 0xF0:
                e[1] = bytes([(raw[0] & 0xF0) | target]) + raw[1:]


def _m_data_bytes(seed, rng):
    """Data bytes at the edges (0, 127) or illegally high (a status byte where data belongs)."""
    for _ in range(int(rng.integers(1, 6))):
        spot = _any_event(seed, rng, lambda raw: len(raw) == 3 and raw[0] < 0xF0)
        if spot is None:
            return
        raw = bytearray(seed.tracks[spot[0]][spot[1]][1])
        raw[int(rng.integers(1, 3))] = int(rng.choice([0, 1, 127, 128, 0xF7, 0xFF]))
        seed.tracks[spot[0]][spot[1]][1] = bytes(raw)


def _m_division(seed, rng):
    seed.division = int(rng.choice([0, 1, 3, 0x7FFF, 0xE728, 0xE250, 0xFFFF]))


def _m_format(seed, rng):
    seed.fmt = int(rng.choice([0, 1, 2, 3, 0xFFFF]))


def _m_one_pitch(seed, rng):
    for t in seed.tracks:
        for e in t:
            raw = e[1]
            if len(raw) == 3 and raw[0] & 0xE0 == 0x80:  # note on or off
                e[1] = bytes([raw[0], 60, raw[2]])


STRUCTURE: dict[str, Callable] = {
    "huge-delta": _m_huge_delta, "tempo-zero": _m_tempo_zero, "tempo-extreme": _m_tempo,
    "tempo-bad-length": _m_tempo_bad_length, "all-at-once": _m_all_at_once, "drop-note-offs": _m_drop_offs,
    "drop-note-ons": _m_drop_ons, "doubled": _m_doubled, "zero-length": _m_zero_length, "bad-meta": _m_bad_meta,
    "bad-sysex": _m_bad_sysex, "tracks": _m_tracks, "channels": _m_channels, "data-bytes": _m_data_bytes,
    "division": _m_division, "format": _m_format, "one-pitch": _m_one_pitch,
}


def _chunk_offsets(data: bytes) -> list[int]:
    """Offsets of the chunk headers that a walk by declared lengths finds."""
    out, pos = [], 0
    while pos + 8 <= len(data):
        out.append(pos)
        pos += 8 + struct.unpack(">I", data[pos + 4:pos + 8])[0]
    return out


def _b_truncate(data, rng):
    return data[: int(rng.integers(0, len(data)))]


def _b_flip(data, rng):
    b = bytearray(data)
    for _ in range(int(rng.integers(1, 9))):
        b[int(rng.integers(len(b)))] ^= int(rng.integers(1, 256))
    return bytes(b)


def _b_interesting(data, rng):
    b = bytearray(data)
    for _ in range(int(rng.integers(1, 5))):
        b[int(rng.integers(len(b)))] = int(rng.choice([0x00, 0x7F, 0x80, 0xF0, 0xF7, 0xFF]))
    return bytes(b)


def _b_insert(data, rng):
    at = int(rng.integers(len(data) + 1))
    return data[:at] + bytes(rng.integers(0, 256, int(rng.integers(1, 32))).astype(np.uint8)) + data[at:]


def _b_delete(data, rng):
    at = int(rng.integers(len(data)))
    return data[:at] + data[at + int(rng.integers(1, 64)):]


def _b_chunk_length(data, rng):
    offsets = _chunk_offsets(data)
    if not offsets:
        return data
    at = offsets[int(rng.integers(len(offsets)))]
    old = struct.unpack(">I", data[at + 4:at + 8])[0]
    new = int(rng.choice([0, max(old - 1, 0), old + 1, old + int(rng.integers(2, 1000)), 0x7FFFFFFF, 0xFFFFFFFF]))
    return data[:at + 4] + struct.pack(">I", new) + data[at + 8:]


def _b_trailing(data, rng):
    tail = [b"\x00" * int(rng.integers(1, 64)), b"MTrk", b"MTrk\x00\x00\x00\x04\x00\xff\x2f", b"garbage after the end",
            chunk(b"XFIH", b"unknown chunk")]
    return data + tail[int(rng.integers(len(tail)))]


BYTES: dict[str, Callable] = {
    "truncate": _b_truncate, "flip": _b_flip, "interesting-bytes": _b_interesting, "insert": _b_insert,
    "delete": _b_delete, "chunk-length": _b_chunk_length, "trailing": _b_trailing,
}
MIDI_MUTATIONS = tuple(STRUCTURE) + tuple(BYTES) + ("no-running-status", "sloppy-running-status", "header")


def _midi_input(rng) -> tuple[str, bytes]:
    seeds = midi_seeds()
    seed = seeds[int(rng.integers(len(seeds)))].copy()
    steps: list[str] = []
    names = list(STRUCTURE)
    for name in rng.choice(names, size=int(rng.integers(0, 3)), replace=False):
        STRUCTURE[str(name)](seed, rng)
        steps.append(str(name))
    encode_opts = {}
    roll = rng.random()
    if roll < 0.15:
        encode_opts["running_status"] = False
        steps.append("no-running-status")
    elif roll < 0.3:
        encode_opts["sloppy"] = True
        steps.append("sloppy-running-status")
    if rng.random() < 0.1:
        encode_opts["n_tracks"] = int(rng.choice([0, len(seed.tracks) + 1, 0xFFFF]))
        encode_opts["header_length"] = int(rng.choice([6, 4, 8, 0]))
        steps.append("header")
    data = _encode(seed, **encode_opts)
    for name in rng.choice(list(BYTES), size=int(rng.integers(0, 3)), replace=False):
        data = BYTES[str(name)](data, rng) if data else data
        steps.append(str(name))
    return f"midi/{seed.name}/{'+'.join(steps) or 'intact'}", data


# ---- onset lists -------------------------------------------------------------------------

def onset_seeds() -> list[tuple[str, str, str]]:
    """``(name, suffix, text)`` of valid onset lists: 32 clicks 0.4 s apart, every fourth louder."""
    t = 0.25 + 0.4 * np.arange(32)
    w = np.where(np.arange(32) % 4 == 0, 2.0, 1.0)
    p = 60 + np.arange(32) % 7
    rows = list(zip(t.round(4), w, p))
    return [
        ("csv-header", ".csv", "time_s,weight,pitch\n" + "".join(f"{a},{b},{c}\n" for a, b, c in rows)),
        ("tsv-header", ".tsv", "time_s\tweight\n" + "".join(f"{a}\t{b}\n" for a, b, _ in rows)),
        ("semicolon", ".csv", "time_s;pitch\n" + "".join(f"{a};{c}\n" for a, _, c in rows)),
        ("one-column", ".txt", "".join(f"{a}\n" for a, _, _ in rows)),
        ("json-numbers", ".json", json.dumps([float(a) for a, _, _ in rows])),
        ("json-objects", ".json", json.dumps([{"time_s": float(a), "weight": float(b), "pitch": int(c)} for a, b, c in rows])),
        ("json-wrapped", ".json", json.dumps({"onsets": [float(a) for a, _, _ in rows]})),
    ]


_NUMBERS = ["1e308", "1e309", "-1e308", "1e400", "1" * 400, "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "-0",
            "-0.0", "-1", "1e-320", "0x10", "1,5", "1_000", "\u0661\u0662", "\u00bd", "", " ", "1e", ".", "--1",
            "99999.9", "100001", "3600", "86400", "1e5", "2e9", "9" * 30, "0", "4.2e1", "+7", "true", "null", "\"0.5\""]


def _t_numbers(lines, rng):
    for _ in range(int(rng.integers(1, 4))):
        k = int(rng.integers(len(lines)))
        cells = _split(lines[k])
        cells[int(rng.integers(len(cells)))] = str(rng.choice(_NUMBERS))
        lines[k] = _join(cells, lines[k])
    return lines


def _t_far_onset(lines, rng):
    """One onset far from the others: a long gap in the middle of the piece."""
    k = int(rng.integers(1, len(lines))) if len(lines) > 1 else 0
    cells = _split(lines[k])
    cells[0] = str(rng.choice(["3599.5", "14400.5", "50000", "99999", "1e5"]))
    lines[k] = _join(cells, lines[k])
    return lines


def _t_same_time(lines, rng):
    out = []
    for ln in lines:
        cells = _split(ln)
        if cells and re.fullmatch(r"[-+]?[0-9.]+(e[-+]?[0-9]+)?", cells[0].strip()):
            cells[0] = "1.0"
        out.append(_join(cells, ln))
    return out


def _t_separators(lines, rng):
    seps = [",", "\t", ";", " ", ", ", "|", ",,"]
    out = []
    for ln in lines:
        if rng.random() < 0.3:
            ln = str(rng.choice(seps)).join(_split(ln))
        out.append(ln)
    return out


def _t_columns(lines, rng):
    k = int(rng.integers(len(lines)))
    cells = _split(lines[k])
    if rng.random() < 0.5 and len(cells) > 1:
        cells = cells[: int(rng.integers(1, len(cells)))]
    else:
        cells = cells + ["7"] * int(rng.integers(1, 4))
    lines[k] = ",".join(cells)
    return lines


def _t_header(lines, rng):
    kind = int(rng.integers(6))
    if kind == 0:
        return lines[1:]  # no header
    if kind == 1:
        return lines[:1]  # header only
    if kind == 2:
        return [lines[0].replace("time_s", str(rng.choice(["time", "Time_S", "tíme_s", "time_s ", "\"time_s\"", "onset"])))] + lines[1:]
    if kind == 3:
        return lines[:5] + [lines[0]] + lines[5:]  # the header again mid-file
    if kind == 4:
        return [lines[0] + ",time_s"] + lines[1:]  # time_s twice
    return ["# comment"] + lines + ["# trailing comment", ""]


def _t_rows(lines, rng):
    head, body = lines[:1], lines[1:] or lines[:1]
    kind = int(rng.integers(4))
    if kind == 0:
        return head + [body[i] for i in rng.permutation(len(body))]
    if kind == 1:
        return head + body + body  # every row twice
    if kind == 2:
        return head + body[: int(rng.integers(0, 9))]  # too few
    return head + ["", "   "] + body + ["\u00a0"]


TEXT: dict[str, Callable] = {
    "numbers": _t_numbers, "far-onset": _t_far_onset, "same-time": _t_same_time, "separators": _t_separators,
    "columns": _t_columns, "header": _t_header, "rows": _t_rows,
}


def _j_mutate(value, rng):
    kind = int(rng.integers(9))
    if kind == 0:
        return "[" * int(rng.choice([50, 5000, 100000]))  # deep nesting
    if kind == 1:
        return "[" + "1" * int(rng.choice([20, 400, 5000])) + ", 1, 2, 3, 4, 5, 6, 7, 8]"  # huge integers
    if kind == 2:
        return json.dumps(value)[: int(rng.integers(1, 40))]  # truncated
    items = value["onsets"] if isinstance(value, dict) else value
    if kind == 3:
        k = int(rng.integers(len(items)))
        bad = [None, "0.5", [0.5], {"x": 1}, True, -1, 1e308, float("inf"), float("nan"), 10**30]
        pick = bad[int(rng.integers(len(bad)))]
        if isinstance(items[k], dict):
            items[k][str(rng.choice(["time_s", "weight", "pitch"]))] = pick
        else:
            items[k] = pick
        return json.dumps(value)
    if kind == 4:
        return json.dumps({"onsets": int(rng.integers(10))} if rng.random() < 0.5 else {"onsets": []})
    if kind == 5:
        return json.dumps(value) + str(rng.choice([" trailing", "]", "\x00"]))
    if kind == 6:
        for it in items:
            if isinstance(it, dict):
                it["pitch"] = float(rng.choice([60.5, 1e300, -5.0, 1e19]))
        return json.dumps(value)
    if kind == 7:
        return json.dumps([items[0]] * 20)  # one time, twenty times
    return json.dumps(value, indent=int(rng.integers(0, 4)))


def _bytes_of(text: str, rng) -> tuple[str, bytes]:
    roll = rng.random()
    if roll < 0.08:
        return "utf-16", text.encode("utf-16")
    if roll < 0.12:
        return "utf-16-le", text.encode("utf-16-le")
    if roll < 0.17:
        return "latin-1", text.replace("time_s", "t\u00eame_s", 1).encode("latin-1", "replace")
    if roll < 0.22:
        return "utf-8-bom", b"\xef\xbb\xbf" + text.encode("utf-8")
    if roll < 0.27:
        return "crlf", text.replace("\n", "\r\n").encode("utf-8")
    if roll < 0.3:
        return "cr", text.replace("\n", "\r").encode("utf-8")
    data = text.encode("utf-8", "surrogatepass")
    if roll < 0.36 and data:
        b = bytearray(data)
        for _ in range(int(rng.integers(1, 6))):
            b[int(rng.integers(len(b)))] = int(rng.choice([0x00, 0x80, 0xC3, 0xFF, 0x0A, 0x2C]))
        return "bad-bytes", bytes(b)
    if roll < 0.4 and data:
        return "truncate", data[: int(rng.integers(0, len(data)))]
    return "", data


ONSET_MUTATIONS = tuple(TEXT) + ("json", "utf-16", "utf-16-le", "latin-1", "utf-8-bom", "crlf", "cr", "bad-bytes",
                                 "truncate", "suffix")


def _onset_input(rng) -> tuple[str, str, bytes]:
    seeds = onset_seeds()
    name, suffix, text = seeds[int(rng.integers(len(seeds)))]
    steps: list[str] = []
    if suffix == ".json":
        if rng.random() < 0.8:
            text = _j_mutate(json.loads(text), rng)
            steps.append("json")
    else:
        lines = text.splitlines()
        for mut in rng.choice(list(TEXT), size=int(rng.integers(1, 3)), replace=False):
            lines = TEXT[str(mut)](lines, rng) or [""]
            steps.append(str(mut))
        text = "\n".join(lines) + ("\n" if rng.random() < 0.8 else "")
    how, data = _bytes_of(text, rng)
    if how:
        steps.append(how)
    if rng.random() < 0.05:
        suffix = str(rng.choice([".mid", ".json", ".csv", ""]))  # the wrong suffix
        steps.append("suffix")
    return f"onsets/{name}/{'+'.join(steps) or 'intact'}", suffix, data


def _split(line: str) -> list[str]:
    for sep in ("\t", ";", ","):
        if sep in line:
            return line.split(sep)
    return line.split() or [line]


def _join(cells: list[str], like: str) -> str:
    for sep in ("\t", ";", ","):
        if sep in like:
            return sep.join(cells)
    return " ".join(cells)


# ---- the stream --------------------------------------------------------------------------

def hostile_input(seed: int, index: int) -> Hostile:
    """Input ``index`` of the stream with base ``seed`` (see the module conventions)."""
    rng = np.random.default_rng([seed, index])
    if rng.random() < 0.5:
        case, data = _midi_input(rng)
        return Hostile(case, ".mid", data)
    case, suffix, data = _onset_input(rng)
    return Hostile(case, suffix, data)


def hostile_inputs(n: int, seed: int) -> Iterator[Hostile]:
    """The first ``n`` inputs of the stream with base ``seed``.

    >>> a = [h.case for h in hostile_inputs(20, seed=3)]
    >>> a == [hostile_input(3, i).case for i in range(20)]
    True
    >>> {h.family for h in hostile_inputs(50, seed=3)} == {"midi", "onsets"}
    True
    """
    for i in range(n):
        yield hostile_input(seed, i)


# ---- running one input through the command line -------------------------------------------

@dataclass(frozen=True)
class Outcome:
    """What the command line did with one input.

    ``verdict`` is ``"analysed"`` (exit 0, or another code that reports a result; with ``--json``, strict JSON,
    nothing on stderr), ``"refused"`` (exit 2, nothing on stdout, exactly one
    line ``metertop: error: ...`` on stderr) or ``"crash"`` (anything else:
    an uncaught exception, a traceback, more than one line, another exit
    code). ``detail`` is the error line, or what went wrong for a crash.
    """

    command: str
    verdict: str
    detail: str


def run_cli(args: list[str], results: tuple[int, ...] = (0,)) -> Outcome:
    """Run ``metertop ARGS`` in this process (typer's CliRunner) and judge it (see :class:`Outcome`).

    ``results`` are the exit codes that report a result (``check`` also
    exits 1 for an inconsistent and 3 for an ambiguous verdict); they are
    judged as exit 0 is.
    """
    import warnings

    from typer.testing import CliRunner

    from metertop.cli import app

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")  # a warning repeated from the same line must show every time
        res = CliRunner().invoke(app, args, prog_name="metertop")
    command = args[0]
    if caught:
        w = caught[0]
        return Outcome(command, "crash", f"warning {w.category.__name__}: {str(w.message)[:150]} ({Path(w.filename).name}:{w.lineno})")
    exc = res.exception
    if exc is not None and not isinstance(exc, SystemExit):
        return Outcome(command, "crash", f"{type(exc).__name__}: {str(exc)[:200]}")
    out, err = res.stdout, res.stderr
    err_lines = err.strip().splitlines()
    if "Traceback" in err:
        return Outcome(command, "crash", "traceback on stderr")
    if res.exit_code in results:
        if err.strip():
            return Outcome(command, "crash", f"exit {res.exit_code} with stderr: {err_lines[0][:200]}")
        if "--json" in args:
            try:
                for line in out.strip().splitlines():
                    json.loads(line, parse_constant=lambda c: (_ for _ in ()).throw(ValueError(c)))
            except ValueError as problem:
                return Outcome(command, "crash", f"output is not strict JSON ({problem})")
        return Outcome(command, "analysed", "")
    if res.exit_code == 2 and out == "" and len(err_lines) == 1 and err_lines[0].startswith("metertop: error: "):
        return Outcome(command, "refused", err_lines[0])
    return Outcome(command, "crash", f"exit {res.exit_code}, {len(err_lines)} stderr lines: {' | '.join(err_lines)[:200]}")


def main(argv=None, build: Callable[[int, int], Hostile] = hostile_input, script: str = "bench/hostile.py") -> int:
    """Write input ``INDEX`` of the stream ``SEED`` (made by ``build``) to ``OUT_STEM`` and its suffix."""
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 3:
        print(f"usage: python {script} SEED INDEX OUT_STEM   (writes OUT_STEM + the input's suffix)", file=sys.stderr)
        return 2
    h = build(int(args[0]), int(args[1]))
    out = Path(args[2] + h.suffix)
    out.write_bytes(h.data)
    print(f"{out}: {h.case}, {len(h.data)} bytes")
    if hasattr(h, "args"):  # an input with a command of its own
        print("replay: metertop " + " ".join(h.args(out)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
