"""RIFF, RF64 and BW64 files as a list of chunks: read the list, write a file from one.

A WAVE file is a 12-byte header (``RIFF``/``RF64``/``BW64``, a 32-bit size, ``WAVE``)
then chunks: a four-character id, a 32-bit little-endian size, the payload, and one
pad byte when the size is odd (Microsoft/IBM RIFF, 1991; EBU Tech 3285 s. 2). RF64
(EBU Tech 3306) and BW64 (ITU-R BS.2088) put 0xFFFFFFFF in the 32-bit sizes that
overflow and give the real ones in a ``ds64`` chunk right after the header: the
RIFF size, the ``data`` size, the sample count, then a table of other chunks'
sizes.

Only the chunk list is read here (ids, sizes, where each payload is); payloads are
read or copied on demand, so a file of any length costs a few reads.
"""

from __future__ import annotations

import os
import struct
from dataclasses import dataclass

RIFF_IDS = (b"RIFF", b"RF64", b"BW64")
#: A 32-bit size field that says "see ds64" (EBU Tech 3306 s. 3; ITU-R BS.2088 s. 4).
SEE_DS64 = 0xFFFFFFFF
#: Largest RIFF file: its size field counts the file less 8 bytes in 32 bits.
RIFF_MAX = 2**32 - 1


@dataclass(frozen=True)
class Chunk:
    """One chunk of a RIFF-family file.

    Attributes
    ----------
    cid : bytes
        Four-character id (``b"fmt "``, ``b"data"``...).
    offset : int
        Where its 8-byte header starts in the file.
    size : int
        The payload's size, bytes (from ds64 when the 32-bit field says 0xFFFFFFFF).
    stored : int
        Payload bytes actually present in the file (less than ``size`` when truncated).
    list_type : bytes or None
        For ``LIST`` chunks, the list's form type (``b"INFO"``, ``b"adtl"``).
    """

    cid: bytes
    offset: int
    size: int
    stored: int
    list_type: bytes | None = None

    @property
    def data_offset(self) -> int:
        return self.offset + 8

    @property
    def name(self) -> str:
        """The id as text, with the list type for LIST chunks (``"LIST INFO"``)."""
        n = self.cid.decode("latin-1")
        return n + " " + self.list_type.decode("latin-1") if self.list_type is not None else n


@dataclass(frozen=True)
class RiffLayout:
    """The header and the chunk list of a RIFF/RF64/BW64 WAVE file."""

    kind: bytes          # b"RIFF", b"RF64" or b"BW64"
    chunks: tuple[Chunk, ...]
    file_size: int
    sample_count: int | None = None   # from ds64, when there is one

    def first(self, cid: bytes) -> Chunk | None:
        return next((c for c in self.chunks if c.cid == cid), None)


def sniff(head: bytes) -> bytes | None:
    """``b"RIFF"``, ``b"RF64"`` or ``b"BW64"`` when ``head`` (12 bytes or more) opens a WAVE file, else None."""
    if len(head) >= 12 and head[:4] in RIFF_IDS and head[8:12] == b"WAVE":
        return head[:4]
    return None


def read_layout(path) -> RiffLayout | None:
    """The chunk list of a WAVE file, or None when ``path`` is not one.

    Tolerates what archives hold: odd sizes with their pad byte (and a missing pad
    byte at the very end), a truncated last chunk, a ds64 table, and a ``data``
    size of 0xFFFFFFFF or 0 in RF64/BW64 (then the ds64 size, or the rest of the file).
    """
    with open(path, "rb") as f:
        head = f.read(12)
        kind = sniff(head)
        if kind is None:
            return None
        size = os.fstat(f.fileno()).st_size
        ds64 = {}
        table = {}
        chunks = []
        pos = 12
        while pos + 8 <= size:
            f.seek(pos)
            h = f.read(8)
            cid, n = h[:4], struct.unpack("<I", h[4:])[0]
            if cid == b"ds64" and kind != b"RIFF" and not chunks:
                body = f.read(min(n, 1 << 16))
                if len(body) >= 28:
                    riff_size, data_size, samples, count = struct.unpack("<QQQI", body[:28])
                    ds64 = {"riff": riff_size, "data": data_size, "samples": samples}
                    for k in range(count):
                        e = body[28 + 12 * k: 40 + 12 * k]
                        if len(e) == 12:
                            table[e[:4]] = struct.unpack("<Q", e[4:])[0]
            if n == SEE_DS64 and kind != b"RIFF":
                n = ds64.get("data") if cid == b"data" else table.get(cid, n)
                if n is None:
                    n = size - pos - 8
            elif cid == b"data" and kind != b"RIFF" and n == 0 and ds64.get("data"):
                n = ds64["data"]
            stored = max(0, min(n, size - pos - 8))
            lt = None
            if cid == b"LIST" and n >= 4:
                f.seek(pos + 8)
                lt = f.read(4)
            chunks.append(Chunk(cid, pos, n, stored, lt))
            pos += 8 + n + (n & 1)
        return RiffLayout(kind, tuple(chunks), size, ds64.get("samples"))


def read_payload(path, chunk: Chunk, limit: int = 1 << 26) -> bytes:
    """The payload of a (small) chunk, as stored."""
    if chunk.stored > limit:
        raise ValueError(f"chunk {chunk.name!r} of {chunk.stored} bytes is too large to read whole")
    with open(path, "rb") as f:
        f.seek(chunk.data_offset)
        return f.read(chunk.stored)


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Piece:
    """A chunk of the file being built: its id and either its payload or a range of another file.

    ``source`` is ``(fd, offset, length)`` for a payload copied from an open file
    (the audio), else ``payload`` holds the bytes. ``raw`` True writes ``payload``
    as it is, header included (a chunk carried byte for byte with its pad byte).
    """

    cid: bytes
    payload: bytes = b""
    source: tuple[int, int, int] | None = None
    raw: bool = False

    @property
    def size(self) -> int:
        if self.raw:
            return struct.unpack("<I", self.payload[4:8])[0]
        return self.source[2] if self.source is not None else len(self.payload)

    @property
    def stored(self) -> int:
        """Bytes this piece takes in the file, header and pad byte included."""
        if self.raw:
            return len(self.payload)
        if self.cid == b"ds64":
            return 36  # written with its 28-byte payload whatever the piece holds
        n = self.size
        return 8 + n + (n & 1)


def ds64_payload(riff_size: int, data_size: int, samples: int) -> bytes:
    """A ds64 payload with no table (EBU Tech 3306 s. 3.2: riffSize, dataSize, sampleCount, tableLength)."""
    return struct.pack("<QQQI", riff_size, data_size, samples, 0)


def needs_64(pieces) -> bool:
    """True when a RIFF file of these pieces would pass the 32-bit size limit."""
    return 4 + sum(p.stored for p in pieces) > RIFF_MAX


def write_file(fd: int, kind: bytes, pieces, samples: int) -> int:
    """Write a WAVE file of ``pieces`` to ``fd`` (at its start); returns its size in bytes.

    ``kind`` ``b"RIFF"`` writes 32-bit sizes (the caller has checked they fit);
    ``b"RF64"``/``b"BW64"`` write 0xFFFFFFFF in the RIFF and ``data`` sizes and the
    real ones in the ds64 chunk, which must be the first piece.
    """
    total = 4 + sum(p.stored for p in pieces)
    big = kind != b"RIFF"
    pos = 0

    def put(b: bytes):
        nonlocal pos
        view = memoryview(b)
        while view:
            n = os.pwrite(fd, view, pos)
            view = view[n:]
            pos += n

    put(kind + struct.pack("<I", SEE_DS64 if big else total) + b"WAVE")
    for p in pieces:
        if p.raw:
            put(p.payload)
            continue
        n = p.size
        if p.cid == b"ds64":
            data = next(q for q in pieces if q.cid == b"data")
            put(b"ds64" + struct.pack("<I", 28) + ds64_payload(total, data.size, samples))
            continue
        field = SEE_DS64 if big and (p.cid == b"data" or n > RIFF_MAX) else n
        put(p.cid + struct.pack("<I", field))
        if p.source is not None:
            sfd, off, length = p.source
            _copy_range(sfd, off, fd, pos, length)
            pos += length
        else:
            put(p.payload)
        if n & 1:
            put(b"\x00")
    os.ftruncate(fd, pos)
    return pos


def _copy_range(src: int, src_off: int, dst: int, dst_off: int, length: int) -> None:
    """Copy ``length`` bytes between two files by offset (the kernel's copy where it has one)."""
    done = 0
    copy = getattr(os, "copy_file_range", None)
    while done < length:
        n = 0
        if copy is not None:
            try:
                n = copy(src, dst, min(length - done, 1 << 30), src_off + done, dst_off + done)
            except OSError:
                copy = None
                n = 0
        if n <= 0:
            buf = os.pread(src, min(length - done, 1 << 22), src_off + done)
            if not buf:
                raise OSError(f"short read copying audio ({done} of {length} bytes)")
            view = memoryview(buf)
            while view:
                w = os.pwrite(dst, view, dst_off + done)
                view = view[w:]
                done += w
        else:
            done += n


# ---------------------------------------------------------------------------
# Reading what libsndfile refuses: RF64/BW64 with odd-sized chunks, BW64 itself
# ---------------------------------------------------------------------------


class Window:
    """A file-like view of the bytes ``[start, start + length)`` of an open binary file (for soundfile's virtual I/O)."""

    def __init__(self, raw, start: int, length: int):
        self._raw, self._start, self._len, self._pos = raw, start, length, 0

    def seek(self, offset, whence=os.SEEK_SET):
        base = {os.SEEK_SET: 0, os.SEEK_CUR: self._pos, os.SEEK_END: self._len}[whence]
        self._pos = max(0, base + offset)
        return self._pos

    def tell(self):
        return self._pos

    def read(self, n=-1):
        left = max(0, self._len - self._pos)
        n = left if n is None or n < 0 else min(n, left)
        self._raw.seek(self._start + self._pos)
        b = self._raw.read(n)
        self._pos += len(b)
        return b

    def readinto(self, buf):
        b = self.read(len(buf))
        buf[:len(b)] = b
        return len(b)


#: WAVE_FORMAT_EXTENSIBLE, the format tag of a fmt chunk with valid bits, channel mask and sub-format.
EXTENSIBLE = 0xFFFE


def parse_fmt(p: bytes) -> dict:
    """The fields of a ``fmt `` payload (Microsoft WAVEFORMATEX / WAVEFORMATEXTENSIBLE)."""
    tag, ch, rate, avg, align, bits = struct.unpack_from("<HHIIHH", p, 0)
    out = {"format_tag": tag, "channels": ch, "rate_hz": rate, "bytes_per_second": avg, "block_align": align,
           "bits_per_sample": bits, "valid_bits": bits, "channel_mask": None, "coding": tag}
    if tag == EXTENSIBLE and len(p) >= 40:
        valid, mask = struct.unpack_from("<HI", p, 18)
        out.update(valid_bits=valid or bits, channel_mask=mask, coding=struct.unpack_from("<H", p, 24)[0],
                   sub_format=p[24:40].hex())
    return out


def open_wave64(path, raw):
    """Open an RF64/BW64 file's audio as raw PCM/float through :class:`Window`, or return None.

    For the files libsndfile 1.2 refuses ("No 'data' chunk marker" when a chunk before
    ``data`` has an odd size; "Format not recognised" for BW64): the chunk list is read
    here and libsndfile reads the samples as headerless data. ``raw`` is the open input
    (read through from the start, so a hashing reader hashes in order).

    Returns ``(soundfile.SoundFile, format, subtype)``.
    """
    import soundfile as sf

    lay = read_layout(path)
    if lay is None or lay.kind == b"RIFF":
        return None
    fmt, data = lay.first(b"fmt "), lay.first(b"data")
    if fmt is None or data is None:
        return None
    f = parse_fmt(read_payload(path, fmt))
    subtype = {(1, 8): "PCM_U8", (1, 16): "PCM_16", (1, 24): "PCM_24", (1, 32): "PCM_32", (3, 32): "FLOAT",
               (3, 64): "DOUBLE"}.get((f["coding"], f["bits_per_sample"]))
    if subtype is None or f["channels"] < 1 or f["block_align"] != f["channels"] * f["bits_per_sample"] // 8:
        return None
    raw.seek(0)
    raw.read(data.data_offset)  # the header, read (and hashed) in order
    stored = data.stored - data.stored % f["block_align"]
    snd = sf.SoundFile(Window(raw, data.data_offset, stored), mode="r", samplerate=f["rate_hz"],
                       channels=f["channels"], format="RAW", subtype=subtype, endian="LITTLE")
    return snd, "RF64", subtype
