"""Archive metadata: every chunk and tag of an input carried over to the rendered output (issue 15).

The inputs are built here chunk by chunk (this file's own writer, seeded data), rendered
through the command line and through batch, and their chunk lists compared byte for
byte with the output's. Sources: Microsoft/IBM RIFF (1991) and WAVEFORMATEXTENSIBLE
for the chunk and fmt layouts, EBU Tech 3285 v2 (bext), EBU R 98 (coding history),
EBU Tech 3306 (RF64), ITU-R BS.2088 (BW64), Apple AIFF 1.3, the FLAC format
specification; bext fields are read back with the outside reader ``wavinfo``, FLAC
blocks with ``mutagen``.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import struct

import numpy as np
import pytest

from audition.cli import main

RENDER = ["--f0", "9000", "--q", "0.7071", "--quiet"]
_PCM_GUID = bytes.fromhex("0100000000001000800000aa00389b71")  # KSDATAFORMAT_SUBTYPE_PCM (Microsoft)
_FLOAT_GUID = bytes.fromhex("0300000000001000800000aa00389b71")  # KSDATAFORMAT_SUBTYPE_IEEE_FLOAT


# ---------------------------------------------------------------------------
# Building files chunk by chunk (this test's own writer)
# ---------------------------------------------------------------------------


def chunk(cid: bytes, payload: bytes) -> bytes:
    """A RIFF chunk: id, 32-bit little-endian size, payload, pad byte when odd (Microsoft/IBM RIFF)."""
    return cid + struct.pack("<I", len(payload)) + payload + (b"\0" if len(payload) & 1 else b"")


def bext_payload(history: bytes) -> bytes:
    """A version-2 bext payload (EBU Tech 3285 v2 s. 2.3 field widths)."""
    p = b"Reel 12 side A".ljust(256, b"\0") + b"Archive".ljust(32, b"\0") + b"REF-0012".ljust(32, b"\0")
    p += b"2024:05:01" + b"12:00:00" + struct.pack("<IIH", 123456789, 1, 2) + bytes(range(64))
    p += struct.pack("<5h", -2300, 500, -100, -1500, -1800) + bytes(180)
    return p + history


HISTORY = b"A=ANALOGUE,M=stereo,T=tape deck;7.5 ips\r\nA=PCM,F=48000,W=24,M=stereo,T=transfer 1\r\n"


def archive_chunks(frames: int) -> list[bytes]:
    """The chunks an archive transfer carries besides fmt and data: odd sizes, Latin-1 text, markers."""
    info = (chunk(b"IARL", b"Archiv M\xfcnchen\0") + chunk(b"ICMT", b"transfer 1, no processing\0")
            + chunk(b"ISFT", b"Capture 3\0") + chunk(b"ITCH", b"J. M\xfcller\0") + chunk(b"ISRC", b"tape\0"))
    cue = struct.pack("<I", 2) + struct.pack("<II4sIII", 1, 0, b"data", 0, 0, frames // 5) + \
        struct.pack("<II4sIII", 2, 0, b"data", 0, 0, frames // 2)
    adtl = (chunk(b"labl", struct.pack("<I", 1) + b"start\0") + chunk(b"note", struct.pack("<I", 2) + b"click\0")
            + chunk(b"ltxt", struct.pack("<IIIHHHH", 1, frames // 10, 0x72676E20, 0, 0, 0, 0) + b"reg"))
    smpl = struct.pack("<9I", 0, 0, 20833, 60, 0, 0, 0, 1, 0) + struct.pack("<6I", 0, 0, frames // 5, frames // 2, 0, 0)
    return [chunk(b"bext", bext_payload(HISTORY + b"A=PCM,F=48000,W=24,M=stereo,T=odd\r\n")),  # 701 bytes: odd
            chunk(b"iXML", b'<?xml version="1.0"?><BWFXML><PROJECT>t</PROJECT></BWFXML>'),  # 57: odd
            chunk(b"axml", b"<ebuCoreMain/>"), chunk(b"LIST", b"INFO" + info), chunk(b"cue ", cue),
            chunk(b"LIST", b"adtl" + adtl), chunk(b"smpl", smpl), chunk(b"JUNK", bytes(9)),
            chunk(b"zzzz", b"unknown chunk, kept")]


def samples(frames: int, channels: int, bits: int, valid: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = np.round(rng.standard_normal((frames, channels)) * 0.1 * 2 ** (valid - 1)).astype(np.int64)
    return np.clip(x, -2 ** (valid - 1), 2 ** (valid - 1) - 1) << (bits - valid)


def build_wave(path, *, channels=2, bits=24, valid=None, mask=None, kind=b"RIFF", extra=(), frames=4800,
               rate=48000, float_samples=False, seed=1):
    """A WAVE file: fmt (plain or WAVEFORMATEXTENSIBLE with ``mask``), ``extra`` chunks, data."""
    valid = valid or bits
    if float_samples:
        x = np.random.default_rng(seed).standard_normal((frames, channels)).astype("<f4") * 0.1
        data, tag, bits = x.tobytes(), 3, 32
    else:
        x = samples(frames, channels, bits, valid, seed)
        data = b"".join(int(v).to_bytes(bits // 8, "little", signed=True) for v in x.ravel())
        tag = 1
    align = channels * bits // 8
    if mask is None:
        fmt = struct.pack("<HHIIHH", tag, channels, rate, rate * align, align, bits)
    else:
        fmt = struct.pack("<HHIIHHHHI", 0xFFFE, channels, rate, rate * align, align, bits, 22, valid, mask)
        fmt += _FLOAT_GUID if float_samples else _PCM_GUID
    body = [chunk(b"fmt ", fmt)] + ([chunk(b"fact", struct.pack("<I", frames))] if float_samples else [])
    body += list(extra)
    big = kind != b"RIFF"
    body.append(b"data" + struct.pack("<I", 0xFFFFFFFF if big else len(data)) + data + b"\0" * (len(data) & 1))
    b = b"".join(body)
    if big:  # ds64 first (EBU Tech 3306 s. 3; ITU-R BS.2088)
        b = chunk(b"ds64", struct.pack("<QQQI", 4 + 36 + len(b), len(data), frames, 0)) + b
    with open(path, "wb") as f:
        f.write(kind + struct.pack("<I", 0xFFFFFFFF if big else 4 + len(b)) + b"WAVE" + b)


def wave_chunks(path) -> list[tuple[bytes, bytes]]:
    """``(id, payload with pad byte)`` of every chunk of a WAVE file, read independently of audition."""
    raw = open(path, "rb").read()
    assert raw[8:12] == b"WAVE"
    out, pos, sizes = [], 12, {}
    while pos + 8 <= len(raw):
        cid, n = raw[pos:pos + 4], struct.unpack("<I", raw[pos + 4:pos + 8])[0]
        if cid == b"ds64":
            sizes["data"] = struct.unpack("<Q", raw[pos + 16:pos + 24])[0]
        if n == 0xFFFFFFFF:
            n = sizes["data"]
        out.append((cid, raw[pos + 8:pos + 8 + n + (n & 1)]))
        pos += 8 + n + (n & 1)
    assert pos == len(raw), "chunks must fill the file exactly"
    return out


def render(src, out, *extra) -> dict:
    assert main(["render", str(src), str(out), *RENDER, *extra]) == 0
    return json.loads(open(str(out) + ".json").read())


def check_fixity(out, side: dict):
    """The sidecar's output SHA-256 and size are the file's (hashlib, independent of audition)."""
    raw = open(out, "rb").read()
    assert side["output"]["sha256"] == hashlib.sha256(raw).hexdigest()
    assert side["output"]["size_bytes"] == len(raw)


# EBU R 98 (format for the CodingHistory field of BWF files): a coding-history line is comma-separated
# fields A= (coding algorithm), F= (sampling frequency, Hz), B= (bit rate, compressed codings only),
# W= (word length, bits), M= (mode), T= (free text, no commas), ended by CR/LF. The EBU's own text was
# not found with the search tool; its field table was, as reproduced in libsndfile's src/broadcast.c
# (quoting a Swedish Radio copy of R 98, "codhist2.htm"): "Mode M=<mono, stereo, dual-mono,
# joint-stereo>". No mode there names more than two channels, so for more the line has no M field
# (left out as B is for PCM) and T begins with the channel count.
R98_MODES = ("mono", "stereo", "dual-mono", "joint-stereo")
R98_LINE = re.compile(r"^A=PCM,F=(\d+),W=(\d+),(?:M=([^,\r\n]*),)?T=([^,\r\n]*)\r\n$")


def check_r98(line: str, rate: int, bits: int, mode: str | None, channels: int = 2):
    m = R98_LINE.match(line)
    assert m, f"not an EBU R 98 line: {line!r}"
    assert (int(m.group(1)), int(m.group(2)), m.group(3)) == (rate, bits, mode)
    assert m.group(3) is None or m.group(3) in R98_MODES
    if m.group(3) is None:
        assert m.group(4).startswith(f"{channels} channels;")
    assert "low-pass" in m.group(4) and "9000" in m.group(4)


# ---------------------------------------------------------------------------
# WAVE family
# ---------------------------------------------------------------------------


def test_plain_wav_comes_out_as_libsndfile_writes_it(tmp_path):
    """No chunk but fmt and data: nothing to carry, so the bytes are libsndfile's own (golden outputs unmoved)."""
    import soundfile as sf

    src = tmp_path / "plain.wav"
    build_wave(src, bits=16)
    side = render(src, tmp_path / "out.wav")
    ids = [c for c, _ in wave_chunks(tmp_path / "out.wav")]
    assert ids == [b"fmt ", b"data"]
    assert [m["fate"] for m in side["metadata"]] == ["carried", "rewritten"]
    check_fixity(tmp_path / "out.wav", side)
    # the same bytes as libsndfile's own WAV PCM_16 header for this rate and channel count
    ref = tmp_path / "ref.wav"
    sf.write(ref, np.zeros((10, 2)), 48000, subtype="PCM_16")
    assert wave_chunks(ref)[0] == wave_chunks(tmp_path / "out.wav")[0]


@pytest.mark.parametrize("mask,channels", [(0x0, 2), (0x4, 1), (0x60F, 6)])
def test_wavex_channel_mask_and_every_chunk_kept(tmp_path, mask, channels):
    """Microsoft WAVEFORMATEXTENSIBLE: the exact dwChannelMask (0 included) and every chunk byte for byte."""
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    extra = archive_chunks(4800)[1:]  # no bext: a plain WAVEX file with markers and text
    build_wave(src, channels=channels, mask=mask, extra=extra)
    side = render(src, out, "--no-strict-metadata")
    a, b = wave_chunks(src), wave_chunks(out)
    assert [c for c, _ in a] == [c for c, _ in b]
    for (ca, pa), (cb, pb) in zip(a, b):
        if ca != b"data":
            assert pa == pb, ca
    assert struct.unpack_from("<I", b[0][1], 20)[0] == mask
    assert side["output"]["fmt"]["channel_mask"] == f"0x{mask:X}"
    check_fixity(out, side)


def _check_bwf(src, out, side, *, channels=6, valid=20):
    """Every chunk byte-identical but bext and data; bext read back by wavinfo (EBU Tech 3285 fields)."""
    from wavinfo import WavInfoReader

    a, b = wave_chunks(src), wave_chunks(out)
    assert [c for c, _ in a] == [c for c, _ in b]
    for (ca, pa), (cb, pb) in zip(a, b):
        if ca not in (b"data", b"bext", b"ds64"):
            assert pa == pb, ca
    old, new = dict(a)[b"bext"], dict(b)[b"bext"]
    assert new[:412] == old[:412]  # Description ... TimeReference, Version, UMID: byte for byte
    assert new[602:602 + len(old) - 602].rstrip(b"\0") == old[602:].rstrip(b"\0")  # history kept word for word
    added = new[602:].rstrip(b"\0")[len(old[602:].rstrip(b"\0")):].decode("ascii")
    mode = {1: "mono", 2: "stereo"}.get(channels)  # R 98 has no mode for more (see R98_LINE)
    check_r98(added, 48000, valid, mode, channels)
    w = WavInfoReader(str(out))
    assert w.bext.time_reference == 123456789 + (1 << 32)
    assert w.bext.originator_ref == "REF-0012" and w.bext.description == "Reel 12 side A"
    assert w.bext.coding_history.endswith(added) and w.bext.coding_history.count("\r\n") == 4
    # loudness fields: none carried stale; the true peak is the one measured on the output
    lv, lr, tp, mm, ms = struct.unpack_from("<5h", new, 412)
    assert (lv, lr, mm, ms) == (0x7FFF,) * 4  # "not valid" (EBU Tech 3285 v2, recalled from memory)
    assert tp == round(side["true_peak_dbtp"] * 100)
    assert w.info.archival_location == "Archiv München"  # Latin-1 LIST INFO read by wavinfo as written
    check_fixity(out, side)


def test_bwf_every_chunk_kept_and_one_coding_history_line(tmp_path):
    """The issue's "done when" file: 5.1 side mask, 20 valid bits, bext, iXML, axml, cue + adtl, smpl, LIST INFO."""
    import soundfile as sf

    src, out = tmp_path / "bwf.wav", tmp_path / "out.wav"
    build_wave(src, channels=6, bits=24, valid=20, mask=0x60F, extra=archive_chunks(4800))
    before = open(src, "rb").read()
    side = render(src, out)
    _check_bwf(src, out, side)
    assert open(src, "rb").read() == before  # the input untouched
    # 20 valid bits: dithered at 20 bits, so the 4 low bits of every 24-bit sample are zero
    x = sf.read(out, dtype="int32")[0] >> 8
    assert np.all(x % 16 == 0) and np.any(x != 0)
    assert side["dither"]["bits"] == 20 and side["output"]["fmt"]["valid_bits"] == 20
    import soundfile as sf_ref

    assert side["libsndfile_version"] == sf_ref.__libsndfile_version__
    assert side["command_line"] == ["audition", "render", str(src), str(out), *RENDER]
    # group delay at 1 kHz: scipy.signal.group_delay of the recorded sections (reference library), summed
    from scipy.signal import group_delay

    gd = sum(group_delay((s["b"], s["a"]), w=[1000.0], fs=48000)[1][0] for s in side["design"]["sections"])
    assert side["group_delay_1khz_samples"] == pytest.approx(gd, rel=1e-6)


def test_bw64_with_odd_chunks_is_read_and_written(tmp_path):
    """ITU-R BS.2088 BW64 with odd-sized bext and iXML (pad bytes): libsndfile alone refuses it."""
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    build_wave(src, channels=2, bits=24, valid=24, mask=0x3, kind=b"BW64", extra=archive_chunks(4800))
    side = render(src, out)
    assert open(out, "rb").read(4) == b"BW64"
    _check_bwf(src, out, side, channels=2, valid=24)
    ds = dict(wave_chunks(out))[b"ds64"]
    riff, data, count = struct.unpack_from("<QQQ", ds)  # EBU Tech 3306 s. 3.2
    assert riff == out.stat().st_size - 8 and count == 4800 and data == 4800 * 6


def test_float_wav_keeps_chunks_and_measures_peak_again(tmp_path):
    """A float WAV: fact rewritten, the PEAK chunk measured again on the output (numpy as the reference)."""
    import soundfile as sf

    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    peak = chunk(b"PEAK", struct.pack("<II", 1, 0) + struct.pack("<fI", 0.5, 7) * 2)
    build_wave(src, float_samples=True, extra=[peak] + archive_chunks(4800)[1:])
    side = render(src, out)
    fates = {m["chunk"]: m["fate"] for m in side["metadata"]}
    assert (fates["PEAK"], fates["iXML"], fates["fact"]) == ("rewritten", "carried", "rewritten")
    ch = dict(wave_chunks(out))
    y = sf.read(out, dtype="float32")[0]
    got = struct.unpack_from("<IIfIfI", ch[b"PEAK"])
    assert got[2] == np.abs(y[:, 0]).max() and got[3] == np.abs(y[:, 0]).argmax()
    assert got[4] == np.abs(y[:, 1]).max() and got[5] == np.abs(y[:, 1]).argmax()
    ids = [c for c, _ in wave_chunks(out)]
    assert ids[-2:] == [b"zzzz", b"data"]


def test_a_large_chunk_is_carried_byte_for_byte(tmp_path):
    """A carried chunk past audition's in-memory limit (copied by byte range) still comes out identical, with its
    pad byte (Microsoft/IBM RIFF: odd sizes padded)."""
    from audition.io.archive.wave import INLINE_MAX

    big = np.random.default_rng(8).integers(0, 256, INLINE_MAX + 3, dtype=np.uint8).tobytes()
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    build_wave(src, extra=[chunk(b"zbig", big)] + archive_chunks(4800)[1:3])
    render(src, out)
    a, b = wave_chunks(src), wave_chunks(out)
    assert [c for c, _ in a] == [c for c, _ in b]
    assert dict(b)[b"zbig"] == big + b"\0"


def test_a_dropped_chunk_gets_a_line_on_stderr(tmp_path, capsys):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    build_wave(src, extra=[chunk(b"md5 ", bytes(16))] + archive_chunks(4800)[1:3])
    assert main(["render", str(src), str(out), *RENDER]) == 0
    side = json.loads(open(str(out) + ".json").read())
    assert {m["chunk"]: m["fate"] for m in side["metadata"]}["md5 "] == "dropped"
    assert "'md5 ' dropped" in capsys.readouterr().err
    assert [c for c, _ in wave_chunks(out)] == [b"fmt ", b"iXML", b"axml", b"data"]


def test_strict_metadata_refuses_a_drop_and_is_the_default_for_bwf(tmp_path, capsys):
    """A BWF that would lose a chunk is refused with one line, exit 2, nothing written."""
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    build_wave(src, extra=[chunk(b"md5 ", bytes(16))] + archive_chunks(4800))
    assert main(["render", str(src), str(out), *RENDER]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "md5" in err[0] and "strict-metadata" in err[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.wav"]


def test_w64_output_reports_what_it_drops(tmp_path):
    src, out = tmp_path / "in.wav", tmp_path / "out.w64"
    build_wave(src, extra=archive_chunks(4800)[1:3])
    side = render(src, out, "--container", "w64")
    assert {m["chunk"]: m["fate"] for m in side["metadata"]}["iXML"] == "dropped"


def test_rf64_header_for_a_declared_size_past_4_gib(tmp_path):
    """The 4 GiB path without writing 4 GiB: the builder over a sparse file (EBU Tech 3306 s. 3.2)."""
    import os

    from audition.io.archive.riff import Piece, needs_64, read_layout, write_file

    n = 2**32 + 6  # audio bytes, one frame of stereo 24-bit past 4 GiB
    src = tmp_path / "sparse.raw"
    with open(src, "wb") as f:
        f.truncate(n)  # a sparse file: no blocks written
    dst = tmp_path / "big.wav"
    fmt = struct.pack("<HHIIHH", 1, 2, 48000, 288000, 6, 24)
    fd_in = os.open(src, os.O_RDONLY)
    fd_out = os.open(dst, os.O_RDWR | os.O_CREAT)
    try:
        pieces = [Piece(b"ds64"), Piece(b"fmt ", fmt), Piece(b"data", source=(fd_in, 0, n))]
        assert needs_64(pieces[1:])
        size = write_file(fd_out, b"RF64", pieces, n // 6)
    finally:
        os.close(fd_in)
        os.close(fd_out)
    head = open(dst, "rb").read(80)
    assert head[:4] == b"RF64" and struct.unpack_from("<I", head, 4)[0] == 0xFFFFFFFF
    riff, data, count = struct.unpack_from("<QQQ", head, 20)
    assert (riff, data, count) == (size - 8, n, n // 6)
    lay = read_layout(dst)
    assert lay.first(b"data").size == n and lay.file_size == size
    dst.unlink()


def test_a_wav_output_past_4_gib_is_made_rf64():
    """The container choice for a declared length (no file written)."""
    from types import SimpleNamespace

    from audition.render import output_container

    big = SimpleNamespace(format="WAV", frames=2**32 // 6 + 1, channels=2)
    small = SimpleNamespace(format="WAV", frames=48000, channels=2)
    assert output_container(big, "PCM_24", None, "x.wav") == "RF64"
    assert output_container(small, "PCM_24", None, "x.wav") == "WAV"
    assert output_container(small, "PCM_24", "rf64", "x.wav") == "RF64"


# ---------------------------------------------------------------------------
# AIFF and FLAC
# ---------------------------------------------------------------------------


def _bchunk(cid, p):
    """An AIFF chunk: big-endian size, pad byte when odd (Apple AIFF 1.3)."""
    return cid + struct.pack(">I", len(p)) + p + (b"\0" if len(p) & 1 else b"")


def _ext80(rate: float) -> bytes:
    """80-bit IEEE 754 extended, AIFF's sampleRate (AIFF 1.3)."""
    e = math.floor(math.log2(rate))
    return struct.pack(">HQ", e + 16383, int(rate / 2**e * 2**63))


def aiff_chunks(path) -> list[tuple[bytes, bytes]]:
    raw = open(path, "rb").read()
    out, pos = [], 12
    while pos + 8 <= len(raw):
        cid, n = raw[pos:pos + 4], struct.unpack(">I", raw[pos + 4:pos + 8])[0]
        out.append((cid, raw[pos + 8:pos + 8 + n + (n & 1)]))
        pos += 8 + n + (n & 1)
    assert pos == len(raw) and struct.unpack(">I", raw[4:8])[0] == len(raw) - 8
    return out


def test_aiff_markers_comments_and_instrument_kept(tmp_path):
    frames = 4800
    x = samples(frames, 2, 16, 16, 3).astype(">i2")
    mark = struct.pack(">H", 2) + struct.pack(">HI", 1, 1000) + b"\x05start" + struct.pack(">HI", 2, 3000) + b"\x03end"
    comt = struct.pack(">H", 1) + struct.pack(">IHH", 0, 1, 9) + b"a comment"
    inst = bytes([60, 0, 0, 127, 0, 127]) + struct.pack(">h", 0) + struct.pack(">hhhhhh", 1, 1, 2, 0, 0, 0)
    body = (b"AIFF" + _bchunk(b"COMM", struct.pack(">hIh", 2, frames, 16) + _ext80(48000))
            + _bchunk(b"NAME", b"Reel 3") + _bchunk(b"MARK", mark) + _bchunk(b"COMT", comt)
            + _bchunk(b"INST", inst) + _bchunk(b"ANNO", b"odd") + _bchunk(b"SSND", bytes(8) + x.tobytes()))
    src, out = tmp_path / "in.aiff", tmp_path / "out.aiff"
    src.write_bytes(b"FORM" + struct.pack(">I", len(body)) + body)
    side = render(src, out)
    a, b = aiff_chunks(src), aiff_chunks(out)
    assert [c for c, _ in a] == [c for c, _ in b]
    for (ca, pa), (cb, pb) in zip(a, b):
        if ca != b"SSND":
            assert pa == pb, ca
    assert not [m for m in side["metadata"] if m["fate"] == "dropped"]
    check_fixity(out, side)


#: A vendor string with what a repr would change (quotes, a backslash, non-ASCII), to check it is kept verbatim.
VENDOR = 'their encoder 1.0 "Z\u00fcrich" \\ build\'s'


def flac_audio_start(raw: bytes) -> int:
    """Where a FLAC file's first frame starts: "fLaC", then metadata blocks of a 4-byte header (last-block
    flag, 7-bit type, 24-bit length) and their data (FLAC format specification, "METADATA_BLOCK_HEADER")."""
    assert raw[:4] == b"fLaC"
    i = 4
    while True:
        last, n = raw[i] & 0x80, int.from_bytes(raw[i + 1:i + 4], "big")
        i += 4 + n
        if last:
            return i


def test_aiff_large_chunk_carried_byte_for_byte(tmp_path):
    """An AIFF chunk past audition's in-memory limit (copied by byte range), odd-sized: identical, pad byte
    included (Apple AIFF 1.3: chunks padded to an even length)."""
    from audition.io.archive.wave import INLINE_MAX

    frames = 4800
    x = samples(frames, 2, 16, 16, 5).astype(">i2")
    big = b"abcd" + np.random.default_rng(9).integers(0, 256, INLINE_MAX + 1, dtype=np.uint8).tobytes()
    body = (b"AIFF" + _bchunk(b"COMM", struct.pack(">hIh", 2, frames, 16) + _ext80(48000))
            + _bchunk(b"zbig", big) + _bchunk(b"SSND", bytes(8) + x.tobytes()))
    src, out = tmp_path / "in.aiff", tmp_path / "out.aiff"
    src.write_bytes(b"FORM" + struct.pack(">I", len(body)) + body)
    render(src, out)
    a, b = aiff_chunks(src), aiff_chunks(out)
    assert [c for c, _ in a] == [c for c, _ in b]
    assert dict(b)[b"zbig"] == big + b"\0"


def _flac_input(path):
    import soundfile as sf
    from mutagen.flac import FLAC, MetadataBlock, Picture, SeekPoint, SeekTable

    sf.write(path, np.random.default_rng(4).standard_normal((48000 * 3, 2)) * 0.1, 48000, subtype="PCM_24")
    f = FLAC(path)
    f.tags.vendor = VENDOR
    for kv in [("Title", "Reel 3"), ("ARTIST", "A"), ("ARTIST", "B"), ("myCustomKey", "x, y"),
               ("COMMENT", "transfer 1, no processing")]:
        f.tags.append(kv)
    pic = Picture()
    pic.type, pic.mime, pic.data = 3, "image/png", b"\x89PNG not really"
    f.add_picture(pic)

    class Application(MetadataBlock):
        code = 2  # FLAC format spec: APPLICATION block, a 4-byte id then data

    f.metadata_blocks.append(Application(b"abcdprivate data"))
    table = SeekTable(None)
    # the first frame, then a placeholder point (FLAC format spec: sample number 0xFFFFFFFFFFFFFFFF)
    table.seekpoints = [SeekPoint(0, 0, 4096), SeekPoint(0xFFFFFFFFFFFFFFFF, 0, 0)]
    f.metadata_blocks.append(table)
    f.save()


def test_flac_comments_picture_application_kept_and_seektable_rebuilt(tmp_path):
    """FLAC format spec blocks read back with mutagen: every comment with its case, a PROCESSING comment added."""
    import soundfile as sf
    from mutagen.flac import FLAC

    src, out = tmp_path / "in.flac", tmp_path / "out.flac"
    _flac_input(src)
    side = render(src, out)
    a, b = FLAC(src), FLAC(out)
    assert list(b.tags)[:-1] == list(a.tags)  # order, repeats, custom keys, case
    key, value = list(b.tags)[-1]
    assert key == "PROCESSING"
    check_r98(value + "\r\n", 48000, 24, "stereo")
    # the vendor string: the output's names the encoder of its frames (libsndfile's libFLAC, as mutagen reads
    # the file libsndfile wrote); the input's is in the sidecar's VORBIS_COMMENT entry, verbatim
    assert b.tags.vendor == FLAC(render_plain(tmp_path, src)).tags.vendor != VENDOR
    entry = next(m for m in side["metadata"] if m["chunk"] == "VORBIS_COMMENT")
    assert entry["input_vendor"] == VENDOR and VENDOR == a.tags.vendor
    assert [p.data for p in b.pictures] == [p.data for p in a.pictures]
    app = [blk for blk in b.metadata_blocks if blk.code == 2]
    assert len(app) == 1 and app[0].data == b"abcdprivate data"
    # seek points: each names a frame header, at a frame boundary, whose samples decode to the sample it claims
    pts = b.seektable.seekpoints
    assert len(pts) >= 1 and pts[0].first_sample == 0 and pts[0].byte_offset == 0
    raw = open(out, "rb").read()
    start = flac_audio_start(raw)
    for p in pts:
        assert raw[start + p.byte_offset] == 0xFF and raw[start + p.byte_offset + 1] & 0xFE == 0xF8
        assert p.first_sample % 4096 == 0
    x = sf.read(out)[0]
    assert len(x) == 48000 * 3
    check_fixity(out, side)


def render_plain(tmp_path, src):
    """``src``'s audio written by soundfile (libsndfile) alone, as FLAC: what its encoder calls itself."""
    import soundfile as sf

    ref = tmp_path / "plain-ref.flac"
    sf.write(ref, sf.read(src, frames=4096)[0], 48000, subtype="PCM_24")
    return ref


def _streaminfo_for(raw: bytes, start: int, frames: int) -> bytes:
    """A FLAC header for a cut of ``raw``'s frames: its STREAMINFO with ``frames`` samples in all and no MD5.

    STREAMINFO (FLAC format specification): min/max block size (16 bits each), min/max frame size
    (24 bits each), then 64 bits of rate (20), channels - 1 (3), bits - 1 (5) and total samples (36),
    then the 128-bit MD5 of the samples (0: not known).
    """
    info = bytearray(raw[8:8 + 34])
    v = int.from_bytes(info[10:18], "big")
    info[10:18] = ((v >> 36 << 36) | frames).to_bytes(8, "big")
    info[18:34] = bytes(16)
    return b"fLaC" + bytes([0x80, 0, 0, 34]) + bytes(info)


def test_seek_points_land_on_frames_libsndfile_decodes(tmp_path):
    """The rebuilt seek table of a 3-minute FLAC written by soundfile: each point is a real frame start.

    Checked from outside: the frames from each point's byte offset on, behind a STREAMINFO of their own,
    decode with libsndfile (soundfile) to the samples libsndfile reads at the point's sample number in the
    whole file; a point in the middle of a frame would decode from the next frame, samples later. Where the
    points are follows the FLAC format specification: in a fixed-blocksize stream frame n starts at sample
    n * blocksize (the blocksize as mutagen reads it from STREAMINFO), and a seek point is the first frame
    at or after each wanted sample. White noise at a high level, so the frames are full of 0xFF bytes.
    """
    import io

    import soundfile as sf
    from mutagen.flac import FLAC

    from audition.io.archive.flac import seek_points

    path, rate, seconds = tmp_path / "long.flac", 44100, 180
    rng = np.random.default_rng(15)
    with sf.SoundFile(path, "w", rate, 2, subtype="PCM_16", format="FLAC") as f:
        for _ in range(seconds // 10):
            f.write(rng.integers(-30000, 30000, size=(rate * 10, 2), dtype=np.int16))
    assert path.stat().st_size > 30e6
    info = FLAC(path).info
    block = FLAC(path).metadata_blocks[0].max_blocksize
    total = info.total_samples
    assert total == rate * seconds
    spacing = rate + 7  # not a multiple of the blocksize: most points start after the sample wanted
    pts = seek_points(path, spacing)
    want, expected = 0, []
    while want < total:
        first = -(-want // block) * block
        expected.append(first)
        want = (first // spacing + 1) * spacing
    assert [p[0] for p in pts] == expected
    raw = open(path, "rb").read(1 << 16)
    start = flac_audio_start(raw)
    with open(path, "rb") as fh:
        for first, offset, n in pts:
            assert n == min(block, total - first)
            k = min(2 * block, total - first)
            fh.seek(start + offset)
            cut = _streaminfo_for(raw, start, k) + fh.read(3 * 4 * block + 1024)
            with sf.SoundFile(io.BytesIO(cut)) as g:  # read on from where it opens: no seek to sample 0
                got = g.read(k, dtype="int16")
            ref = sf.read(path, dtype="int16", start=first, frames=k)[0]
            assert got.shape == ref.shape and np.array_equal(got, ref), first


# ---------------------------------------------------------------------------
# cue points when the sample width changes
# ---------------------------------------------------------------------------


def _cue(points) -> bytes:
    """A ``cue `` payload (Microsoft/IBM RIFF 1991, "cue-ck"): dwCuePoints, then per point dwName, dwPosition,
    fccChunk, dwChunkStart, dwBlockStart, dwSampleOffset."""
    return struct.pack("<I", len(points)) + b"".join(struct.pack("<II4sIII", *p) for p in points)


def test_cue_byte_offsets_scaled_to_the_new_block_align(tmp_path):
    """24-bit stereo in, 16-bit out: dwBlockStart in bytes follows the block align (WAVEFORMATEX nBlockAlign =
    nChannels * wBitsPerSample / 8: 6 in, 4 out); positions in samples stay as they were."""
    src = tmp_path / "in.wav"
    points = [(1, 1000, b"data", 0, 1000 * 6, 0),   # a writer that counts the block in bytes
              (2, 2000, b"data", 0, 0, 2000),       # one that counts samples only
              (3, 3000, b"data", 0, 2998 * 6, 2)]   # a block start and a sample offset within it
    build_wave(src, bits=24, extra=[chunk(b"cue ", _cue(points))])
    side = render(src, tmp_path / "out.wav", "--subtype", "PCM_16")
    out = dict(wave_chunks(tmp_path / "out.wav"))
    align = struct.unpack_from("<H", out[b"fmt "], 12)[0]
    assert align == 2 * 16 // 8
    got = [struct.unpack_from("<II4sIII", out[b"cue "], 4 + 24 * k) for k in range(3)]
    assert got == [(1, 1000, b"data", 0, 1000 * 4, 0), (2, 2000, b"data", 0, 0, 2000),
                   (3, 3000, b"data", 0, 2998 * 4, 2)]
    entry = next(m for m in side["metadata"] if m["chunk"] == "cue ")
    assert entry["fate"] == "rewritten" and "scaled from block align 6 to 4" in entry["reason"]
    # the same width out: carried byte for byte, no reason
    side = render(src, tmp_path / "same.wav")
    assert dict(wave_chunks(tmp_path / "same.wav"))[b"cue "] == dict(wave_chunks(src))[b"cue "]
    assert next(m for m in side["metadata"] if m["chunk"] == "cue ")["fate"] == "carried"


def test_cue_offsets_that_cannot_be_scaled_are_named_in_the_inventory(tmp_path):
    """A dwChunkStart inside a 'wavl' list the output does not have, and a dwBlockStart that is no whole number
    of blocks, are left as they were, with a reason; zero offsets need nothing (Microsoft/IBM RIFF 1991)."""
    src = tmp_path / "in.wav"
    points = [(1, 500, b"data", 0, 0, 500), (2, 700, b"data", 4096, 0, 700), (3, 900, b"data", 0, 5401, 0)]
    build_wave(src, bits=24, extra=[chunk(b"cue ", _cue(points))])
    side = render(src, tmp_path / "out.wav", "--subtype", "PCM_16")
    assert dict(wave_chunks(tmp_path / "out.wav"))[b"cue "] == _cue(points)
    entry = next(m for m in side["metadata"] if m["chunk"] == "cue ")
    assert entry["fate"] == "carried" and "of 2 cue points left as they were" in entry["reason"]
    # only zero byte offsets: nothing to say, whatever the width
    build_wave(src, bits=24, extra=[chunk(b"cue ", _cue(points[:1]))])
    side = render(src, tmp_path / "zero.wav", "--subtype", "PCM_16")
    assert dict(wave_chunks(tmp_path / "zero.wav"))[b"cue "] == _cue(points[:1])
    assert next(m for m in side["metadata"] if m["chunk"] == "cue ") == {
        "chunk": "cue ", "fate": "carried", "reason": "", "size_bytes": len(_cue(points[:1]))}


# ---------------------------------------------------------------------------
# batch: the same for every clip
# ---------------------------------------------------------------------------


def test_resume_renders_again_when_the_container_or_strictness_changes(tmp_path):
    """--container and --strict-metadata are settings: a changed one is not "done by an earlier run"."""
    import csv

    srcdir, outdir = tmp_path / "in", tmp_path / "out"
    srcdir.mkdir()
    build_wave(srcdir / "a.wav", extra=archive_chunks(4800)[1:3])
    args = ["batch", str(srcdir), str(outdir), "--f0", "9000", "--q", "0.7071", "--no-figures", "--quiet",
            "--workers", "1"]

    def status(*extra):
        assert main([*args, "--resume", *extra]) == 0
        with open(outdir / "batch-report.csv", newline="", encoding="utf-8") as fh:
            return [row["status"] for row in csv.DictReader(fh)]

    assert main(args) == 0
    assert open(outdir / "a.wav", "rb").read(4) == b"RIFF"
    assert status() == ["skipped"]
    assert status("--container", "rf64") == ["done"]
    assert open(outdir / "a.wav", "rb").read(4) == b"RF64"  # EBU Tech 3306 header
    assert status("--container", "rf64") == ["skipped"]
    assert status("--container", "rf64", "--strict-metadata") == ["done"]
    assert status("--container", "rf64", "--strict-metadata") == ["skipped"]
    assert status() == ["done"]
    assert open(outdir / "a.wav", "rb").read(4) == b"RIFF"


# ---------------------------------------------------------------------------
# batch: the same for every clip
# ---------------------------------------------------------------------------


def test_batch_carries_every_chunk_per_clip(tmp_path):
    srcdir, outdir = tmp_path / "in", tmp_path / "out"
    srcdir.mkdir()
    build_wave(srcdir / "bwf.wav", channels=6, bits=24, valid=20, mask=0x60F, extra=archive_chunks(4800))
    _flac_input(srcdir / "tape.flac")
    assert main(["batch", str(srcdir), str(outdir), "--f0", "9000", "--q", "0.7071", "--no-figures", "--quiet",
                 "--workers", "1"]) == 0
    side = json.loads(open(outdir / "bwf.wav.json").read())
    _check_bwf(srcdir / "bwf.wav", outdir / "bwf.wav", side)
    assert side["batch_run"] and "batch" in side["command_line"]
    from mutagen.flac import FLAC

    assert list(FLAC(outdir / "tape.flac").tags)[:-1] == list(FLAC(srcdir / "tape.flac").tags)
    check_fixity(outdir / "tape.flac", json.loads(open(outdir / "tape.flac.json").read()))
