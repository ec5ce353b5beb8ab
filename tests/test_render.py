"""Tests of the streaming render (audition.render) and ``audition render``.

References: scipy.signal.sosfilt over the whole signal (reference library) for the
filtering; hashlib SHA-256 (FIPS 180-4) for the input's bytes; Python's ``wave``
module and ``struct`` (stdlib) to read and build WAV files without libsndfile.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import resource
import signal
import subprocess
import sys

import numpy as np
import pytest
import scipy.signal

from audition import __version__, design, render, streamfilter
from audition.cli import main
from audition.errors import BadInputFile, OutputRefused
from audition.io import formats, reader, writer

from tests.test_io import read_wav_ints, wav_bytes


def signal_block(frames, channels, seed=0, level=0.3):
    rng = np.random.default_rng(seed)
    t = np.arange(frames) / 48000.0
    tones = np.sin(2 * np.pi * np.outer(t, 440.0 * (1 + np.arange(channels))))
    return level * (0.5 * tones + rng.uniform(-1, 1, (frames, channels)))


def sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def listing(path) -> list[str]:
    return sorted(os.listdir(path))


DESIGNS = {
    "second order": lambda rate: design.lowpass(7000.0, rate, q=0.9),
    "6th order Butterworth + rumble": lambda rate: design.lowpass(9000.0, rate, order=6, highpass_hz=30.0),
    "cascade with first order": lambda rate: design.from_sections([(6000.0, 1.2), (11000.0, None)], rate),
}


# ---------------------------------------------------------------------------
# the filtering is the one-pass result
# ---------------------------------------------------------------------------


# one-frame blocks are slow in Python, so they run on 1 and 2 channels only
BLOCKS_CHANNELS = [(b, c) for b in (1, 7, 1000, 4097, formats.BLOCK_FRAMES) for c in (1, 2, 5) if (b, c) != (1, 5)]


@pytest.mark.parametrize("block_frames,channels", BLOCKS_CHANNELS)
@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_double_render_equals_sosfilt_of_the_whole_signal(tmp_path, block_frames, channels, name):
    # Reference: scipy.signal.sosfilt over the whole signal at once (zero initial state); the
    # streamed render with the state carried across blocks must match to 1e-12 (seams invisible).
    frames = 9001 if block_frames > 1 else 700
    x = signal_block(frames, channels, seed=channels)
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, x, 48000, "DOUBLE")
    d = DESIGNS[name](48000.0)
    r = render.render_file(src, out, d, block_frames=block_frames, threads=block_frames != 7)
    y, rate = reader.read_clip(out)
    ref = scipy.signal.sosfilt(d.sos, x, axis=0)
    assert rate == 48000.0 and y.shape == x.shape and r.frames == frames
    np.testing.assert_allclose(y, ref, rtol=0, atol=1e-12)
    assert r.sections == len(d.sos) and not r.dither


def test_streaming_filter_carries_its_state():
    # scipy.signal.sosfilt with zi carried: the same split-chunk equality scipy's own tests use.
    d = design.lowpass(5000.0, 44100.0, order=4)
    x = signal_block(5000, 2)
    f = streamfilter.StreamingFilter(d.sos, 2)
    y = np.concatenate([f(x[:1234]), f(x[1234:1235]), f(x[1235:])])
    np.testing.assert_allclose(y, scipy.signal.sosfilt(d.sos, x, axis=0), rtol=0, atol=1e-14)
    _, zf = scipy.signal.sosfilt(d.sos, x, axis=0, zi=np.zeros((len(d.sos), 2, 2)))
    np.testing.assert_allclose(f.zi, zf, rtol=0, atol=1e-14)


@pytest.mark.parametrize("subtype", ["PCM_16", "PCM_24"])
def test_integer_render_is_sosfilt_plus_tpdf_error(tmp_path, subtype):
    # Reference scipy.signal.sosfilt; dither +-1 LSB plus rounding keeps every sample within 1.5 LSB
    # of the exact result (LWV 1992: the total error spans (-1.5, 1.5) LSB), and its power is LSB^2/4.
    bits = formats.INTEGER_BITS[subtype]
    x = np.round(signal_block(40_000, 2) * 2 ** (bits - 1)) / 2 ** (bits - 1)
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, x, 48000, subtype, dither=False)
    d = DESIGNS["second order"](48000.0)
    render.render_file(src, out, d)
    ints, _ = read_wav_ints(out)  # stdlib reader, not libsndfile
    e = ints - scipy.signal.sosfilt(d.sos, x, axis=0) * 2 ** (bits - 1)
    assert np.abs(e).max() < 1.5
    assert np.mean(e ** 2) == pytest.approx(0.25, abs=0.01)


def _low_level_sine_render(tmp_path, dither):
    """A 1 kHz sine of 1.5 LSB (16-bit) peak, 2 s at 48 kHz, stored as DOUBLE, rendered to PCM_16."""
    rate, f, n = 48000, 1000, 96000
    x = (1.5 / 2 ** 15 * np.sin(2 * np.pi * f * np.arange(n) / rate))[:, None]
    src, out = tmp_path / "sine.wav", tmp_path / f"sine-{dither}.wav"
    writer.write_clip(src, x, rate, "DOUBLE", overwrite=True)
    d = design.lowpass(18000.0, float(rate), q=0.5)  # flat to well above the 9th harmonic
    render.render_file(src, out, d, subtype="PCM_16", dither=dither, seed=7, overwrite=True)
    ints, _ = read_wav_ints(out)  # stdlib reader, not libsndfile
    return ints[:, 0].astype(float), scipy.signal.sosfilt(d.sos, x[:, 0]) * 2 ** 15


def _harmonics_db(q, f=1000, rate=48000):
    """Levels of harmonics 3, 5, 7, 9 relative to the fundamental, from one coherent FFT (2 s, no window)."""
    n = len(q)
    spec = np.abs(np.fft.rfft(q)) / (n / 2)
    fund = spec[f * n // rate]
    return fund, np.array([20 * np.log10(spec[k * f * n // rate] / fund) for k in (3, 5, 7, 9)])


def test_undithered_render_of_a_low_level_sine_has_the_expected_distortion(tmp_path):
    # LWV 1992: without dither the requantisation error of a signal a few LSB high is a deterministic
    # function of the signal, so it shows up as harmonics. Expected levels computed independently:
    # numpy rounding of scipy.signal.sosfilt's output (reference library) gives the same integers.
    q, exact = _low_level_sine_render(tmp_path, dither=False)
    expected = np.round(exact)
    assert np.count_nonzero(q != expected) <= 2  # ties at exactly .5 LSB may round either way
    _, h_got = _harmonics_db(q)
    _, h_ref = _harmonics_db(expected)
    np.testing.assert_allclose(h_got, h_ref, atol=0.1)
    assert h_got.max() > -30.0  # the third harmonic stands out (about -16 dB re the fundamental here)


def test_dithered_render_of_a_low_level_sine_has_no_harmonics(tmp_path):
    # LWV 1992: TPDF dither of +-1 LSB makes the error's first two moments independent of the signal:
    # the harmonics sink into a flat noise floor and the fundamental keeps its level (E[q | x] = x).
    q, exact = _low_level_sine_render(tmp_path, dither=True)
    fund, h = _harmonics_db(q)
    assert h.max() < -40.0  # noise floor per bin: LSB^2/4 spread over 48000 bins, about -55 dB re 1.5 LSB
    fund_ref, _ = _harmonics_db(exact)
    assert 20 * np.log10(fund / fund_ref) == pytest.approx(0.0, abs=0.2)
    e = q - exact
    assert np.mean(e ** 2) == pytest.approx(0.25, abs=0.01)  # total error power LSB^2/4 (LWV 1992)
    assert abs(np.corrcoef(e, exact)[0, 1]) < 0.02  # uncorrelated with the signal


def test_same_seed_same_bytes_whatever_the_blocks(tmp_path):
    # "The same inputs give the same bytes" (project convention), threads or not, any block size.
    src = tmp_path / "in.wav"
    writer.write_clip(src, signal_block(20_000, 2), 48000, "PCM_24", dither=False)
    d = DESIGNS["second order"](48000.0)
    outs = []
    for i, (bf, thr, seed) in enumerate([(65536, True, 5), (333, False, 5), (4096, True, 5), (4096, True, 6)]):
        out = tmp_path / f"o{i}.wav"
        render.render_file(src, out, d, block_frames=bf, threads=thr, seed=seed, sidecar=False)
        outs.append(out.read_bytes())
    assert outs[0] == outs[1] == outs[2]
    assert outs[3] != outs[0]


@pytest.mark.parametrize("subtype", ["FLOAT", "DOUBLE"])
def test_two_float_renders_give_identical_bytes(tmp_path, subtype):
    # "The same inputs give the same bytes" (project convention) holds for float outputs too:
    # libsndfile's time-stamped PEAK chunk is left out (RIFF chunk list checked directly).
    from tests.test_io import riff_chunk_ids

    src = tmp_path / "in.wav"
    writer.write_clip(src, signal_block(9000, 2), 48000, subtype)
    d = DESIGNS["second order"](48000.0)
    outs = []
    for i in range(2):
        out = tmp_path / f"o{i}.wav"
        render.render_file(src, out, d, block_frames=4097 if i else 65536)
        outs.append(out.read_bytes())
    assert outs[0] == outs[1]
    assert b"PEAK" not in riff_chunk_ids(outs[0])


# ---------------------------------------------------------------------------
# formats, metadata, the input untouched
# ---------------------------------------------------------------------------

def _format_grid():
    """Every container the issue names with every subtype libsndfile lets it hold (sf.check_format),
    rates 8 kHz..384 kHz and 1..8 channels spread over the cases."""
    import soundfile as sf

    rates = [8000, 11025, 22050, 32000, 44100, 48000, 88200, 96000, 192000, 384000]
    out = []
    for ext, fmt in [(".wav", "WAV"), (".w64", "W64"), (".rf64", "RF64"), (".flac", "FLAC"), (".aiff", "AIFF")]:
        for subtype in ("PCM_S8", "PCM_U8", "PCM_16", "PCM_24", "PCM_32", "FLOAT", "DOUBLE"):
            if sf.check_format(fmt, subtype):
                i = len(out)
                out.append((ext, subtype, rates[i % len(rates)], 1 + i % 8))
    return out


FORMATS = _format_grid()


@pytest.mark.parametrize("ext,subtype,rate,channels", FORMATS)
def test_render_keeps_format_rate_channels_metadata_and_the_input(tmp_path, ext, subtype, rate, channels):
    src, out = tmp_path / f"in{ext}", tmp_path / f"out{ext}"
    meta = {"title": "Reel 4, side B", "artist": "Unknown band", "comment": "transfer at 19 cm/s",
            "date": "1971-03-02", "software": "capture"}
    x = signal_block(6000, channels, seed=rate)
    writer.write_clip(src, x, rate, subtype, metadata=meta)
    before = sha(src)
    d = design.lowpass(0.2 * rate, float(rate), q=0.8)
    r = render.render_file(src, out, d)
    assert sha(src) == before  # the input's bytes unchanged (SHA-256, hashlib)
    i_in, i_out = reader.info(src), reader.info(out)
    assert (i_out.format, i_out.subtype, i_out.rate_hz, i_out.channels, i_out.frames) == \
           (i_in.format, i_in.subtype, i_in.rate_hz, i_in.channels, i_in.frames)
    # libsndfile keeps text in WAV/RF64 (LIST INFO), FLAC (Vorbis comments), AIFF; none in W64
    assert bool(i_in.metadata) == (ext != ".w64")
    assert i_out.metadata == i_in.metadata
    # the output is the filtered input within the output's quantisation (sosfilt as reference)
    y_in, _ = reader.read_clip(src)
    y_out, _ = reader.read_clip(out)
    lsb = 2.0 ** (1 - {"FLOAT": 24, "DOUBLE": 52}.get(subtype, formats.INTEGER_BITS.get(subtype, 0)))
    assert np.abs(y_out - scipy.signal.sosfilt(d.sos, y_in, axis=0)).max() <= 1.5 * lsb
    assert r.input_sha256 == before


def test_subtype_option_changes_only_the_encoding(tmp_path):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, signal_block(3000, 2), 48000, "PCM_16")
    assert main([ "render", str(src), str(out), "--f0", "9000", "--subtype", "PCM_24", "--quiet"]) == 0
    i = reader.info(out)
    assert (i.format, i.subtype, i.rate_hz, i.channels) == ("WAV", "PCM_24", 48000.0, 2)


# ---------------------------------------------------------------------------
# peak, clipping, sidecar, json
# ---------------------------------------------------------------------------


def test_clipping_is_counted_saturated_and_reported(tmp_path, capsys):
    # Reference: sosfilt of the input (scipy); samples beyond full scale after +6 dB are counted
    # independently here from it, and saturate with their own sign (never wrap).
    x = signal_block(20_000, 2, level=0.5)
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, x, 48000, "PCM_16", dither=False)
    x, _ = reader.read_clip(src)
    rc = main(["render", str(src), str(out), "--f0", "8000", "--gain-db", "6", "--no-dither", "--json"])
    assert rc == 0
    cap = capsys.readouterr()
    j = json.loads(cap.out)
    d = design.lowpass(8000.0, 48000.0, gain_db=6.0)
    ref = scipy.signal.sosfilt(d.sos, x, axis=0) * 2 ** 15
    near = np.abs(np.abs(ref) - 32767.5) < 1.0
    assert not near.any()  # no sample within an LSB of the threshold, so the count is unambiguous
    expected = int(np.count_nonzero(ref > 32767.5) + np.count_nonzero(ref < -32768.5))
    assert expected > 100 and j["clipped_samples"] == expected
    ints, _ = read_wav_ints(out)
    over = np.abs(ref) > 32768.5
    assert np.all(np.sign(ints[over]) == np.sign(ref[over]))
    assert np.all(np.abs(ints[over]) >= 32767)
    trim = 20 * np.log10(np.abs(ref).max() / 32768)
    assert j["trim_db"] == pytest.approx(trim, abs=0.01)
    assert f"lower the level by {np.ceil(trim * 10) / 10:.1f} dB" in cap.err
    assert len(cap.err.strip().splitlines()) == 1


def test_sidecar_records_what_was_done(tmp_path, capsys):
    x = signal_block(10_000, 2)
    src, out = tmp_path / "in.flac", tmp_path / "out.flac"
    writer.write_clip(src, x, 44100, "PCM_24", metadata={"title": "t"})
    assert main(["render", str(src), str(out), "--f0", "10000", "--q", "0.6", "--seed", "42", "--json"]) == 0
    j = json.loads(capsys.readouterr().out)
    for key in ("input", "output", "sidecar", "rate", "channels", "subtype", "frames", "sections", "method",
                "dither", "peak_dbfs", "clipped_samples", "seconds", "realtime_factor"):
        assert key in j
    rec = json.loads(open(j["sidecar"]).read())
    assert j["sidecar"] == str(out) + ".json"
    assert rec["input"]["sha256"] == sha(src) and rec["input"]["size_bytes"] == os.path.getsize(src)
    assert rec["input"]["path"] == os.path.abspath(src)
    d = design.lowpass(10000.0, 44100.0, q=0.6)
    assert rec["design"] == json.loads(json.dumps(d.to_dict()))
    assert rec["dither"] == {"kind": "tpdf", "peak_lsb": 1.0, "bits": 24, "seed": 42, "generator": "numpy PCG64"}
    assert rec["audition_version"] == __version__
    when = dt.datetime.fromisoformat(rec["processed_utc"].replace("Z", "+00:00"))  # ISO 8601, UTC
    assert when.utcoffset() == dt.timedelta(0)
    assert abs((dt.datetime.now(dt.timezone.utc) - when).total_seconds()) < 120
    # the sample peak recorded is the peak of the file written (20*log10 of max |sample|)
    y, _ = reader.read_clip(out)
    assert rec["peak_dbfs"] == pytest.approx(20 * np.log10(np.abs(y).max()), abs=1e-9)
    assert j["peak_dbfs"] == rec["peak_dbfs"] and rec["clipped_samples"] == 0
    assert j["sections"] == rec["design"]["sections"] and j["frames"] == 10_000


def test_true_peak_of_the_output_in_json_sidecar_and_summary(tmp_path, capsys):
    # A fs/4 sine sampled 45 degrees from its crests at -1 dBFS sample level has crests 3 dB higher
    # (ITU-R BS.1770-4 Annex 2, the method's point): inter-sample overs with no sample clipped.
    # Reference for the reading: the output file read back with the stdlib wave module, then
    # scipy.signal.upfirdn with the Annex 2 filter (tests/test_truepeak.py).
    from tests.test_truepeak import upfirdn_peak

    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    # the input leads by the filter's phase at fs/4 (scipy.signal.sosfreqz), so the output's samples
    # sit at 45 degrees; a 200-sample fade-in keeps the onset transient small
    d = design.lowpass(20000.0, 48000.0, q=0.7071)
    h = scipy.signal.sosfreqz(d.sos, worN=[12000.0], fs=48000.0)[1][0]
    n = np.arange(20_000)
    x = 10 ** (-1 / 20) * np.sqrt(2) / abs(h) * np.sin(np.pi / 2 * n + np.pi / 4 - np.angle(h))
    x *= np.minimum(1.0, n / 200.0)
    x = x[:, None] * [1.0, 0.25]
    writer.write_clip(src, x, 48000, "DOUBLE")  # a float input carries its crests beyond full scale
    assert main(["render", str(src), str(out), "--f0", "20000", "--subtype", "PCM_24", "--json"]) == 0
    j = json.loads(capsys.readouterr().out)
    rec = json.loads(open(j["sidecar"]).read())
    ints, bits = read_wav_ints(out)
    y = ints / 2.0 ** (bits - 1)
    ref = 20 * np.log10(upfirdn_peak(y))
    assert j["true_peak_dbtp"] == rec["true_peak_dbtp"] == pytest.approx(ref, abs=1e-9)
    assert j["peak_dbfs"] == pytest.approx(20 * np.log10(np.abs(y).max()), abs=1e-9)  # still the sample peak
    assert j["clipped_samples"] == 0 and j["peak_dbfs"] < 0.0 < j["true_peak_dbtp"]
    # 3.01 dB between samples and crests, read within 0.25 dB (tests/test_truepeak.py)
    assert j["peak_dbfs"] == pytest.approx(-1.0, abs=0.01)
    assert j["true_peak_dbtp"] == pytest.approx(-1.0 + 3.0103, abs=0.25)
    assert "ITU-R BS.1770-4" in rec["true_peak_kind"]
    assert main(["render", str(src), str(tmp_path / "o2.wav"), "--f0", "20000", "--subtype", "PCM_24"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert any(ln.startswith("  sample peak") and f"{j['peak_dbfs']:+.2f} dBFS" in ln for ln in lines)
    assert any(ln.startswith("  true peak") and f"{j['true_peak_dbtp']:+.2f} dBTP" in ln for ln in lines)


def test_summary_names_sample_peak_and_no_progress_bar_off_a_terminal(tmp_path, capsys):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, signal_block(48000 * 6, 1), 48000, "PCM_16")  # longer than the bar's 5 s
    assert main(["render", str(src), str(out), "--f0", "8000"]) == 0
    cap = capsys.readouterr()
    assert "sample peak" in cap.out and "dBFS" in cap.out
    assert cap.err == ""  # stderr is not a terminal under pytest: no bar


def _render_on_a_terminal(tmp_path, *extra):
    """Run ``audition render`` as a process whose stderr is a pseudo-terminal; returns (status, terminal text)."""
    import pty
    import select

    src = tmp_path / "long.wav"
    if not src.exists():
        writer.write_clip(src, signal_block(48000 * 8, 2), 48000, "PCM_16")  # 8 s: "longer than a few seconds"
    out = tmp_path / f"o{len(extra)}.wav"
    master, slave = pty.openpty()
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ, PYTHONPATH=root + os.pathsep + os.environ.get("PYTHONPATH", ""))
    p = subprocess.Popen([sys.executable, "-m", "audition", "render", str(src), str(out), "--f0", "8000", *extra],
                         stdout=subprocess.DEVNULL, stderr=slave, env=env)
    os.close(slave)
    chunks = []
    while True:
        ready, _, _ = select.select([master], [], [], 60)
        if not ready:
            break
        try:
            data = os.read(master, 4096)
        except OSError:  # the child closed the terminal
            break
        if not data:
            break
        chunks.append(data)
    os.close(master)
    return p.wait(timeout=60), b"".join(chunks).decode("utf-8", "replace")


def test_progress_on_a_terminal_and_quiet_with_the_option(tmp_path):
    # The behaviour: a progress bar on a terminal for files longer than a few seconds,
    # nothing with --quiet (POSIX pseudo-terminal as the terminal).
    rc, text = _render_on_a_terminal(tmp_path)
    assert rc == 0 and "%" in text
    rc, text = _render_on_a_terminal(tmp_path, "--quiet")
    assert rc == 0 and text.strip() == ""


def test_progress_bar_draws_on_a_terminal():
    from audition.cli.render import ProgressBar
    import io

    s = io.StringIO()
    bar = ProgressBar("rendering", stream=s, width=10)
    bar(5, 10)
    assert "[#####.....]" in s.getvalue() and "50.0%" in s.getvalue()


def test_overwrite_replaces_output_and_sidecar(tmp_path):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, signal_block(3000, 1), 48000)
    args = ["render", str(src), str(out), "--f0", "8000", "--quiet"]
    assert main(args) == 0
    first = out.read_bytes()
    assert main(args + ["--overwrite", "--seed", "1"]) == 0
    assert out.read_bytes() != first
    assert listing(tmp_path) == ["in.wav", "out.wav", "out.wav.json"]


# ---------------------------------------------------------------------------
# bad inputs through the command line: exit 2, one line naming the file, nothing left
# ---------------------------------------------------------------------------


def _bad_case(tmp_path, case, monkeypatch):
    """Set up one bad case; returns (argv tail, expected words in the message)."""
    src = tmp_path / "in.wav"
    out = tmp_path / "out.wav"
    if case == "missing":
        return [str(src), str(out)], ["in.wav", "no such file"]
    if case == "zero length":
        src.write_bytes(b"")
        return [str(src), str(out)], ["in.wav", "empty file"]
    if case == "corrupt":
        src.write_bytes(os.urandom(4000))
        return [str(src), str(out)], ["in.wav", "not a sound file"]
    if case == "folder as input":
        (tmp_path / "d.wav").mkdir()
        return [str(tmp_path / "d.wav"), str(out)], ["d.wav", "folder"]
    if case == "unreadable":
        src.write_bytes(wav_bytes(np.zeros((100, 1)), 8000, 1, "<i2"))

        def denied(*a, **k):
            raise PermissionError(13, "Permission denied")

        monkeypatch.setattr(reader, "open", denied, raising=False)  # root reads through chmod 000
        return [str(src), str(out)], ["in.wav", "not readable"]
    if case == "unsupported encoding":
        # G.711 mu-law WAV (format tag 7): libsndfile reads it, audition does not write it
        src.write_bytes(wav_bytes(np.full((800, 1), 0xFF), 8000, 7, "u1"))
        return [str(src), str(out), "--f0", "3000"], ["in.wav", "ULAW", "--subtype"]
    if case == "header with no frames":
        src.write_bytes(wav_bytes(np.zeros((0, 2)), 48000, 1, "<i2"))  # a valid RIFF header, empty data chunk
        return [str(src), str(out)], ["in.wav", "no audio frames"]
    if case == "inf sample":
        x = np.zeros((70_000, 3))
        x[65_600, 2] = -np.inf  # the first offending sample: frame 65600, third channel
        x[69_000, 0] = np.nan
        src.write_bytes(wav_bytes(x, 48000, 3, "<f8"))
        return [str(src), str(out)], ["in.wav", "frame 65600 channel 3", "-inf"]
    if case == "rate below 8 kHz":
        src.write_bytes(wav_bytes(np.zeros((4000, 1)), 4000, 1, "<i2"))
        return [str(src), str(out), "--f0", "1000"], ["in.wav", "at least 8000 Hz"]
    if case == "nan sample":
        x = np.zeros((70_000, 2))
        x[66_000, 1] = np.nan  # in the second block, so the first one is already written
        src.write_bytes(wav_bytes(x, 48000, 3, "<f4"))
        return [str(src), str(out)], ["in.wav", "frame 66000 channel 2", "nan"]
    writer.write_clip(src, signal_block(90_000, 2), 48000, "PCM_16")
    if case == "output is input":
        return [str(src), str(tmp_path / "sub" / ".." / "in.wav")], ["in.wav", "is the input"]
    if case == "output links to input":
        os.symlink(src, out)
        return [str(src), str(out), "--overwrite"], ["out.wav", "is the input"]
    if case == "output exists":
        out.write_bytes(b"keep me")
        return [str(src), str(out)], ["out.wav", "--overwrite"]
    if case == "folder missing":
        return [str(src), str(tmp_path / "no" / "out.wav")], ["out.wav", "does not exist"]
    if case == "folder not writable":
        real = os.access
        monkeypatch.setattr(os, "access", lambda p, m, **k: False if os.fspath(p) == str(tmp_path) else real(p, m))
        return [str(src), str(out)], ["out.wav", "not writable"]
    if case == "disk full":
        real = writer.AtomicWriter._write_samples  # every write of samples to libsndfile
        calls = []

        def fills_up(self, data):
            calls.append(1)
            if len(calls) == 2:
                raise writer.sf.LibsndfileError(2)  # what a failed write(2) gives from libsndfile
            return real(self, data)

        monkeypatch.setattr(writer.AtomicWriter, "_write_samples", fills_up)
        return [str(src), str(out)], ["out.wav", "disk full"]
    if case == "f0 at nyquist":
        return [str(src), str(out), "--f0", "24000"], ["in.wav", "24000", "rate/2"]
    if case == "f0 above nyquist":
        return [str(src), str(out), "--f0", "30000"], ["in.wav", "30000", "rate/2"]
    if case == "no filter":
        return [str(src), str(out)], ["give a filter"]
    raise AssertionError(case)


BAD_CASES = ["missing", "zero length", "header with no frames", "corrupt", "folder as input", "unreadable",
             "unsupported encoding", "nan sample", "inf sample", "rate below 8 kHz", "output is input", "output links to input", "output exists", "folder missing",
             "folder not writable", "disk full", "f0 at nyquist", "f0 above nyquist", "no filter"]


@pytest.mark.parametrize("case", BAD_CASES)
def test_bad_input_gives_one_line_exit_2_and_leaves_nothing(tmp_path, capsys, monkeypatch, case):
    (tmp_path / "sub").mkdir()
    argv, words = _bad_case(tmp_path, case, monkeypatch)
    if "--f0" not in argv and case != "no filter":
        argv += ["--f0", "8000"]
    before = {n: (tmp_path / n).stat().st_mtime_ns for n in listing(tmp_path) if (tmp_path / n).is_file()}
    rc = main(["render", *argv])
    err = capsys.readouterr().err
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("audition render: error:")
    for w in words:
        assert w in lines[0]
    after = listing(tmp_path)
    assert not any(n.startswith(".") for n in after)  # no temporary file
    assert "out.wav.json" not in after
    if case != "output exists" and case != "output links to input":
        assert "out.wav" not in after
    for n, m in before.items():  # nothing that was there was changed
        assert (tmp_path / n).stat().st_mtime_ns == m


def test_interrupt_part_way_leaves_nothing(tmp_path):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, signal_block(200_000, 2), 48000)
    d = DESIGNS["second order"](48000.0)

    def ctrl_c(done, total):
        if done > 100_000:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        render.render_file(src, out, d, block_frames=8192, progress=ctrl_c)
    assert listing(tmp_path) == ["in.wav"]


def test_a_real_file_size_limit_part_way_leaves_nothing(tmp_path):
    # A real failed write(2), not a stand-in: the child process may not grow a file past 400 kB
    # (RLIMIT_FSIZE, POSIX), so libsndfile's writes fail part-way as on a full disk.
    src = tmp_path / "in.wav"
    writer.write_clip(src, signal_block(150_000, 2), 48000)  # 600 kB

    def limit():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (400_000, resource.RLIM_INFINITY))

    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ, PYTHONPATH=root + os.pathsep + os.environ.get("PYTHONPATH", ""))
    p = subprocess.run([sys.executable, "-m", "audition", "render", str(src), str(tmp_path / "out.wav"),
                        "--f0", "8000"], capture_output=True, text=True, preexec_fn=limit, env=env, timeout=120)
    assert p.returncode == 2, p.stderr
    assert "out.wav" in p.stderr and "writing failed" in p.stderr and len(p.stderr.strip().splitlines()) == 1
    assert listing(tmp_path) == ["in.wav"]


def test_design_at_another_rate_is_refused(tmp_path):
    src, out = tmp_path / "in.wav", tmp_path / "out.wav"
    writer.write_clip(src, signal_block(1000, 1), 44100)
    with pytest.raises(Exception, match="design is for 48000 Hz but the file is at 44100 Hz"):
        render.render_file(src, out, design.lowpass(8000.0, 48000.0))
    assert listing(tmp_path) == ["in.wav"]


def test_library_errors_are_audition_errors(tmp_path):
    with pytest.raises(BadInputFile):
        render.render_file(tmp_path / "none.wav", tmp_path / "o.wav", design.lowpass(8000.0, 48000.0))
    src = tmp_path / "in.wav"
    writer.write_clip(src, np.zeros((10, 1)), 48000)
    with pytest.raises(OutputRefused):
        render.render_file(src, src, design.lowpass(8000.0, 48000.0), overwrite=True)
