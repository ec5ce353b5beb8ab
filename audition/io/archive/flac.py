"""Carrying a FLAC file's metadata blocks over to a processed copy, with mutagen.

Block by block (FLAC format specification, "METADATA_BLOCK"): STREAMINFO rewritten
(the output's, with the MD5 of the processed samples); SEEKTABLE rebuilt from the
output's frames (:func:`seek_points`); VORBIS_COMMENT carried comment by comment,
in order, with repeated keys, custom keys and the case of every field name, plus
one ``PROCESSING`` comment for this step; its vendor string names the encoder that
wrote the output's frames (the input's is kept in the inventory's reason); PICTURE,
CUESHEET, APPLICATION and unknown blocks carried byte for byte; PADDING made anew
by mutagen. mutagen edits the file in place, so the temporary file keeps its inode.
"""

from __future__ import annotations

import struct

from audition.io.archive.inventory import Fate

#: The field name of the comment each processing step adds (one per step, kept by later steps).
PROCESSING_KEY = "PROCESSING"
_NAMES = {0: "STREAMINFO", 1: "PADDING", 2: "APPLICATION", 3: "SEEKTABLE", 4: "VORBIS_COMMENT", 5: "CUESHEET",
          6: "PICTURE"}


def _name(block) -> str:
    return _NAMES.get(block.code, f"block type {block.code}")


def _size(block) -> int:
    try:
        return len(block.write())
    except Exception:  # a block mutagen cannot serialise is reported with no size
        return 0


def plan_fates(path) -> list[Fate]:
    from mutagen.flac import FLAC

    out = []
    for b in FLAC(path).metadata_blocks:
        code = b.code
        fate, why = {0: ("rewritten", "the output's stream figures and MD5"), 1: ("rewritten", "padding made anew"),
                     3: ("rewritten", "seek points rebuilt on the output's frames"),
                     4: ("carried", "every comment, in order, with its case; a PROCESSING comment added")}.get(
                         code, ("carried", ""))
        out.append(Fate(_name(b), fate, why, _size(b)))
    return out


def rebuild(in_path, tmp_path: str, processing: str) -> tuple[list[Fate], dict]:
    """Put the input's metadata blocks into the FLAC file libsndfile wrote at ``tmp_path`` (in place)."""
    from mutagen.flac import FLAC, SeekPoint, SeekTable, VCFLACDict

    src, out = FLAC(in_path), FLAC(tmp_path)
    info = out.metadata_blocks[0]
    vendor = out.tags.vendor if out.tags is not None else ""
    blocks, fates = [info], []
    for b in src.metadata_blocks:
        name = _name(b)
        if b.code == 0:
            fates.append(Fate(name, "rewritten", "the output's stream figures and MD5", _size(b)))
        elif b.code == 1:
            fates.append(Fate(name, "rewritten", "padding made anew", _size(b)))
        elif b.code == 3:
            spacing = _spacing(b, src.metadata_blocks[0].total_samples)
            table = SeekTable(None)
            table.seekpoints = [SeekPoint(*p) for p in seek_points(tmp_path, spacing)]
            blocks.append(table)
            fates.append(Fate(name, "rewritten", f"{len(table.seekpoints)} seek points rebuilt on the output's "
                              f"frames, every {spacing} samples as in the input", _size(b)))
        elif b.code == 4:
            tags = VCFLACDict()
            tags.vendor = vendor
            tags.extend(list(b))  # (key, value) pairs as stored: order, repeats and case kept
            tags.append((PROCESSING_KEY, processing))
            blocks.append(tags)
            fates.append(Fate(name, "carried", f"all {len(b)} comments kept in order with their field names' case; "
                              f"vendor string rewritten to the output's encoder {vendor!r} (the input's was "
                              f"{b.vendor!r})", _size(b)))
            fates.append(Fate(f"VORBIS_COMMENT {PROCESSING_KEY}", "added", processing, len(processing)))
        else:
            blocks.append(b)
            fates.append(Fate(name, "carried", "", _size(b)))
    if not any(b.code == 4 for b in src.metadata_blocks):
        tags = VCFLACDict()
        tags.vendor = vendor
        tags.append((PROCESSING_KEY, processing))
        blocks.append(tags)
        fates.append(Fate(f"VORBIS_COMMENT {PROCESSING_KEY}", "added", processing, len(processing)))
    out.metadata_blocks[:] = blocks
    out.tags = next((b for b in blocks if b.code == 4), None)
    out.seektable = next((b for b in blocks if b.code == 3), None)
    out.cuesheet = next((b for b in blocks if b.code == 5), None)
    out.save()
    return fates, {"rate_hz": info.sample_rate, "channels": info.channels, "bits_per_sample": info.bits_per_sample,
                   "frames": info.total_samples, "md5": f"{info.md5_signature:032x}"}


def _spacing(table, total: int) -> int:
    """The input's seek-point spacing in samples (placeholders left out), or 10 s at 44.1 kHz."""
    pts = [p.first_sample for p in table.seekpoints if p.first_sample != 0xFFFFFFFFFFFFFFFF]
    if len(pts) >= 2:
        return max(1, (pts[-1] - pts[0]) // (len(pts) - 1))
    return max(1, min(total or 441000, 441000))


# ---------------------------------------------------------------------------
# Seek points: frame headers found in the output (FLAC format spec, "FRAME_HEADER")
# ---------------------------------------------------------------------------


def _crc8(data: bytes) -> int:
    """CRC-8 of a frame header, polynomial x^8 + x^2 + x + 1, initial 0 (FLAC format spec)."""
    crc = 0
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = ((crc << 1) ^ 0x07) & 0xFF if crc & 0x80 else (crc << 1) & 0xFF
    return crc


def _frame_at(buf: bytes, i: int, fixed_block: int, rate_bits_ok=True):
    """``(first sample, samples)`` of a frame header at ``buf[i]``, or None when there is none."""
    if buf[i] != 0xFF or buf[i + 1] & 0xFE != 0xF8:
        return None
    variable = buf[i + 1] & 1
    bs_code, sr_code = buf[i + 2] >> 4, buf[i + 2] & 0x0F
    if bs_code == 0 or sr_code == 0x0F or (buf[i + 3] >> 4) > 0x0C or buf[i + 3] & 1:
        return None
    # the coded number (UTF-8-like): frame number (fixed blocks) or sample number (variable)
    j = i + 4
    first = buf[j]
    n_extra = 0
    while n_extra < 7 and first & (0x80 >> n_extra):
        n_extra += 1
    if n_extra == 1 or n_extra > 7:
        return None
    value = first & (0x7F >> n_extra) if n_extra else first
    extra = max(0, n_extra - 1)
    for k in range(extra):
        b = buf[j + 1 + k]
        if b & 0xC0 != 0x80:
            return None
        value = (value << 6) | (b & 0x3F)
    j += 1 + extra
    if bs_code == 6:
        samples = buf[j] + 1
        j += 1
    elif bs_code == 7:
        samples = struct.unpack(">H", buf[j:j + 2])[0] + 1
        j += 2
    else:
        samples = {1: 192}.get(bs_code) or (576 << (bs_code - 2) if bs_code <= 5 else 256 << (bs_code - 8))
    j += {12: 1, 13: 2, 14: 2}.get(sr_code, 0)
    if _crc8(buf[i:j]) != buf[j]:
        return None
    return (value if variable else value * fixed_block), samples


def seek_points(path, spacing: int) -> list[tuple[int, int, int]]:
    """``(first sample, byte offset from the first frame, samples)`` of frames every ``spacing`` samples."""
    from mutagen.flac import FLAC

    f = FLAC(path)
    block = f.metadata_blocks[0].max_blocksize
    with open(path, "rb") as fh:
        data = fh.read()
    start = _audio_start(data)
    points, want, i = [], 0, start
    end = len(data) - 16
    while i < end:
        if data[i] == 0xFF:
            fr = _frame_at(data, i, block)
            if fr is not None:
                first, samples = fr
                if first >= want:
                    points.append((first, i - start, samples))
                    want = (first // spacing + 1) * spacing
                i += 2
                continue
        i = data.find(b"\xff", i + 1)
        if i < 0:
            break
    return points


def _audio_start(data: bytes) -> int:
    i = 4
    while True:
        last, code = data[i] & 0x80, data[i] & 0x7F
        n = int.from_bytes(data[i + 1:i + 4], "big")
        i += 4 + n
        if last:
            return i
