"""Tests of audition.io: formats, exact integer writing, TPDF dither, atomic writes, checks.

Independent references used here: Python's ``wave`` module (stdlib) to read PCM WAV
integers without libsndfile, ``struct`` to build WAV files by hand, ``hashlib``
(SHA-256, FIPS 180-4), and the dither theory of S. P. Lipshitz, R. A. Wannamaker,
J. Vanderkooy, "Quantization and Dither: A Theoretical Survey", JAES 40(5), 1992.
"""

from __future__ import annotations

import hashlib
import inspect
import os
import struct
import wave

import numpy as np
import pytest

from audition.io import formats, quantise, reader, sidecar, tempfiles, writer
from audition.errors import BadInputFile, BadParameter, OutputRefused


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------


def wav_bytes(data: np.ndarray, rate: int, fmt_tag: int, sample_format: str) -> bytes:
    """A minimal RIFF/WAVE file built by hand (Microsoft RIFF WAVE layout), independent of libsndfile."""
    data = np.asarray(data)
    channels = data.shape[1]
    payload = data.astype(sample_format).tobytes()
    width = np.dtype(sample_format).itemsize
    fmt = struct.pack("<HHIIHH", fmt_tag, channels, rate, rate * channels * width, channels * width, 8 * width)
    chunks = b"fmt " + struct.pack("<I", len(fmt)) + fmt
    if fmt_tag != 1:  # non-PCM WAV files carry a fact chunk with the frame count
        chunks += b"fact" + struct.pack("<II", 4, len(data))
    chunks += b"data" + struct.pack("<I", len(payload)) + payload
    return b"RIFF" + struct.pack("<I", 4 + len(chunks)) + b"WAVE" + chunks


def read_wav_ints(path) -> tuple[np.ndarray, int]:
    """PCM integers of a WAV file read by the stdlib wave module (no libsndfile involved)."""
    with wave.open(str(path), "rb") as w:
        width, ch, n = w.getsampwidth(), w.getnchannels(), w.getnframes()
        raw = w.readframes(n)
    if width == 3:
        b = np.frombuffer(raw, np.uint8).reshape(-1, 3).astype(np.int32)
        v = (b[:, 0] | (b[:, 1] << 8) | (b[:, 2] << 16))
        v = np.where(v >= 1 << 23, v - (1 << 24), v)
    elif width == 1:
        v = np.frombuffer(raw, np.uint8).astype(np.int32) - 128  # 8-bit WAV is offset binary
    else:
        v = np.frombuffer(raw, {2: "<i2", 4: "<i4"}[width]).astype(np.int64)
    return v.reshape(-1, ch), 8 * width


def grid_signal(bits: int, frames: int, channels: int, seed: int = 0) -> np.ndarray:
    """Random values exactly on the LSB grid of ``bits``, full range including both extremes."""
    rng = np.random.default_rng(seed)
    s = 2 ** (bits - 1)
    k = rng.integers(-s, s, size=(frames, channels))
    k[0, 0], k[1, 0] = -s, s - 1
    return k / s


def folder_listing(path) -> list[str]:
    return sorted(os.listdir(path))


# ---------------------------------------------------------------------------
# format round trips and exactness
# ---------------------------------------------------------------------------

# (container ending, subtype): every container the issue names with the subtypes it holds
ROUND_TRIPS = [
    (".wav", "PCM_U8"), (".wav", "PCM_16"), (".wav", "PCM_24"), (".wav", "PCM_32"), (".wav", "FLOAT"),
    (".wav", "DOUBLE"),
    (".w64", "PCM_16"), (".w64", "PCM_24"), (".w64", "DOUBLE"),
    (".rf64", "PCM_24"), (".rf64", "FLOAT"),
    (".flac", "PCM_S8"), (".flac", "PCM_16"), (".flac", "PCM_24"),
    (".aiff", "PCM_S8"), (".aiff", "PCM_16"), (".aiff", "PCM_24"), (".aiff", "PCM_32"), (".aiff", "FLOAT"),
    (".aiff", "DOUBLE"),
]
BITS = {"PCM_S8": 8, "PCM_U8": 8, "PCM_16": 16, "PCM_24": 24, "PCM_32": 32, "FLOAT": 24, "DOUBLE": 32}


@pytest.mark.parametrize("ext,subtype", ROUND_TRIPS)
def test_round_trip_is_exact_on_the_lsb_grid(tmp_path, ext, subtype):
    # Values on the word length's grid survive write+read unchanged (lossless PCM/float storage;
    # FLAC is lossless by definition of the format). For FLOAT the grid is 24 bits (float32 mantissa).
    # Even frame count: an odd number of 8-bit AIFF frames gets a pad byte that libsndfile reads back.
    x = grid_signal(BITS[subtype], 1000, 3, seed=len(ext) + BITS[subtype])
    p = tmp_path / f"a{ext}"
    stats = writer.write_clip(p, x, 44100, subtype, dither=True)
    y, rate = reader.read_clip(p)
    info = reader.info(p)
    assert (rate, info.channels, info.frames, info.subtype) == (44100.0, 3, 1000, subtype)
    # dither is +-1 LSB before rounding, so grid values can move; without dither they must not
    if subtype in formats.INTEGER_BITS:
        assert np.max(np.abs(y - x)) <= 1.0 / 2 ** (BITS[subtype] - 1) + 1e-15
        writer.write_clip(p, x, 44100, subtype, dither=False, overwrite=True)
        y, _ = reader.read_clip(p)
    np.testing.assert_array_equal(y, x)
    assert stats.frames == 1000


@pytest.mark.parametrize("subtype", ["PCM_U8", "PCM_16", "PCM_24", "PCM_32"])
def test_integers_written_are_the_quantisers_integers(tmp_path, subtype):
    # Read with the stdlib wave module, not libsndfile: the file holds exactly the integers the
    # quantiser produced (no rescaling by 2**(b-1)-1, no wrap-around at full scale).
    bits = formats.INTEGER_BITS[subtype]
    rng = np.random.default_rng(7)
    x = np.concatenate([rng.uniform(-1.2, 1.2, (4000, 2)), [[1.0, -1.0], [2.0, -2.0]]])
    q = quantise.Quantiser(bits, dither=True, seed=11).quantise(x)[0].astype(np.int64)
    p = tmp_path / "q.wav"
    writer.write_clip(p, x, 48000, subtype, seed=11)
    ints, width = read_wav_ints(p)
    assert width == bits
    np.testing.assert_array_equal(ints, q)
    # saturation, never wrap-around: beyond full scale gives the extreme codes with the right sign
    assert ints[-1, 0] == 2 ** (bits - 1) - 1 and ints[-1, 1] == -(2 ** (bits - 1))


@pytest.mark.parametrize("bits,subtype", [(16, "PCM_16"), (24, "PCM_24")])
def test_libsndfile_float_to_int_conversion_is_exact_on_the_grid(tmp_path, bits, subtype):
    # The alternative route (float64 k/2**(b-1) handed to libsndfile) is exact too: libsndfile 1.2
    # scales by 2**(b-1). Checked against the stdlib wave reader; if a libsndfile update changed
    # the scale to 2**(b-1)-1 this would fail and the int32 route chosen in audition.io.writer stays right.
    x = grid_signal(bits, 3000, 1, seed=bits)
    p = tmp_path / "f.wav"
    w = writer.AtomicWriter(p, 8000, 1, format="WAV", subtype=subtype)
    with w:
        w._sf.write(x)  # bypass the quantiser: float64 straight into libsndfile
    ints, _ = read_wav_ints(p)
    np.testing.assert_array_equal(ints[:, 0], np.round(x[:, 0] * 2 ** (bits - 1)).astype(np.int64))


@pytest.mark.parametrize("ext", [".wav", ".flac", ".aiff"])
def test_metadata_is_written_and_read(tmp_path, ext):
    p = tmp_path / f"m{ext}"
    meta = {"title": "Side A, take 2", "artist": "Test Ensemble", "comment": "transfer 1", "date": "1962"}
    writer.write_clip(p, np.zeros((100, 1)), 44100, "PCM_16", metadata=meta)
    got = reader.info(p).metadata
    # each container keeps a subset of the fields (libsndfile's mapping); what it keeps must be exact
    assert got and "title" in got
    for k, v in got.items():
        assert meta[k] == v


# ---------------------------------------------------------------------------
# TPDF dither (Lipshitz, Wannamaker and Vanderkooy 1992)
# ---------------------------------------------------------------------------


def _error_lsb(x, bits, dither, seed=1):
    q = quantise.Quantiser(bits, dither=dither, seed=seed).quantise(x)[0].astype(np.int64)
    return q[:, 0] - x[:, 0] * 2 ** (bits - 1)


@pytest.mark.parametrize("bits", [8, 16, 24])
def test_tpdf_total_error_power_is_a_quarter_lsb_squared(bits):
    # LWV 1992: +-1 LSB TPDF dither (variance LSB^2/6) plus rounding (LSB^2/12) gives a total error
    # of power LSB^2/4, with mean zero. Without dither rounding alone gives LSB^2/12 (uniform
    # rounding error, classic quantisation theory) for a busy signal.
    x = np.random.default_rng(bits).uniform(-0.5, 0.5, (300_000, 1))
    e = _error_lsb(x, bits, True)
    assert np.mean(e ** 2) == pytest.approx(0.25, abs=0.005)
    assert abs(np.mean(e)) < 0.005
    assert np.mean(_error_lsb(x, bits, False) ** 2) == pytest.approx(1 / 12, abs=0.003)


def test_tpdf_error_moments_do_not_depend_on_the_signal():
    # LWV 1992: with TPDF dither the first and second moments of the total error are independent of
    # the input; so its power is LSB^2/4 whatever the fraction of an LSB the signal sits at, and the
    # error is uncorrelated with the signal. Undithered, the error power swings from 0 to LSB^2/4.
    x = np.random.default_rng(5).uniform(-0.01, 0.01, (400_000, 1))
    frac = (x[:, 0] * 2 ** 15) % 1.0
    bins = np.minimum((frac * 8).astype(int), 7)
    e = _error_lsb(x, 16, True)
    power = np.array([np.mean(e[bins == b] ** 2) for b in range(8)])
    mean = np.array([np.mean(e[bins == b]) for b in range(8)])
    np.testing.assert_allclose(power, 0.25, atol=0.01)
    np.testing.assert_allclose(mean, 0.0, atol=0.01)
    assert abs(np.corrcoef(e, x[:, 0])[0, 1]) < 0.01
    e0 = _error_lsb(x, 16, False)
    power0 = np.array([np.mean(e0[bins == b] ** 2) for b in range(8)])
    assert power0.max() - power0.min() > 0.15


def test_dither_removes_the_harmonics_of_a_low_level_sine():
    # LWV 1992: undithered quantisation of a sine a few LSB high is a deterministic function of the
    # signal, hence harmonic distortion; TPDF dither turns it into signal-independent noise and keeps
    # the fundamental's mean level (E[q | x] = x). 1 kHz at 48 kHz over 2 s: coherent, no leakage.
    rate, f, n = 48000, 1000, 96000
    amp_lsb = 1.5
    x = (amp_lsb / 2 ** 15 * np.sin(2 * np.pi * f * np.arange(n) / rate))[:, None]

    def harmonics_db(dither):
        q = quantise.Quantiser(16, dither=dither, seed=3).quantise(x)[0][:, 0].astype(np.int64)
        spec = np.abs(np.fft.rfft(q)) / (n / 2)
        fund = spec[f * n // rate]
        return fund, [20 * np.log10(spec[k * f * n // rate] / fund) for k in (3, 5, 7, 9)]

    fund0, h0 = harmonics_db(False)
    fund1, h1 = harmonics_db(True)
    assert max(h0) > -30.0  # audible distortion products undithered (measured about -16 dB)
    assert max(h1) < -40.0  # at the noise floor with dither (about -55 dB per bin here)
    assert 20 * np.log10(fund1 / amp_lsb) == pytest.approx(0.0, abs=0.2)


def test_dither_does_not_depend_on_the_block_cut():
    # Invariant of the design: the same seed gives the same integers however the signal is cut
    # (odd sizes included), so block size never changes the bytes written.
    x = np.random.default_rng(2).uniform(-0.9, 0.9, (10_001, 3))
    whole = quantise.Quantiser(24, seed=9).quantise(x)[0]
    q = quantise.Quantiser(24, seed=9)
    parts = [q.quantise(x[a:b])[0] for a, b in [(0, 1), (1, 8), (8, 4097), (4097, 10_001)]]
    np.testing.assert_array_equal(np.concatenate(parts), whole)
    other = quantise.Quantiser(24, seed=10).quantise(x)[0]
    assert np.count_nonzero(other != whole) > 0.3 * whole.size


def test_dither_amplitude_is_within_one_lsb_and_triangular():
    # TPDF of +-1 LSB (LWV 1992): support (-1, 1), mean 0, variance 1/6, triangular histogram.
    d = quantise.Quantiser(16, seed=4).dither_lsb(200_000) / 65536.0
    assert d.min() > -1.0 and d.max() < 1.0
    assert np.var(d) == pytest.approx(1 / 6, abs=0.003)
    hist, edges = np.histogram(d, bins=10, range=(-1, 1), density=True)
    centres = (edges[:-1] + edges[1:]) / 2
    np.testing.assert_allclose(hist, 1 - np.abs(centres), atol=0.03)


# ---------------------------------------------------------------------------
# tiers agree, hashing
# ---------------------------------------------------------------------------


def test_simple_function_defaults_agree_with_the_class():
    # python-soundfile style: the thin wrapper and the class it opens share their defaults.
    wc = inspect.signature(writer.write_clip).parameters
    aw = inspect.signature(writer.AtomicWriter).parameters
    q = inspect.signature(quantise.Quantiser).parameters
    for name in ("overwrite", "dither", "seed"):
        assert wc[name].default == aw[name].default
    assert wc["dither"].default == q["dither"].default and wc["seed"].default == q["seed"].default


def test_cli_subtype_list_matches_the_module():
    from audition.cli import render as cli_render

    assert cli_render.SUBTYPES == formats.OUTPUT_SUBTYPES


@pytest.mark.parametrize("ext,meta", [(".wav", {"title": "t", "comment": "c" * 301}), (".flac", {"title": "t"}),
                                      (".aiff", {}), (".wav", {})])
def test_sha256_while_reading_matches_hashlib(tmp_path, ext, meta):
    # SHA-256 (FIPS 180-4) of the file's bytes via hashlib over the whole file, against the hash
    # gathered from libsndfile's own reads (plus whatever it skipped, e.g. trailing chunks).
    p = tmp_path / f"h{ext}"
    writer.write_clip(p, np.random.default_rng(0).uniform(-.5, .5, (30_000, 2)), 44100, "PCM_16",
                      metadata=meta)
    with reader.AudioReader(p) as r:
        for _ in r.blocks(4096):
            pass
        assert r.sha256() == hashlib.sha256(p.read_bytes()).hexdigest()


# ---------------------------------------------------------------------------
# bad inputs
# ---------------------------------------------------------------------------


def test_nan_sample_is_refused_naming_frame_and_channel(tmp_path):
    x = np.zeros((5000, 3))
    x[3210, 1] = np.nan
    x[4000, 0] = np.inf
    p = tmp_path / "nan.wav"
    p.write_bytes(wav_bytes(x, 48000, 3, "<f8"))  # IEEE float WAV, format tag 3
    with pytest.raises(BadInputFile, match=r"frame 3210 channel 2 is nan"):
        reader.read_clip(p)


@pytest.mark.parametrize("content,match", [
    (None, "no such file"),
    (b"", "empty file"),
    (b"this is not a sound file at all, only some words" * 10, "not a sound file libsndfile can read"),
    (b"RIFF\x24\x00\x00\x00WAVEfmt ", "not a sound file libsndfile can read"),  # header cut short
])
def test_bad_files_are_refused(tmp_path, content, match):
    p = tmp_path / "bad.wav"
    if content is not None:
        p.write_bytes(content)
    with pytest.raises(BadInputFile, match=match) as e:
        reader.read_clip(p)
    assert "bad.wav" in str(e.value) and "\n" not in str(e.value)


def test_folder_and_unreadable_inputs_are_refused(tmp_path, monkeypatch):
    with pytest.raises(BadInputFile, match="is a folder"):
        reader.read_clip(tmp_path)
    p = tmp_path / "x.wav"
    writer.write_clip(p, np.zeros((10, 1)), 8000)

    def denied(*a, **k):
        raise PermissionError(13, "Permission denied")

    # tests run as root here, where chmod 000 does not stop reading; a refused open stands in
    monkeypatch.setattr(reader, "open", denied, raising=False)
    with pytest.raises(BadInputFile, match="not readable"):
        reader.read_clip(p)


# ---------------------------------------------------------------------------
# the atomic writer
# ---------------------------------------------------------------------------


def test_failure_part_way_leaves_nothing_and_keeps_the_old_file(tmp_path, monkeypatch):
    p = tmp_path / "out.wav"
    writer.write_clip(p, np.full((10, 1), 0.25), 8000)
    before = p.read_bytes()
    calls = []
    real = writer.AtomicWriter._write_samples  # every write of samples to libsndfile

    def fails_on_third(self, data):
        calls.append(len(data))
        if len(calls) == 3:
            raise writer.sf.LibsndfileError(2)  # what libsndfile raises when write(2) fails
        return real(self, data)

    monkeypatch.setattr(writer.AtomicWriter, "_write_samples", fails_on_third)
    with pytest.raises(OutputRefused, match="disk full") as e:
        writer.write_clip(p, np.zeros((5 * formats.BLOCK_FRAMES, 1)), 8000, overwrite=True)
    assert "out.wav" in str(e.value)
    assert folder_listing(tmp_path) == ["out.wav"]
    assert p.read_bytes() == before


def test_keyboard_interrupt_leaves_nothing(tmp_path):
    p = tmp_path / "out.wav"
    with pytest.raises(KeyboardInterrupt):
        with writer.AtomicWriter(p, 8000, 1, format="WAV", subtype="PCM_16") as w:
            w.write(np.zeros((1000, 1)))
            raise KeyboardInterrupt
    assert folder_listing(tmp_path) == []


def test_output_permissions_are_those_of_a_plain_new_file(tmp_path):
    p = tmp_path / "o.wav"
    writer.write_clip(p, np.zeros((10, 1)), 8000)
    umask = os.umask(0)
    os.umask(umask)
    assert (os.stat(p).st_mode & 0o777) == 0o666 & ~umask


@pytest.mark.parametrize("how", ["same", "other spelling", "symlink", "hard link"])
def test_output_that_is_the_input_is_refused(tmp_path, how):
    src = tmp_path / "in.wav"
    writer.write_clip(src, np.zeros((10, 1)), 8000)
    out = {"same": src, "other spelling": tmp_path / "." / "sub" / ".." / "in.wav"}.get(how, tmp_path / "alias.wav")
    (tmp_path / "sub").mkdir()
    if how == "symlink":
        out.symlink_to(src)
    elif how == "hard link":
        os.link(src, out)
    with pytest.raises(OutputRefused, match="is the input"):
        writer.check_output_path(out, inputs=[src], overwrite=True)


def test_existing_output_needs_overwrite_and_folder_must_exist(tmp_path):
    p = tmp_path / "o.wav"
    writer.write_clip(p, np.zeros((10, 1)), 8000)
    with pytest.raises(OutputRefused, match="exists; give --overwrite"):
        writer.write_clip(p, np.zeros((10, 1)), 8000)
    with pytest.raises(OutputRefused, match="does not exist"):
        writer.write_clip(tmp_path / "nowhere" / "o.wav", np.zeros((10, 1)), 8000)


@pytest.mark.parametrize("subtype,fmt,match", [("ULAW", "WAV", "allowed are"), ("PCM_U8", "FLAC", "does not fit"),
                                               ("DOUBLE", "FLAC", "does not fit")])
def test_subtypes_are_checked(subtype, fmt, match):
    with pytest.raises(BadParameter, match=match):
        formats.check_output_subtype(subtype, fmt)


def test_an_ending_naming_another_container_is_refused(tmp_path):
    with pytest.raises(BadParameter, match="names another container"):
        writer.AtomicWriter(tmp_path / "o.flac", 8000, 1, format="WAV", subtype="PCM_16")
    assert folder_listing(tmp_path) == []


def test_wav_beyond_4_gib_is_refused_before_writing(tmp_path):
    # RIFF sizes are 32-bit (Microsoft RIFF specification): a WAV file cannot exceed 4 GiB.
    with pytest.raises(OutputRefused, match="does not fit a WAV"):
        writer.AtomicWriter(tmp_path / "o.wav", 48000, 2, format="WAV", subtype="DOUBLE",
                            frames_hint=48000 * 3600 * 2)
    assert folder_listing(tmp_path) == []


@pytest.mark.parametrize("where", ["temporary file's permissions", "writer's meter"])
def test_ctrl_c_while_the_writer_is_being_made_leaves_nothing(tmp_path, monkeypatch, where):
    # Ctrl-C can land between creating the temporary file and the end of the constructor, before
    # any caller holds the writer to abort it: the constructor itself must take the file back.
    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    if where == "writer's meter":
        monkeypatch.setattr(writer, "TruePeakMeter", interrupted)
    else:
        monkeypatch.setattr(tempfiles.os, "fchmod", interrupted)
    with pytest.raises(KeyboardInterrupt):
        writer.AtomicWriter(tmp_path / "out.wav", 48000, 2, format="WAV", subtype="PCM_24")
    assert os.listdir(tmp_path) == []


def test_sidecar_is_written_atomically(tmp_path):
    p = sidecar.sidecar_path(tmp_path / "o.wav")
    assert p.endswith("o.wav.json")
    sidecar.write_sidecar(p, {"a": 1})
    assert open(p).read() == '{\n  "a": 1\n}\n'
    with pytest.raises(ValueError):
        sidecar.write_sidecar(tmp_path / "n.json", {"x": float("nan")})  # JSON has no NaN (RFC 8259)
    assert folder_listing(tmp_path) == ["o.wav.json"]


# ---------------------------------------------------------------------------
# true peak of what is written; reproducible float files
# ---------------------------------------------------------------------------


def riff_chunk_ids(data: bytes) -> list[bytes]:
    """The ids of a RIFF/WAVE file's top-level chunks (Microsoft RIFF layout: id, 32-bit LE size, padded to even)."""
    assert data[:4] == b"RIFF" and data[8:12] == b"WAVE"
    ids, i = [], 12
    while i + 8 <= len(data):
        cid, size = data[i:i + 4], struct.unpack("<I", data[i + 4:i + 8])[0]
        ids.append(cid)
        i += 8 + size + (size & 1)
    return ids


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "FLOAT", "DOUBLE"])
def test_true_peak_is_that_of_the_samples_in_the_file(tmp_path, subtype):
    # Reference: the file read back (the stdlib wave module for integers, no libsndfile), then
    # scipy.signal.upfirdn with the ITU-R BS.1770-4 Annex 2 filter over the whole signal
    # (tests/test_truepeak.py). The writer meters the dithered, rounded, saturated integers as
    # written, and a FLOAT file's float32 values, so the two agree to rounding.
    from tests.test_truepeak import fs4_sine, upfirdn_peak

    rng = np.random.default_rng(5)
    x = 0.9 * fs4_sine(5000)[:, None] * [1.0, 0.5] + 0.01 * rng.standard_normal((5000, 2))
    x[4000:4010] = [1.3, -1.3]  # beyond full scale: saturated in integer files, kept in float ones
    p = tmp_path / "t.wav"
    stats = writer.write_clip(p, x, 48000, subtype, seed=2)
    if subtype in formats.INTEGER_BITS:
        ints, bits = read_wav_ints(p)
        y = ints / 2.0 ** (bits - 1)
    else:
        y, _ = reader.read_clip(p)
    assert stats.true_peak == pytest.approx(upfirdn_peak(y), rel=1e-12)
    assert stats.true_peak >= stats.peak and stats.true_peak_dbtp == pytest.approx(20 * np.log10(stats.true_peak))
    assert stats.clipped_samples == 20
    # the ring of the saturated step goes above full scale between samples (an inter-sample over)
    assert stats.true_peak_dbtp > 0.0


@pytest.mark.parametrize("fmt,ext,subtype", [("WAV", ".wav", "FLOAT"), ("WAV", ".wav", "DOUBLE"),
                                             ("AIFF", ".aiff", "FLOAT"), ("CAF", ".caf", "DOUBLE")])
def test_float_files_are_byte_reproducible(tmp_path, fmt, ext, subtype):
    # libsndfile would write a PEAK chunk with the wall-clock time into float files (common practice
    # of the format, no source): the writer leaves it out, so the same samples give the same bytes.
    x = np.random.default_rng(1).uniform(-1, 1, (3000, 2))
    a, b = tmp_path / ("a" + ext), tmp_path / ("b" + ext)
    writer.write_clip(a, x, 44100, subtype, format=fmt)
    writer.write_clip(b, x, 44100, subtype, format=fmt)
    assert a.read_bytes() == b.read_bytes()
    if fmt == "WAV":
        assert b"PEAK" not in riff_chunk_ids(a.read_bytes())
    # the samples are still exactly those given (float32 rounding for FLOAT)
    y, _ = reader.read_clip(a)
    np.testing.assert_array_equal(y, x.astype(np.float32) if subtype == "FLOAT" else x)


def test_leftover_parts_are_removed_unless_a_living_writer_holds_them(tmp_path):
    # flock(2) locks go with the open file and vanish when their process dies (Linux man page, flock(2)):
    # a writer's own temporary file is held while it works; a killed writer's is not.
    import time

    from audition.io import tempfiles

    target = str(tmp_path / "x.wav")
    living = tempfiles._TempFile(target)  # held from the moment it is made
    killed = tmp_path / ".x.wav.abcd1234.part"
    young = tmp_path / ".x.wav.zzzz9999.part"
    other = tmp_path / ".y.wav.abcd1234.part"
    long_ago = time.time() - 3600
    for p in (killed, other):
        p.write_bytes(b"half")
        os.utime(p, (long_ago, long_ago))
    os.utime(living.name, (long_ago, long_ago))
    young.write_bytes(b"just made")  # could be a writer that has not locked it yet
    removed = tempfiles.remove_leftover_parts(target)
    assert removed == [killed.name]
    assert os.path.exists(living.name) and young.exists() and other.exists()
    living.remove()
