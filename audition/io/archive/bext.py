"""The Broadcast Wave ``bext`` chunk (EBU Tech 3285 v2) and its coding history (EBU R 98).

Layout of the payload (EBU Tech 3285 v2, s. 2.3), little-endian:

=====  ====  ==========================================
offset bytes field
=====  ====  ==========================================
0      256   Description (ASCII)
256    32    Originator
288    32    OriginatorReference
320    10    OriginationDate (yyyy:mm:dd)
330    8     OriginationTime (hh:mm:ss)
338    8     TimeReference (samples since midnight, 64-bit as two 32-bit words)
346    2     Version
348    64    UMID (SMPTE 330M)
412    2     LoudnessValue (LUFS x 100, int16)       version 2
414    2     LoudnessRange (LU x 100)                version 2
416    2     MaxTruePeakLevel (dBTP x 100)           version 2
418    2     MaxMomentaryLoudness (LUFS x 100)       version 2
420    2     MaxShortTermLoudness (LUFS x 100)       version 2
422    180   Reserved
602    ...   CodingHistory (ASCII, lines ended by CR/LF)
=====  ====  ==========================================

A processing step keeps everything, adds one line to the coding history and
replaces the loudness figures it made stale.
"""

from __future__ import annotations

import math
import struct

FIXED = 602
_LOUDNESS = 412
#: Written in a version-2 loudness field that holds no valid value (EBU Tech 3285 v2 s. 2.3;
#: recalled from memory: "0x7FFF ... not valid").
NOT_VALID = 0x7FFF
#: The loudness fields in payload order.
LOUDNESS_FIELDS = ("loudness_value", "loudness_range", "max_true_peak_level", "max_momentary_loudness",
                   "max_short_term_loudness")


def _text(b: bytes) -> str:
    return b.split(b"\x00", 1)[0].decode("latin-1")


def parse(payload: bytes) -> dict:
    """The fields of a bext payload (text fields decoded as Latin-1, NUL-terminated)."""
    if len(payload) < 348:
        raise ValueError(f"a bext chunk of {len(payload)} bytes is shorter than its fixed part")
    p = payload + b"\x00" * max(0, FIXED - len(payload))
    lo, hi, version = struct.unpack_from("<IIH", p, 338)
    out = {
        "description": _text(p[0:256]), "originator": _text(p[256:288]),
        "originator_reference": _text(p[288:320]), "origination_date": _text(p[320:330]),
        "origination_time": _text(p[330:338]), "time_reference": lo | (hi << 32), "version": version,
        "umid": p[348:412].hex(), "coding_history": payload[FIXED:].split(b"\x00", 1)[0].decode("latin-1"),
    }
    if version >= 2:
        vals = struct.unpack_from("<5h", p, _LOUDNESS)
        out.update({k: (None if v == NOT_VALID else v / 100.0) for k, v in zip(LOUDNESS_FIELDS, vals)})
    return out


def coding_line(*, rate_hz: float, bits: int, channels: int, float_samples: bool, text: str) -> str:
    """One EBU R 98 coding-history line for a processing step, CR/LF-terminated.

    ``A=PCM,F=<rate>,W=<word length>,M=<mode>,T=<free text>``: EBU R 98 names the
    fields A (coding algorithm), F (sampling frequency, Hz), B (bit rate, for
    compressed codings only), W (word length, bits), M (mode) and T (free text),
    separated by commas, one line per step. Commas in ``text`` would start a new
    field, so they become semicolons. R 98's modes are mono, stereo, dual-mono and
    joint-stereo: none names more than two channels, so for those M is left out (as
    B is for PCM) and T begins with the channel count (``6 channels;...``).
    """
    mode = {1: "mono", 2: "stereo"}.get(channels)
    t = text.replace(",", ";").replace("\r", " ").replace("\n", " ")
    if float_samples:
        t = "IEEE float samples;" + t
    if mode is None:
        t = f"{channels} channels;" + t
    rate = f"{rate_hz:.0f}" if float(rate_hz).is_integer() else f"{rate_hz:g}"
    return f"A=PCM,F={rate},W={bits},{f'M={mode},' if mode else ''}T={t}\r\n"


def _db100(value) -> int:
    if value is None or not math.isfinite(value):
        return NOT_VALID
    return max(-32767, min(32766, int(round(value * 100.0))))


def rewrite(payload: bytes, line: str, *, true_peak_dbtp: float | None = None) -> tuple[bytes, list[str]]:
    """The bext payload of the processed file, and what was changed (for the inventory).

    Kept byte for byte: every fixed field (TimeReference, UMID, OriginatorReference...)
    and the coding history up to its end (trailing NUL padding dropped). Added: ``line``,
    after a CR/LF when the last line had none. Version-2 loudness fields: the true peak
    measured on the output (``true_peak_dbtp``) or "not valid", every other one "not
    valid" (integrated loudness, range, maximum momentary and short-term loudness are
    not measured by a render): never the input's, which describe other samples.
    """
    changes = ["coding history: one line added"]
    fixed = bytearray(payload[:FIXED].ljust(FIXED, b"\x00"))
    version = struct.unpack_from("<H", fixed, 346)[0]
    if version >= 2:
        old = struct.unpack_from("<5h", fixed, _LOUDNESS)
        new = (NOT_VALID, NOT_VALID, _db100(true_peak_dbtp), NOT_VALID, NOT_VALID)
        struct.pack_into("<5h", fixed, _LOUDNESS, *new)
        if old != new:
            changes.append("loudness fields: true peak measured on the output, the others set to not valid "
                           "(0x7FFF)")
    history = payload[FIXED:].rstrip(b"\x00")
    if history and not history.endswith(b"\r\n"):
        history += b"\r\n"
        changes.append("CR/LF ended the last coding-history line, which had none")
    return bytes(fixed) + history + line.encode("ascii", "replace"), changes
