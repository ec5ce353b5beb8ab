"""Carrying an AIFF/AIFF-C file's chunks over to a processed copy (Apple AIFF 1.3, AIFF-C draft 1991).

An AIFF file is ``FORM``, a 32-bit big-endian size, ``AIFF`` or ``AIFC``, then chunks
(id, 32-bit big-endian size, payload, a pad byte when the size is odd). Chunk by chunk:
``SSND`` rewritten (the processed audio); ``COMM`` carried byte for byte when the
coding is unchanged, else the output's; ``MARK`` (marker positions in sample frames),
``INST`` (loops by marker id), ``COMT`` (comments tied to markers), ``NAME``, ``AUTH``,
``(c) ``, ``ANNO``, ``APPL``, ``ID3 ``, ``FVER`` and unknown chunks carried byte for byte:
the frames are aligned one to one, so markers stay at their samples.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass

from audition.io.archive.inventory import Fate
from audition.io.archive.riff import _copy_range
from audition.io.archive.wave import INLINE_MAX


@dataclass(frozen=True)
class AChunk:
    cid: bytes
    offset: int
    size: int
    stored: int

    @property
    def name(self) -> str:
        return self.cid.decode("latin-1")


def read_layout(path):
    """``(form type, [AChunk...])`` of an AIFF/AIFC file, or None when it is not one."""
    with open(path, "rb") as f:
        head = f.read(12)
        if len(head) < 12 or head[:4] != b"FORM" or head[8:12] not in (b"AIFF", b"AIFC"):
            return None
        size = os.fstat(f.fileno()).st_size
        chunks, pos = [], 12
        while pos + 8 <= size:
            f.seek(pos)
            h = f.read(8)
            n = struct.unpack(">I", h[4:])[0]
            chunks.append(AChunk(h[:4], pos, n, max(0, min(n, size - pos - 8))))
            pos += 8 + n + (n & 1)
        return head[8:12], chunks


def _payload(path, c: AChunk) -> bytes:
    with open(path, "rb") as f:
        f.seek(c.offset + 8)
        return f.read(c.stored)


def _coding(form: bytes, comm: bytes) -> tuple:
    """What decides the sample bytes: channels, frames, bits, rate (80-bit float bytes), compression type."""
    ch, frames, bits = struct.unpack_from(">hIh", comm, 0)
    comp = comm[18:22] if form == b"AIFC" and len(comm) >= 22 else b"NONE"
    return ch, frames, bits, _ext80(comm[8:18]), comp.upper()


def _ext80(b: bytes) -> float:
    """The 80-bit IEEE 754 extended number of AIFF's sampleRate."""
    exp, mant = struct.unpack(">HQ", b)
    sign = -1.0 if exp & 0x8000 else 1.0
    exp &= 0x7FFF
    return 0.0 if exp == 0 and mant == 0 else sign * mant * 2.0 ** (exp - 16383 - 63)


def plan_fates(path) -> list[Fate]:
    form, chunks = read_layout(path)
    out = []
    for c in chunks:
        if c.cid == b"SSND":
            out.append(Fate(c.name, "rewritten", "the processed audio", c.size))
        elif c.cid == b"COMM":
            out.append(Fate(c.name, "carried", "unless the coding changes", c.size))
        else:
            out.append(Fate(c.name, "carried", "", c.size))
    return out


def rebuild(in_path, tmp_fd: int, tmp_path: str, new_fd: int) -> tuple[list[Fate], dict, bool]:
    """Write the output to ``new_fd``: the input's chunks with the audio libsndfile wrote in ``tmp_path``."""
    form_in, cin = read_layout(in_path)
    form_out, cout = read_layout(tmp_path)
    o_comm = next(c for c in cout if c.cid == b"COMM")
    o_ssnd = next(c for c in cout if c.cid == b"SSND")
    o_comm_p = _payload(tmp_path, o_comm)
    i_comm = next((c for c in cin if c.cid == b"COMM"), None)
    i_comm_p = _payload(in_path, i_comm) if i_comm is not None else b""
    same = i_comm is not None and _coding(form_in, i_comm_p) == _coding(form_out, o_comm_p)
    form = form_in if same else form_out
    fates, parts = [], []  # parts: bytes, or (fd, offset, length) of the audio and of large chunks
    with open(in_path, "rb") as f:
        for c in cin:
            if c.cid == b"SSND":
                # offset and blockSize of the output's SSND (8 bytes) then its samples
                parts.append(b"SSND" + struct.pack(">I", o_ssnd.size))
                parts.append((tmp_fd, o_ssnd.offset + 8, o_ssnd.size))
                if o_ssnd.size & 1:
                    parts.append(b"\x00")
                fates.append(Fate(c.name, "rewritten", "the processed audio", c.size))
            elif c.cid == b"COMM":
                p = i_comm_p if same else o_comm_p
                parts.append(b"COMM" + struct.pack(">I", len(p)) + p + b"\x00" * (len(p) & 1))
                fates.append(Fate(c.name, "carried" if same else "rewritten",
                                  "" if same else "the coding changed", c.size))
            elif c.cid == b"FVER" and form != form_in:
                fates.append(Fate(c.name, "dropped", "AIFF-C version chunk of an AIFF-C input written as AIFF "
                                  "(the coding changed)", c.size))
            elif c.stored == c.size and c.size > INLINE_MAX:  # copied by byte range, never read whole
                f.seek(c.offset)
                parts += [f.read(8), (f.fileno(), c.offset + 8, c.size)] + ([b"\x00"] if c.size & 1 else [])
                fates.append(Fate(c.name, "carried", "", c.size))
            else:
                f.seek(c.offset)
                b = f.read(8 + c.stored + (c.size & 1))
                parts.append(b + b"\x00" * (8 + c.size + (c.size & 1) - len(b)))
                fates.append(Fate(c.name, "carried", "", c.size))
        if form == b"AIFC" and form_in != b"AIFC":
            fver = next(c for c in cout if c.cid == b"FVER")
            parts.insert(0, b"FVER" + struct.pack(">I", fver.size) + _payload(tmp_path, fver))
            fates.append(Fate("FVER", "added", "the output is AIFF-C (the coding changed)", fver.size))
        total = 4 + sum(len(p) if isinstance(p, bytes) else p[2] for p in parts)
        pos = 0
        for b in [b"FORM" + struct.pack(">I", total) + form] + parts:
            if isinstance(b, bytes):
                os.pwrite(new_fd, b, pos)
                pos += len(b)
            else:
                _copy_range(b[0], b[1], new_fd, pos, b[2])
                pos += b[2]
        os.ftruncate(new_fd, pos)
    ch, frames, bits, rate, comp = _coding(form, i_comm_p if same else o_comm_p)
    return fates, {"form": form.decode(), "channels": ch, "frames": frames, "bits_per_sample": bits,
                   "rate_hz": rate, "compression": comp.decode("latin-1")}, True
