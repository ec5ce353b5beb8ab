"""Carrying a WAVE file's chunks (RIFF, RF64, BW64; BWF) over to a processed copy.

The rule, chunk by chunk, in the input's order:

- ``data``: rewritten (the processed audio, from the file libsndfile wrote);
- ``fmt ``: carried byte for byte when the coding is unchanged (so the format tag,
  the exact channel mask, 0 included, and the valid bits stay as they were;
  Microsoft WAVEFORMATEXTENSIBLE), else rebuilt from the output's with the input's
  channel mask and, for the same word length, its valid bits;
- ``ds64``: rewritten (the new sizes; EBU Tech 3306);
- ``fact``: rewritten (the output's sample count);
- ``bext``: rewritten (:mod:`audition.io.archive.bext`: one coding-history line added,
  loudness fields not carried stale);
- ``PEAK``, ``levl``, ``md5 ``: dropped: figures of the input's samples (peaks, peak
  envelope, checksum) that the processed samples no longer match;
- everything else (``LIST INFO``, ``LIST adtl``, ``cue ``, ``smpl``, ``iXML``, ``axml``,
  ``JUNK``, unknown chunks): carried byte for byte, with its pad byte. Sample
  positions in ``cue ``/``smpl``/``LIST adtl`` stay right: the frames are aligned
  one to one. The byte offsets of ``cue `` points (dwBlockStart) are scaled when the
  block align changes (:func:`cue_payload`).
"""

from __future__ import annotations

import struct

from audition.io.archive import bext as _bext
from audition.io.archive.inventory import Fate
from audition.io.archive.riff import EXTENSIBLE as _EXTENSIBLE
from audition.io.archive.riff import RIFF_MAX, Piece, parse_fmt, read_layout, read_payload, write_file

#: Chunks holding figures of the input's samples; stale once the samples change (PEAK is measured again
#: on float outputs, :func:`peak_payload`).
STALE = {b"PEAK": "peak values and positions of the input's samples, stale after filtering (measured again only "
                  "for float outputs)",
         b"levl": "peak envelope of the input's samples (EBU Tech 3285 s. 3), stale after filtering",
         b"md5 ": "checksum of the input's audio, stale after filtering"}
#: Carried chunks larger than this are copied from the input by byte range, never read whole.
INLINE_MAX = 1 << 20
_GUID_TAIL = bytes.fromhex("000000001000800000aa00389b71")


def fmt_record(p: bytes) -> dict:
    """``fmt `` fields for a sidecar (hex channel mask)."""
    f = parse_fmt(p)
    f["channel_mask"] = None if f["channel_mask"] is None else f"0x{f['channel_mask']:X}"
    return f


def _merged_fmt(fin: bytes, fout: bytes) -> tuple[bytes, str, str]:
    """The output's ``fmt `` payload: ``(payload, fate, reason)``."""
    a, b = parse_fmt(fin), parse_fmt(fout)
    same = all(a[k] == b[k] for k in ("channels", "rate_hz", "bits_per_sample", "coding", "block_align"))
    if same:
        return fin, "carried", ""
    if a["format_tag"] != _EXTENSIBLE:
        return fout, "rewritten", (f"the coding changed ({a['bits_per_sample']}-bit tag {a['coding']:#x} -> "
                                   f"{b['bits_per_sample']}-bit tag {b['coding']:#x})")
    valid = a["valid_bits"] if a["bits_per_sample"] == b["bits_per_sample"] else b["bits_per_sample"]
    p = struct.pack("<HHIIHHHHI", _EXTENSIBLE, b["channels"], b["rate_hz"], b["bytes_per_second"],
                    b["block_align"], b["bits_per_sample"], 22, valid, a["channel_mask"])
    p += struct.pack("<H", b["coding"]) + _GUID_TAIL
    return p, "rewritten", (f"the coding changed ({a['bits_per_sample']} -> {b['bits_per_sample']} bits); "
                            f"channel mask 0x{a['channel_mask']:X} kept, valid bits {a['valid_bits']} -> {valid}")


def input_valid_bits(path) -> tuple[int, int] | None:
    """``(valid bits, container bits)`` of a WAVE file whose fmt says fewer valid bits than it stores, else None."""
    lay = read_layout(path)
    c = lay and lay.first(b"fmt ")
    if c is None:
        return None
    f = parse_fmt(read_payload(path, c))
    if f["coding"] == 1 and f["valid_bits"] < f["bits_per_sample"]:
        return f["valid_bits"], f["bits_per_sample"]
    return None


def plan_fates(path, *, out_container: str, float_out: bool = False) -> list[Fate]:
    """What will become of each of the input's chunks (before anything is written)."""
    lay = read_layout(path)
    fates = []
    for c in lay.chunks:
        if c.cid == b"data":
            fates.append(Fate(c.name, "rewritten", "the processed audio", c.size))
        elif c.cid == b"fmt ":
            fates.append(Fate(c.name, "carried", "unless the coding changes", c.size))
        elif c.cid in (b"ds64", b"fact"):
            fates.append(Fate(c.name, "rewritten", "the output's sizes and sample count", c.size))
        elif c.cid == b"bext":
            fates.append(Fate(c.name, "rewritten", "one EBU R 98 coding-history line added", c.size))
        elif out_container == "W64":
            fates.append(Fate(c.name, "dropped", "a W64 output was asked for (--container w64): audition carries "
                              "no chunks into W64", c.size))
        elif c.cid in STALE and not (c.cid == b"PEAK" and float_out):
            fates.append(Fate(c.name, "dropped", STALE[c.cid], c.size))
        elif c.cid == b"PEAK":
            fates.append(Fate(c.name, "rewritten", "each channel's peak measured on the output", c.size))
        else:
            fates.append(Fate(c.name, "carried", "", c.size))
    return fates


def rebuild(in_path, tmp_fd: int, tmp_path: str, new_fd: int, *, frames: int, coding_line: str,
            true_peak_dbtp: float | None, force_64: bool = False) -> tuple[list[Fate], dict, bool]:
    """Write to ``new_fd`` the output: the input's chunks around the audio libsndfile wrote in ``tmp_path``.

    Returns the fates of the input's chunks, the output's fmt fields, and False when the
    file libsndfile wrote already is the right one (``new_fd`` then holds nothing).
    """
    src = read_layout(in_path)
    out = read_layout(tmp_path)
    odata, ofmt = out.first(b"data"), out.first(b"fmt ")
    ofmt_payload = read_payload(tmp_path, ofmt)
    ofact = out.first(b"fact")
    fates: list[Fate] = []
    pieces: list[Piece] = []
    fmt_final = ofmt_payload
    ifmt = src.first(b"fmt ")
    in_align = parse_fmt(read_payload(in_path, ifmt))["block_align"] if ifmt is not None else 0
    with open(in_path, "rb") as f:
        def carried(c) -> Piece:
            if c.stored == c.size and c.size > INLINE_MAX:
                return Piece(c.cid, source=(f.fileno(), c.data_offset, c.size))  # copied by range, not read whole
            f.seek(c.offset)
            b = f.read(8 + c.stored + (c.size & 1))
            return Piece(c.cid, b + b"\x00" * (8 + c.size + (c.size & 1) - len(b)), raw=True)

        for c in src.chunks:
            if c.cid == b"data":
                pieces.append(Piece(b"data", source=(tmp_fd, odata.data_offset, odata.stored)))
                fates.append(Fate(c.name, "rewritten", "the processed audio", c.size))
            elif c.cid == b"ds64":
                fates.append(Fate(c.name, "rewritten", "the output's sizes (EBU Tech 3306)", c.size))
            elif c.cid == b"fmt ":
                fmt_final, fate, why = _merged_fmt(read_payload(in_path, c), ofmt_payload)
                pieces.append(Piece(b"fmt ", fmt_final))
                fates.append(Fate(c.name, fate, why, c.size))
            elif c.cid == b"fact":
                pieces.append(Piece(b"fact", struct.pack("<I", min(frames, 2**32 - 1))))
                fates.append(Fate(c.name, "rewritten", "the output's sample count", c.size))
            elif c.cid == b"cue " and (cue := cue_payload(read_payload(in_path, c), in_align,
                                                           parse_fmt(ofmt_payload)["block_align"]))[1]:
                pieces.append(Piece(b"cue ", cue[0]))
                fates.append(Fate(c.name, cue[1], cue[2], c.size))
            elif c.cid == b"bext":
                payload, changes = _bext.rewrite(read_payload(in_path, c), coding_line, true_peak_dbtp=true_peak_dbtp)
                pieces.append(Piece(b"bext", payload))
                fates.append(Fate(c.name, "rewritten", "; ".join(changes), c.size))
            elif c.cid == b"PEAK" and (new_peak := peak_payload(tmp_path, odata, ofmt_payload)) is not None:
                pieces.append(Piece(b"PEAK", new_peak))
                fates.append(Fate(c.name, "rewritten", "each channel's peak and its frame measured on the output "
                                  "(time stamp 0: the same inputs give the same bytes)", c.size))
            elif c.cid in STALE:
                fates.append(Fate(c.name, "dropped", STALE[c.cid], c.size))
            else:
                pieces.append(carried(c))
                fates.append(Fate(c.name, "carried", "", c.size))
        if ofact is not None and not any(p.cid == b"fact" for p in pieces) and parse_fmt(fmt_final)["coding"] != 1:
            # a non-PCM coding needs its fact chunk (Microsoft RIFF: WAVE_FORMAT other than PCM)
            at = next(i for i, p in enumerate(pieces) if p.cid == b"fmt ") + 1
            pieces.insert(at, Piece(b"fact", struct.pack("<I", min(frames, 2**32 - 1))))
            fates.append(Fate("fact", "added", "the sample count a non-PCM coding needs", 4))
        kind = src.kind
        if kind == b"RIFF" and (force_64 or 4 + sum(p.stored for p in pieces) > RIFF_MAX):
            kind = b"RF64"
            fates.append(Fate("RIFF", "rewritten", "the output passes 4 GiB: written as RF64 (EBU Tech 3306) with a "
                              "ds64 chunk", 0))
        if kind != b"RIFF":
            pieces.insert(0, Piece(b"ds64", b"\x00" * 28))
        fmt_rec = fmt_record(fmt_final)
        if _same_as(out, tmp_path, kind, pieces):
            return fates, fmt_rec, False
        write_file(new_fd, kind, pieces, frames)
        return fates, fmt_rec, True


#: One cue point (Microsoft/IBM RIFF 1991, "cue-ck"): dwName, dwPosition, fccChunk, dwChunkStart,
#: dwBlockStart, dwSampleOffset.
_CUE_POINT = struct.Struct("<II4sIII")


def cue_payload(payload: bytes, old_align: int, new_align: int) -> tuple[bytes, str, str]:
    """The ``cue `` payload of the output: ``(payload, fate, reason)``, fate "" when it is carried as it is.

    A cue point gives its place twice: in samples (dwPosition, dwSampleOffset) and in bytes
    (dwChunkStart: where its ``data`` chunk starts in a ``wavl`` list, 0 without one;
    dwBlockStart: where the block holding it starts in that chunk's data). Samples stay
    right (the frames are aligned one to one); a non-zero dwBlockStart counts bytes of the
    input's block align, so when the output's differs (``--subtype``: 24-bit in, 16-bit out)
    it is scaled to the output's. Offsets that cannot be scaled (not a whole number of
    blocks, or inside a ``wavl`` list, which the output does not have) are left as they
    were, and the reason says so.
    """
    if old_align == new_align or old_align <= 0 or new_align <= 0 or len(payload) < 4:
        return payload, "", ""
    count = struct.unpack_from("<I", payload, 0)[0]
    count = min(count, (len(payload) - 4) // _CUE_POINT.size)
    out = bytearray(payload)
    scaled, left = 0, 0
    for k in range(count):
        at = 4 + k * _CUE_POINT.size
        name, position, fcc, chunk_start, block_start, offset = _CUE_POINT.unpack_from(payload, at)
        if block_start == 0 and chunk_start == 0:
            continue
        if chunk_start == 0 and fcc == b"data" and block_start % old_align == 0:
            _CUE_POINT.pack_into(out, at, name, position, fcc, 0, block_start // old_align * new_align, offset)
            scaled += 1
        else:
            left += 1
    if not scaled and not left:
        return payload, "", ""
    why = []
    if scaled:
        why.append(f"dwBlockStart of {scaled} cue point{'s' if scaled != 1 else ''} scaled from block align "
                   f"{old_align} to {new_align} bytes (the sample width changed); sample positions unchanged")
    if left:
        why.append(f"the byte offsets (dwChunkStart, dwBlockStart) of {left} cue point{'s' if left != 1 else ''} "
                   f"left as they were, in blocks of {old_align} bytes: not a whole number of blocks of a 'data' "
                   f"chunk, so they do not match the output's block align of {new_align}; their sample "
                   "positions (dwPosition, dwSampleOffset) are right")
    return bytes(out), "rewritten" if scaled else "carried", "; ".join(why)


def peak_payload(tmp_path, data, fmt_payload: bytes) -> bytes | None:
    """A PEAK payload measured on a float output's samples, or None for other codings.

    The PEAK chunk (a float-WAVE convention with no published standard; layout as libsndfile
    writes it: version 1, a time stamp, then per channel a float32 peak and the uint32 frame
    where it is), read in blocks from the file libsndfile wrote.
    """
    import numpy as np

    f = parse_fmt(fmt_payload)
    if f["coding"] != 3 or f["bits_per_sample"] not in (32, 64):
        return None
    dtype = np.dtype("<f4" if f["bits_per_sample"] == 32 else "<f8")
    ch = f["channels"]
    frames = data.stored // (dtype.itemsize * ch)
    x = np.memmap(tmp_path, dtype=dtype, mode="r", offset=data.data_offset, shape=(frames, ch))
    peak, where = np.zeros(ch), np.zeros(ch, dtype=np.int64)
    for i in range(0, frames, 1 << 18):
        a = np.abs(x[i:i + (1 << 18)])
        k = a.argmax(axis=0)
        v = a[k, np.arange(ch)]
        better = v > peak
        peak[better], where[better] = v[better], k[better] + i
    del x
    return struct.pack("<II", 1, 0) + b"".join(struct.pack("<fI", float(p), int(w)) for p, w in zip(peak, where))


def _same_as(out, tmp_path, kind, pieces) -> bool:
    """True when libsndfile's file already has exactly these chunks (so a plain WAV stays as libsndfile wrote it)."""
    if out.kind != kind or len(out.chunks) != len(pieces):
        return False
    for c, p in zip(out.chunks, pieces):
        if c.cid != p.cid:
            return False
        if p.source is not None and p.cid != b"data":
            return False  # a large chunk of the input's, which libsndfile did not write
        if p.source is not None or p.cid == b"ds64":
            continue
        mine = p.payload[8:8 + p.size] if p.raw else p.payload
        if read_payload(tmp_path, c) != mine:
            return False
    return True


def fmt_of(path) -> dict | None:
    lay = read_layout(path)
    c = lay and lay.first(b"fmt ")
    return fmt_record(read_payload(path, c)) if c is not None else None


__all__ = ["plan_fates", "rebuild", "input_valid_bits", "parse_fmt", "fmt_record", "fmt_of", "STALE"]
