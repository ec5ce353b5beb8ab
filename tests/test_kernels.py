"""The inner loops of the streaming engine, compiled and portable, against the references they replace.

References: scipy.signal.sosfilt (reference library) for the filter, bit for bit;
libsndfile through soundfile (reference library) for the PCM bytes, both ways,
byte for byte; the rounding and saturation rules of Lipshitz, Wannamaker and
Vanderkooy (J. Audio Eng. Soc. 40(5), 1992: dither added before rounding to the
nearest step) written out in plain numpy for the quantiser. Every check runs on both
implementations (the C library where it was built, and the numpy one).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from audition import annex2, design, kernels
from audition.io import reader, writer

RATE = 48000

BACKENDS = ["portable", "compiled"]


def noise(frames, channels, seed=1, level=0.5):
    return np.random.default_rng(seed).standard_normal((frames, channels)) * level


@pytest.mark.parametrize("order", [1, 2, 3, 4, 8])
@pytest.mark.parametrize("channels", [1, 2, 5])
def test_sos_filter_equals_scipy_sosfilt_bit_for_bit(impl, order, channels):
    # Reference: scipy.signal.sosfilt with the state carried across the same cuts (reference library).
    sos = np.ascontiguousarray(design.lowpass(7000.0, RATE, order=order).sos)
    x = noise(10_007, channels, seed=order * 10 + channels)
    zi_ref = np.zeros((len(sos), 2, channels))
    zi = zi_ref.copy()
    for a, b in [(0, 1), (1, 4000), (4000, 4001), (4001, 10_007)]:
        want, zi_ref = scipy.signal.sosfilt(sos, x[a:b], axis=0, zi=zi_ref)
        got = np.empty_like(x[a:b])
        impl.sos_filter(np.ascontiguousarray(x[a:b]), sos, zi, got)
        assert np.array_equal(got, want)
        assert np.array_equal(zi, zi_ref)


def plain_tpdf(x, bits, words):
    """The quantiser's rule in whole-array numpy: rint(x*s + (w1 - w2)/2**16), saturated."""
    s = 2.0 ** (bits - 1)
    d = (words[0::2].astype(np.int32) - words[1::2].astype(np.int32)).reshape(x.shape)
    t = np.rint((x * (s * 65536.0) + d) * (1.0 / 65536.0))
    return t, np.clip(t, -s, s - 1)


@pytest.mark.parametrize("bits", [8, 16, 24, 32])
def test_tpdf_quantise_is_dither_then_round_then_saturate(impl, bits):
    x = noise(3001, 2, seed=bits, level=0.6)  # about 10 % of the samples beyond full scale
    words = np.random.default_rng(bits).integers(0, 2**16, 2 * x.size, dtype=np.uint16)
    k = np.empty(x.shape, dtype=np.int32)
    hi, lo, clipped = impl.tpdf_quantise(x, 2.0 ** (bits - 1), words, True, k)
    t, want = plain_tpdf(x, bits, words)
    assert np.array_equal(k, want.astype(np.int32))
    assert clipped == np.count_nonzero(t != want) > 0
    assert (hi, lo) == (max(t.max(), 0.0), min(t.min(), 0.0))
    # without dither: plain rounding to the nearest step
    impl.tpdf_quantise(x, 2.0 ** (bits - 1), words[:0], False, k)
    s = 2.0 ** (bits - 1)
    assert np.array_equal(k, np.clip(np.rint(x * s), -s, s - 1).astype(np.int32))


CONTAINERS = [("WAV", "wav"), ("WAVEX", "wav"), ("W64", "w64"), ("RF64", "rf64"), ("AIFF", "aiff"), ("CAF", "caf")]


@pytest.mark.parametrize("fmt,ext", CONTAINERS)
@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24", "PCM_32"])
def test_pcm_bytes_both_ways_equal_libsndfile(impl, tmp_path, fmt, ext, subtype):
    # Reference: libsndfile's own int32 writing and float64 reading (soundfile, reference library).
    bits = int(subtype[4:])
    rng = np.random.default_rng(bits)
    k = rng.integers(-(2 ** (bits - 1)), 2 ** (bits - 1), (5000, 3), dtype=np.int64)
    k[:2] = [[-(2 ** (bits - 1)), 2 ** (bits - 1) - 1, 0], [-1, 1, 2 ** (bits - 2)]]  # both extremes
    ref = tmp_path / f"ref.{ext}"
    with sf.SoundFile(ref, "w", RATE, 3, subtype, format=fmt) as f:
        f.write((k << (32 - bits)).astype(np.int32))  # libsndfile converts left-justified int32
    ours = tmp_path / f"ours.{ext}"
    with writer.AtomicWriter(ours, RATE, 3, format=fmt, subtype=subtype, dither=False) as w:
        assert w._layout is not None  # the byte path, not libsndfile's conversion
        # exact levels: x = k / 2**(bits-1) quantises back to k without dither
        w.write(k / 2.0 ** (bits - 1))
    assert ours.read_bytes() == ref.read_bytes()
    with reader.AudioReader(ref) as r:
        assert r._layout is not None
        got = np.concatenate(list(r.blocks(999)))
    want, _ = sf.read(ref, dtype="float64", always_2d=True)
    assert np.array_equal(got, want)
    assert np.array_equal(got * 2.0 ** (bits - 1), k)


@pytest.mark.parametrize("fmt,subtype", [("FLAC", "PCM_24"), ("WAV", "PCM_U8"), ("WAV", "FLOAT"), ("AIFF", "PCM_S8")])
def test_other_encodings_stay_with_libsndfile(tmp_path, fmt, subtype):
    # The byte path is for plain PCM_16/24/32 only; compressed, 8-bit and float data go through libsndfile.
    p = tmp_path / ("x.flac" if fmt == "FLAC" else "x.aiff" if fmt == "AIFF" else "x.wav")
    x = noise(2000, 2, level=0.1)
    sf.write(p, x, RATE, subtype=subtype, format=fmt)
    with reader.AudioReader(p) as r:
        assert r._layout is None
        got = np.concatenate(list(r.blocks(700)))
    assert np.array_equal(got, sf.read(p, dtype="float64", always_2d=True)[0])


def test_both_implementations_render_the_same_bytes(tmp_path, monkeypatch):
    # The whole render (filter, dither, quantise, PCM bytes, true peak) through each implementation.
    from audition import render

    if kernels.compiled is None:
        pytest.skip("the C kernels were not built on this machine")
    src = tmp_path / "in.wav"
    writer.write_clip(src, noise(70_001, 2, seed=5, level=0.3), RATE, "PCM_24")
    d = design.lowpass(6000.0, RATE, order=4)
    outs = {}
    for name in BACKENDS:
        ns = getattr(kernels, name)
        for fn in vars(kernels.portable):
            monkeypatch.setattr(kernels, fn, getattr(ns, fn))
        out = tmp_path / f"{name}.wav"
        r = render.render_file(src, out, d, seed=3, sidecar=False, block_frames=10_000)
        outs[name] = (out.read_bytes(), r.peak_dbfs, r.true_peak_dbtp, r.clipped_samples)
    assert outs["portable"] == outs["compiled"]


@pytest.mark.parametrize("screen", [True, False])
def test_both_true_peak_scans_read_the_same_to_the_bit(screen):
    # Same windows, same order of summation: the compiled scan equals the numpy one exactly.

    if kernels.compiled is None:
        pytest.skip("the C kernels were not built on this machine")
    rng = np.random.default_rng(7)
    x = np.cumsum(rng.standard_normal((5000, 3)), axis=0) * 0.01  # smooth crests between samples
    readings = []
    for ns in (kernels.portable, kernels.compiled):
        xx = np.vstack([np.zeros((annex2.HISTORY, 3)), x])
        buf = annex2._Scratch(len(xx), 3)
        peak, count = ns.true_peak_scan(xx, float(np.abs(x).max()), screen, buf)
        readings.append(peak)
        assert count > 0
    assert readings[0] == readings[1] > np.abs(x).max()


@pytest.mark.parametrize("fmt,ext,endian", [("AIFF", "aiff", "LITTLE"), ("WAV", "wav", "BIG"), ("CAF", "caf", "LITTLE")])
def test_files_in_the_other_byte_order_read_as_libsndfile_reads_them(impl, tmp_path, fmt, ext, endian):
    # AIFF-C 'sowt' (little-endian AIFF), RIFX (big-endian WAV), little-endian CAF: the byte order
    # comes from the file (libsndfile's SFC_RAW_DATA_NEEDS_ENDSWAP), not from the container's name.
    # Reference: libsndfile's own float64 reading (soundfile, reference library).
    p = tmp_path / f"x.{ext}"
    k = np.random.default_rng(3).integers(-(2**15), 2**15, (3000, 2))
    with sf.SoundFile(p, "w", RATE, 2, "PCM_16", format=fmt, endian=endian) as f:
        f.write((k << 16).astype(np.int32))
    with reader.AudioReader(p) as r:
        assert r._layout is not None and r._layout[1] == (endian == "BIG")
        got = np.concatenate(list(r.blocks(1000)))
    assert np.array_equal(got, sf.read(p, dtype="float64", always_2d=True)[0])
    assert np.array_equal(got * 2.0**15, k)
