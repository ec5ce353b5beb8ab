"""Carrying a FLAC file's metadata blocks over to a processed copy, with mutagen.

Block by block (FLAC format specification, "METADATA_BLOCK"): STREAMINFO rewritten
(the output's, with the MD5 of the processed samples); SEEKTABLE rebuilt from the
output's frames (:func:`seek_points`); VORBIS_COMMENT carried comment by comment,
in order, with repeated keys, custom keys and the case of every field name, plus
one ``PROCESSING`` comment for this step; its vendor string names the encoder that
wrote the output's frames (the input's is kept in the inventory: in the reason, and
verbatim as ``input_vendor``); PICTURE,
CUESHEET, APPLICATION and unknown blocks carried byte for byte; PADDING made anew
by mutagen. mutagen edits the file in place, so the temporary file keeps its inode.
"""

from __future__ import annotations

import os

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
                              f"{b.vendor!r}, kept verbatim in input_vendor)", _size(b),
                              extra=(("input_vendor", b.vendor),)))
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
#
# The output may be longer than memory (an hour at 96 kHz/24-bit stereo is over 1 GB of
# FLAC), so it is never read whole: the search reads windows of at most WINDOW_MAX bytes,
# finds candidate sync codes (0xFFF8, 0xFFF9) in them with numpy, and parses only those.
# Frames are in order and, in a fixed-blocksize stream, frame n starts at sample
# n * blocksize, so each seek point is the first frame whose first sample is at or past
# the wanted one: exactly one frame number. The search jumps to where that frame should
# be (the bytes per sample of the stretch before), backs off by growing steps when it
# lands past it, and reads forward from there; the header's CRC-8 is computed only for
# a candidate whose number could be the one wanted (or shows the search went past it).

#: Bytes of the first and the largest window read at a time.
WINDOW_MIN, WINDOW_MAX = 1 << 16, 1 << 20
#: Longest frame header, CRC-8 included (FLAC format spec: 2 + 2 + 7 + 2 + 2 + 1 bytes).
_HEADER_MAX = 16


def _crc8_table() -> tuple[int, ...]:
    table = []
    for n in range(256):
        crc = n
        for _ in range(8):
            crc = ((crc << 1) ^ 0x07) & 0xFF if crc & 0x80 else (crc << 1) & 0xFF
        table.append(crc)
    return tuple(table)


_CRC8 = _crc8_table()


def _crc8(data) -> int:
    """CRC-8 of a frame header, polynomial x^8 + x^2 + x + 1, initial 0 (FLAC format spec)."""
    crc = 0
    for byte in data:
        crc = _CRC8[crc ^ byte]
    return crc


def _header(buf, i: int):
    """``(coded number, samples, variable, crc index)`` of a frame header candidate at ``buf[i]``, or None.

    Reserved values are refused (FLAC format spec, "FRAME_HEADER"): block size 0, sample rate
    0b1111, channel assignments past 0b1010, sample size 0b011, the reserved bits; the coded
    number is UTF-8-like, 1 to 7 bytes. The CRC-8 is not checked here.
    """
    try:
        if buf[i] != 0xFF or buf[i + 1] & 0xFE != 0xF8:
            return None
        variable = buf[i + 1] & 1
        b2, b3 = buf[i + 2], buf[i + 3]
        bs_code, sr_code = b2 >> 4, b2 & 0x0F
        if bs_code == 0 or sr_code == 0x0F or (b3 >> 4) > 0x0A or (b3 >> 1) & 7 == 3 or b3 & 1:
            return None
        j = i + 4
        first = buf[j]
        n_extra = 0
        while n_extra < 8 and first & (0x80 >> n_extra):
            n_extra += 1
        if n_extra == 1 or n_extra == 8:
            return None
        value = first & (0x7F >> n_extra) if n_extra else first
        for k in range(1, n_extra):
            b = buf[j + k]
            if b & 0xC0 != 0x80:
                return None
            value = (value << 6) | (b & 0x3F)
        j += max(1, n_extra)
        if bs_code == 6:
            samples = buf[j] + 1
            j += 1
        elif bs_code == 7:
            samples = (buf[j] << 8 | buf[j + 1]) + 1
            j += 2
        elif bs_code == 1:
            samples = 192
        else:
            samples = 576 << (bs_code - 2) if bs_code <= 5 else 256 << (bs_code - 8)
        j += {12: 1, 13: 2, 14: 2}.get(sr_code, 0)
        buf[j]  # the CRC-8 byte is there
        return value, samples, variable, j
    except IndexError:  # a header cut by the end of the window or of the file
        return None


class _Frames:
    """Frame headers of an open FLAC file, found by reading windows forward from an offset."""

    def __init__(self, fd: int, size: int, block: int, total: int):
        self.fd, self.size, self.block, self.total = fd, size, block, total

    def find(self, pos: int, want: int, span: int, stop_past: bool):
        """The first frame at or after byte ``pos`` whose first sample is in ``[want, want + span)``.

        Returns ``("hit", offset, first sample, samples)``; ``("past", offset)`` for a frame that
        starts later than that (only when ``stop_past``: the search landed beyond the frame
        wanted); ``("end",)`` at the end of the file.
        """
        import numpy as np

        window = WINDOW_MIN
        while pos < self.size:
            buf = os.pread(self.fd, window + _HEADER_MAX, pos)
            if len(buf) < 2:
                break
            a = np.frombuffer(buf, dtype=np.uint8)
            n = min(window, len(buf) - 1)
            for i in np.flatnonzero((a[:n] == 0xFF) & ((a[1:n + 1] & 0xFE) == 0xF8)).tolist():
                h = _header(buf, i)
                if h is None:
                    continue
                number, samples, variable, j = h
                first = number if variable else number * self.block
                if first < want or (self.total and first >= self.total):
                    continue  # an earlier frame, or no frame of this stream
                if first >= want + span and not stop_past:
                    continue
                if _crc8(buf[i:j]) != buf[j]:
                    continue  # bytes of some frame's audio that look like a header
                if first < want + span:
                    return "hit", pos + i, first, samples
                return "past", pos + i
            pos += n
            window = min(2 * window, WINDOW_MAX)
        return ("end",)


def seek_points(path, spacing: int) -> list[tuple[int, int, int]]:
    """``(first sample, byte offset from the first frame, samples)`` of frames every ``spacing`` samples.

    For each wanted sample 0, ``spacing``, 2 ``spacing``... the first frame that starts at
    or after it (FLAC format spec, "SEEKTABLE"). The file is read in windows of at most
    :data:`WINDOW_MAX` bytes, around where each frame wanted should be.
    """
    from mutagen.flac import FLAC

    info = FLAC(path).metadata_blocks[0]
    block, total = info.max_blocksize, info.total_samples
    span = info.max_blocksize  # the frame wanted starts less than one block after the sample wanted
    # jumps only where one frame number answers (fixed block size); else read forward from the last point
    fixed = info.min_blocksize == info.max_blocksize
    fd = os.open(path, os.O_RDONLY)
    try:
        size = os.fstat(fd).st_size
        start = _audio_start(fd)
        frames = _Frames(fd, size, block, total)
        points: list[tuple[int, int, int]] = []
        lo, lo_sample = start, 0          # a frame start at or before the next frame wanted
        rate = (size - start) / total if total else 0.0   # bytes per sample, the whole file's
        want = 0
        while not total or want < total:
            guess = lo
            if points and rate and fixed:
                guess = max(lo, lo + int((want - lo_sample) * rate) - WINDOW_MIN)
            step = WINDOW_MIN
            while True:
                r = frames.find(guess, want, span, stop_past=guess > lo)
                if r[0] == "hit" or guess == lo:
                    break
                guess, step = max(lo, guess - step), 2 * step  # landed past it: back off by growing steps
            if r[0] != "hit":
                break  # no such frame: the stream ends (or is damaged) before it
            _, off, first, samples = r
            if points:
                rate = (off - lo) / max(1, first - lo_sample)
            points.append((first, off - start, samples))
            lo, lo_sample = off + 1, first
            want = (first // spacing + 1) * spacing
        return points
    finally:
        os.close(fd)


def _audio_start(fd: int) -> int:
    """Where the first frame starts: after the 4-byte marker and every metadata block (FLAC format spec)."""
    i = 4
    while True:
        head = os.pread(fd, 4, i)
        if len(head) < 4:
            raise ValueError("the FLAC metadata blocks run past the end of the file")
        last, n = head[0] & 0x80, int.from_bytes(head[1:4], "big")
        i += 4 + n
        if last:
            return i
