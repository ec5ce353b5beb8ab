"""Synth, streaming Welch PSD, bands, crossover and the survey command, against outside references.

Ground truth of the survey against the stems of in-memory clips lives in
tests/test_truth.py; this file covers what it does not: the synth's files
(determinism, stems), the Welch estimate against theory and scipy.signal.welch,
the IEC 61260-1 bands, the noise-bandwidth result, the noise reference options,
the command's JSON and messages, and the same truth checks through the files a
technician would use (``audition synth --stems`` then ``audition survey``).
"""

import json
import math

import numpy as np
import pytest
import soundfile as sf
from scipy import signal

import heardtruth
from audition import design, measure, synth
from audition.cli import main
from audition.errors import BadInputFile, BadParameter
from audition.survey import bands, onepass, programme, welch

RATE = 48000


def run(argv, capsys):
    """Run the command line in-process: (exit status, stdout, stderr)."""
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def rms_dbfs(x) -> float:
    return 20 * math.log10(float(np.sqrt(np.mean(np.square(x)))))


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """One clip made by ``audition synth --stems`` (8 s, 48 kHz stereo, tape hiss at -50 dBFS, seed 5)."""
    d = tmp_path_factory.mktemp("synth")
    code = main(["synth", str(d / "clip.wav"), "--seconds", "8", "--rate", str(RATE), "--channels", "2",
                 "--hiss", "tape", "--hiss-dbfs", "-50", "--lead-in", "1.5", "--seed", "5",
                 "--stems", str(d / "stems")])
    assert code == 0
    return {"dir": d, "mix": d / "clip.wav", "programme": d / "stems" / "clip.programme.wav",
            "hiss": d / "stems" / "clip.hiss.wav"}


# ---------------------------------------------------------------------------
# synth
# ---------------------------------------------------------------------------


def test_same_seed_same_bytes_other_seed_other_bytes(made, tmp_path, capsys):
    # Common practice, no source: a test clip is reproducible from its seed.
    again = tmp_path / "again.wav"
    code, _, _ = run(["synth", again, "--seconds", "8", "--rate", RATE, "--channels", "2", "--hiss", "tape",
                      "--hiss-dbfs", "-50", "--lead-in", "1.5", "--seed", "5", "--stems", tmp_path / "st"], capsys)
    assert code == 0
    assert again.read_bytes() == made["mix"].read_bytes()
    for what in ("programme", "hiss"):
        mine = (tmp_path / "st" / f"again.{what}.wav").read_bytes()
        # float stems too: the writer leaves out libsndfile's time-stamped PEAK chunk
        assert mine == made[what].read_bytes(), what
    other = tmp_path / "other.wav"
    run(["synth", other, "--seconds", "8", "--rate", RATE, "--channels", "2", "--hiss", "tape",
         "--hiss-dbfs", "-50", "--lead-in", "1.5", "--seed", "6"], capsys)
    assert other.read_bytes() != made["mix"].read_bytes()


def test_stems_are_aligned_and_sum_to_the_mix_within_its_quantisation(made):
    mix, rate = sf.read(made["mix"], always_2d=True)
    prog, _ = sf.read(made["programme"], always_2d=True)
    hiss, _ = sf.read(made["hiss"], always_2d=True)
    assert rate == RATE and mix.shape == prog.shape == hiss.shape == (8 * RATE, 2)
    assert sf.info(str(made["hiss"])).subtype == "FLOAT" and sf.info(str(made["mix"])).subtype == "PCM_16"
    err = mix - (prog + hiss)
    lsb = 2.0 ** -15
    # TPDF dither of +-1 LSB plus rounding of +-1/2 LSB bounds the error by 1.5 LSB, and its power
    # is LSB²/6 + LSB²/12 = LSB²/4 (Lipshitz, Wannamaker & Vanderkooy 1992, JAES 40(5)); the
    # float32 stems add about 2^-24 of a sample.
    assert np.max(np.abs(err)) <= 1.5 * lsb + 1e-6
    assert math.sqrt(np.mean(err ** 2)) == pytest.approx(lsb / 2, rel=0.05)
    # Sample-aligned: the programme is silent through the lead-in and starts right after it,
    # and (mix - hiss) correlates with the programme best at lag 0.
    start = int(1.5 * RATE)
    assert not prog[:start].any() and np.abs(prog[start:start + RATE // 10]).max() > 0
    c = signal.correlate((mix - hiss)[:, 0], prog[:, 0], mode="full", method="fft")
    assert np.argmax(c) - (len(prog) - 1) == 0


def test_files_hold_what_synthesise_returns(made):
    # The streamed files against the in-memory synthesis of the same parameters.
    clip = synth.synthesise(seconds=8, rate_hz=RATE, channels=2, hiss_dbfs=-50, hiss="tape",
                            lead_in_seconds=1.5, seed=5)
    for what in ("programme", "hiss"):
        x, _ = sf.read(made[what], always_2d=True)
        np.testing.assert_allclose(x, getattr(clip, what), rtol=0, atol=2.0 ** -24)


@pytest.mark.parametrize("colour", ["white", "pink", "tape"])
def test_hiss_level_and_colour(colour):
    # Level: RMS per channel within 0.1 dB of the request. Colour (common practice, no source):
    # white has equal power per hertz, pink equal power per octave; tape is our own shelf,
    # +12.04 dB from 120 us (1326 Hz) to 30 us (5305 Hz): 20*log10(120/30).
    c = synth.synthesise(seconds=6, rate_hz=RATE, channels=2, hiss_dbfs=-40, hiss=colour, lead_in_seconds=0.5,
                         seed=2)
    assert rms_dbfs(c.hiss) == pytest.approx(-40.0, abs=0.1)
    f, p = signal.welch(c.hiss, fs=RATE, nperseg=8192, axis=0)
    p = p.mean(axis=1)
    centres, bp = bands.band_levels(f, p, 1)
    level = dict(zip(np.round(centres).astype(int).tolist(), (10 * np.log10(bp)).tolist()))
    lo, hi = 126, 7943  # the 125 Hz and 8 kHz octave bands (exact base-10 centres)
    if colour == "white":   # equal power per hertz: the 8 kHz octave is 63 times wider
        assert level[hi] - level[lo] == pytest.approx(10 * math.log10(7943 / 126), abs=0.5)
    elif colour == "pink":  # equal power per octave
        assert level[hi] - level[lo] == pytest.approx(0.0, abs=0.5)
    else:                   # the density rises by the shelf between 200 Hz and 20 kHz
        f_lo, f_hi = 200.0, 20000.0

        def shelf(x):
            return abs((1 + 1j * x / 1326.29) / (1 + 1j * x / 5305.16))

        rise = 10 * math.log10(np.interp(f_hi, f, p) / np.interp(f_lo, f, p))
        assert rise == pytest.approx(20 * math.log10(shelf(f_hi) / shelf(f_lo)), abs=0.6)


@pytest.mark.parametrize("args, word", [(["--seconds", "0"], "seconds"), (["--hiss-dbfs", "-10"], "hiss-dbfs"),
                                        (["--lead-in", "20"], "lead-in"), (["--rate", "1000"], "rate"),
                                        (["--programme-top", "30000", "--rate", "44100"], "programme-top")])
def test_synth_refuses_bad_values_in_one_line(args, word, tmp_path, capsys):
    code, out, err = run(["synth", tmp_path / "x.wav", *args], capsys)
    assert code == 2 and word in err and err.count("\n") == 1
    assert not list(tmp_path.iterdir())


# ---------------------------------------------------------------------------
# Welch PSD
# ---------------------------------------------------------------------------


def test_white_noise_psd_against_theory_and_scipy_welch():
    # Theory: white noise of variance s² sampled at fs has the one-sided density 2·s²/fs
    # (P. D. Welch 1967: the averaged periodogram is unbiased for a flat spectrum, apart from DC
    # and Nyquist, here excluded). Reference library: scipy.signal.welch with the same settings
    # (Hann, nperseg 8192, 50 % overlap, constant detrend), channel-averaged.
    rng = np.random.default_rng(7)
    sigma = 0.05
    x = sigma * rng.standard_normal((20 * RATE, 2)) + 0.01   # a DC offset the detrend must remove
    blocks = np.array_split(x, 37)                             # odd block sizes: streaming must not matter
    w = welch.WelchPSD(RATE, 2)
    for b in blocks:
        w.feed(b)
    f, p = w.result()
    theory = 2 * sigma ** 2 / RATE
    assert np.mean(p[1:-1]) == pytest.approx(theory, rel=0.01)
    # Welch's variance: with ~230 segments per channel, 2 channels, 50 % Hann overlap (about 1.9
    # effective averages per two segments), the per-bin scatter is about 5 % rms.
    assert np.std(p[1:-1] / theory) < 0.08
    f_ref, p_ref = signal.welch(x, fs=RATE, window="hann", nperseg=8192, noverlap=4096, detrend="constant",
                                axis=0)
    np.testing.assert_array_equal(f, f_ref)
    np.testing.assert_allclose(p, p_ref.mean(axis=1), rtol=1e-5)
    # Parseval: the density integrates to the per-channel variance (dBFS as 20*log10 rms).
    assert 10 * math.log10(np.sum(p) * (f[1] - f[0])) == pytest.approx(20 * math.log10(sigma), abs=0.05)


@pytest.mark.parametrize("nperseg", [256, 1024, 4096])
def test_psd_equals_scipy_welch_for_other_segment_lengths(nperseg):
    # Reference library: scipy.signal.welch, mono, coloured noise with a tone.
    rng = np.random.default_rng(nperseg)
    t = np.arange(3 * 44100) / 44100
    x = signal.lfilter([1.0], [1.0, -0.9], rng.standard_normal(len(t))) * 0.01 + 0.2 * np.sin(2 * np.pi * 997 * t)
    f, p = welch.welch_psd(x, 44100, nperseg=nperseg)
    f_ref, p_ref = signal.welch(x, fs=44100, nperseg=nperseg)
    np.testing.assert_allclose(p, p_ref, rtol=1e-5, atol=1e-7 * p_ref.max())


def test_single_precision_floor_lies_far_below_any_hiss():
    # The transform runs in float32 (audition.survey.segments.Segmenter notes): a -4 dBFS sine must leave less
    # than -125 dBFS of rounding above 3 kHz, where a double-precision scipy.signal.welch leaves
    # the Hann window's own leakage; 16-bit TPDF dither alone is -101 dBFS.
    t = np.arange(5 * RATE) / RATE
    x = 0.9 * np.sin(2 * np.pi * 1000.3 * t)
    f, p = welch.welch_psd(x, RATE)
    assert 10 * math.log10(np.sum(p[f > 3000]) * (f[1] - f[0])) < -125


def test_survey_does_not_depend_on_block_size():
    # Streaming invariant: the same samples in other blocks give the same survey.
    c = synth.synthesise(seconds=6, rate_hz=44100, channels=2, hiss_dbfs=-50, hiss="tape", lead_in_seconds=1.0,
                         seed=4)
    a = onepass.survey_array(c.mix, 44100, block_frames=65536)
    b = onepass.survey_array(c.mix, 44100, block_frames=1000)
    assert a.spans == b.spans and a.crossover_hz == b.crossover_hz
    np.testing.assert_allclose(a.noise_psd, b.noise_psd, rtol=1e-12)
    np.testing.assert_allclose(a.programme_psd, b.programme_psd, rtol=1e-12, atol=1e-30)


# ---------------------------------------------------------------------------
# bands and crossover
# ---------------------------------------------------------------------------

#: IEC 61260-1:2014 Annex E (nominal one-third-octave mid-band frequencies, 20 Hz .. 20 kHz);
#: the preferred numbers are common knowledge, listed here from memory.
NOMINAL_THIRDS = [20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250,
                  1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000, 20000]


def test_third_octave_centres_are_the_base_10_ones_of_iec_61260_1():
    # IEC 61260-1:2014 clause 5: f_m = 1000·G^(x/3), G = 10^(3/10); the nominal values round them.
    c = bands.band_centres(3, 20.0, 20000.0)
    assert len(c) == len(NOMINAL_THIRDS)
    np.testing.assert_allclose(c, 1000 * 10 ** (0.1 * np.arange(-17, 14)), rtol=1e-12)
    assert np.max(np.abs(c / np.array(NOMINAL_THIRDS) - 1)) < 0.013
    lo, hi = bands.band_edges(c, 3)
    np.testing.assert_allclose(hi[:-1], lo[1:], rtol=1e-12)                 # bands tile the axis
    np.testing.assert_allclose(hi / lo, 10 ** 0.1, rtol=1e-12)              # G^(1/3) wide
    np.testing.assert_allclose(bands.band_centre(0, 1), 1000.0)
    np.testing.assert_allclose(bands.band_centre(0, 2), 1000 * 10 ** (0.3 / 4))  # even b: offset half a band


def test_band_power_of_a_flat_density_is_density_times_width():
    # Definition (integral of a constant density): exact band by band, including bins cut by edges.
    f = np.fft.rfftfreq(8192, 1 / RATE)
    p = np.full(f.size, 3e-9)
    c, bp = bands.band_levels(f, p, 3)
    lo, hi = bands.band_edges(c, 3)
    np.testing.assert_allclose(bp, 3e-9 * (hi - lo), rtol=1e-9)


@pytest.mark.parametrize("margin, expect", [(0.0, 4000.0), (6.0, 6300.0), (-6.0, 2500.0)])
def test_crossover_with_margin(margin, expect):
    # Definition (issue 4): the lowest band above which the programme stays under the noise by the margin.
    # Programme falls 3 dB per third from 0 dB re noise at the nominal 4 kHz band (exact 3981 Hz).
    c = bands.band_centres(3, 20.0, 20000.0)
    noise = np.full(c.size, 1e-8)
    prog_db = -3.0 * (np.arange(c.size) - list(NOMINAL_THIRDS).index(4000)) - 0.5
    prog = noise * 10 ** (prog_db / 10)
    got = programme.crossover(c, prog, noise, margin)
    assert got == pytest.approx(c[list(NOMINAL_THIRDS).index(expect)])
    assert programme.crossover(c, noise * 2, noise) is None  # programme above the noise at the top


# ---------------------------------------------------------------------------
# noise bandwidth of the second-order low-pass
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("f0, q", [(2000.0, 0.7071), (3000.0, 0.5), (1500.0, 2.0), (4000.0, 1.0)])
def test_white_noise_through_second_order_lowpass(f0, q):
    # Noise-equivalent bandwidth of the second-order low-pass, ∫|H(f)|² df = (π/2)·Q·f0, so white
    # noise (flat to rate/2) loses 10·log10((π/2)·Q·f0 / (rate/2)) (tabulated in C. D. Motchenbacher
    # and J. A. Connelly, "Low-Noise Electronic System Design", Wiley 1993, noise bandwidth of
    # filters; from memory, and derivable by residues). Checked within 0.2 dB both as predicted
    # by the survey and as measured by scipy.signal.sosfilt (reference library) on the noise.
    rng = np.random.default_rng(int(f0 + 100 * q))
    x = 0.02 * rng.standard_normal((8 * RATE, 1))
    d = design.lowpass(f0, RATE, q=q)
    expect = -10 * math.log10(math.pi / 2 * q * f0 / (RATE / 2))
    f, p = welch.welch_psd(x, RATE)
    pred = measure.predict(f, p, p, d)
    predicted = pred.noise_before_dbfs["flat"] - pred.noise_after_dbfs["flat"]
    assert predicted == pytest.approx(expect, abs=0.2)
    y = signal.sosfilt(d.sos, x, axis=0)[RATE // 10:]
    measured = rms_dbfs(x[RATE // 10:]) - rms_dbfs(y)
    assert measured == pytest.approx(expect, abs=0.2)


# ---------------------------------------------------------------------------
# the noise reference
# ---------------------------------------------------------------------------


def test_several_noise_spans_are_used_and_reported(made, capsys):
    # Truth: the hiss stem's RMS (issue 4: within 0.5 dB).
    code, out, _ = run(["survey", made["mix"], "--noise-span", "0.1:0.7", "--noise-span", "0.8:1.45", "--json"],
                       capsys)
    assert code == 0
    r = json.loads(out)
    assert r["noise"]["source"] == "spans"
    assert r["noise"]["spans"] == [[0.1, 0.7], [0.8, 1.45]]
    hiss, _ = sf.read(made["hiss"])
    assert r["noise"]["rms_dbfs"]["flat"] == pytest.approx(rms_dbfs(hiss), abs=0.5)


def test_noise_clip(made, tmp_path, capsys):
    # A separate noise-only clip of the same hiss (another seed); truth: the hiss stem's RMS.
    clip = synth.synthesise(seconds=3, rate_hz=RATE, channels=2, hiss_dbfs=-50, hiss="tape", lead_in_seconds=0,
                            seed=77)
    sf.write(tmp_path / "leader.wav", clip.hiss, RATE, subtype="PCM_24")
    code, out, _ = run(["survey", made["mix"], "--noise-clip", tmp_path / "leader.wav", "--json"], capsys)
    assert code == 0
    r = json.loads(out)
    hiss, _ = sf.read(made["hiss"])
    assert r["noise"]["source"] == "clip" and r["noise"]["spans"] == []
    assert r["noise"]["rms_dbfs"]["flat"] == pytest.approx(rms_dbfs(hiss), abs=0.5)


def test_automatic_reference_lies_in_the_lead_in_and_says_how_sure(made, capsys):
    code, out, _ = run(["survey", made["mix"]], capsys)
    assert code == 0
    assert "found automatically: 0.00–1.4" in out and "confidence high" in out
    code, out, _ = run(["survey", made["mix"], "--json"], capsys)
    r = json.loads(out)
    assert all(b <= 1.5 + 1e-9 for _, b in r["noise"]["spans"])
    assert r["noise"]["confidence"]["grade"] == "high"


def test_programme_is_outside_minus_noise_band_averaged_then_floored():
    # Definition (issue 4: outside minus noise, floored at zero), with the difference averaged over a
    # sliding 1/3 octave before the floor (audition.survey.programme.programme_estimate); written out here bin by bin.
    c = synth.synthesise(seconds=5, rate_hz=44100, channels=1, hiss_dbfs=-45, hiss="white", lead_in_seconds=1.0,
                         seed=8)
    s = onepass.survey_array(c.mix, 44100, noise_spans=[(0.0, 1.0)])
    f, o, n = s.freqs_hz, s.outside_psd, s.noise_psd
    half = 2.0 ** (1.0 / 6.0)
    for k in (1, 3, 40, 200, len(f) // 3, len(f) - 2):
        window = (f >= f[k] / half - 1e-9) & (f <= f[k] * half + 1e-9)
        window[k] = True
        expected = max(np.mean(o[window] - n[window]), 0.0) * o[k] / np.mean(o[window])
        assert s.programme_psd[k] == pytest.approx(expected, rel=1e-9, abs=1e-30), k
    assert (o - n < 0).any() and (s.programme_psd >= 0).all()


# ---------------------------------------------------------------------------
# the survey command: JSON, weighting note, plot, truth through the files
# ---------------------------------------------------------------------------


def test_json_keys_and_truth_through_the_files(made, capsys):
    # Keys as issue 4 lists them; values against the stems filtered by scipy.signal.sosfilt and
    # measured by scipy.signal.welch (reference library), within 0.5 dB.
    code, out, _ = run(["survey", made["mix"], "--f0", "7000", "--q", "0.7071", "--json"], capsys)
    assert code == 0
    r = json.loads(out)
    for part in ("noise", "programme"):
        assert set(r[part]["rms_dbfs"]) == {"flat", "a", "itu468"}
    assert isinstance(r["noise"]["spans"], list) and all(len(s) == 2 for s in r["noise"]["spans"])
    assert "crossover_hz" in r
    p = r["prediction"]
    assert set(p["snr_gain_db"]) == {"flat", "a", "itu468"}
    assert set(p["response_db"]) == {"10000", "15000"}
    assert isinstance(p["treble_loss_db"], float)
    assert "RMS detection" in r["weighting_note"]
    d = design.lowpass(7000, RATE, q=0.7071)
    np.testing.assert_allclose([p["response_db"]["10000"], p["response_db"]["15000"]],
                               20 * np.log10(np.abs(signal.sosfreqz(d.sos, [10000, 15000], fs=RATE)[1])),
                               atol=1e-9)
    prog, _ = sf.read(made["programme"])
    hiss, _ = sf.read(made["hiss"])
    start = int(1.5 * RATE)
    f, pp = signal.welch(prog[start:], fs=RATE, nperseg=8192, axis=0)
    _, pn = signal.welch(hiss, fs=RATE, nperseg=8192, axis=0)
    _, pp2 = signal.welch(signal.sosfilt(d.sos, prog, axis=0)[start:], fs=RATE, nperseg=8192, axis=0)
    _, pn2 = signal.welch(signal.sosfilt(d.sos, hiss, axis=0), fs=RATE, nperseg=8192, axis=0)
    pp, pn, pp2, pn2 = (a.mean(axis=1) for a in (pp, pn, pp2, pn2))
    true_gain = 10 * math.log10((pp2.sum() / pn2.sum()) / (pp.sum() / pn.sum()))
    # the treble loss as defined (largest cut where the programme is heard), from the stems: tests/heardtruth.py
    true_loss = heardtruth.true_treble_loss(prog, hiss, d.sos, RATE, start)
    assert p["snr_gain_db"]["flat"] == pytest.approx(true_gain, abs=0.5)
    assert p["treble_loss_db"] == pytest.approx(true_loss, abs=0.5)
    assert r["noise"]["rms_dbfs"]["flat"] == pytest.approx(rms_dbfs(hiss), abs=0.5)
    # without a filter there is nothing to predict
    code, out, _ = run(["survey", made["mix"], "--json"], capsys)
    assert "prediction" not in json.loads(out)


def test_text_report_states_rms_detection_and_the_level_convention(made, capsys):
    code, out, _ = run(["survey", made["mix"], "--f0", "8000"], capsys)
    assert code == 0
    assert "RMS detection" in out and "20*log10(rms)" in out and "SNR gain" in out


@pytest.mark.parametrize("rate", [8000, 44100, 96000])
def test_weighted_levels_at_any_rate(rate):
    # IEC 61672-1 and ITU-R BS.468-4 both read 0 dB at 1 kHz: a 1 kHz sine of amplitude 0.1 reads
    # -23.01 dBFS (20*log10(0.1/sqrt 2)) flat, A and ITU-468 alike, whatever the rate.
    t = np.arange(2 * rate) / rate
    f, p = welch.welch_psd(0.1 * np.sin(2 * np.pi * 1000 * t), rate)
    levels = measure.weighted_levels(f, p, ("flat", "a", "itu468"))
    for name, v in levels.items():
        assert v == pytest.approx(20 * math.log10(0.1 / math.sqrt(2)), abs=0.05), name


def test_plot_is_written(made, tmp_path, capsys):
    png = tmp_path / "survey.png"
    code, out, _ = run(["survey", made["mix"], "--f0", "8000", "--plot", png], capsys)
    assert code == 0 and f"plot written to {png}" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 20000


# ---------------------------------------------------------------------------
# bad input: one line naming the file, exit status 2
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def bad_files(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad")
    rng = np.random.default_rng(3)
    sf.write(d / "zeros.wav", np.zeros((3 * RATE, 2)), RATE, subtype="PCM_24")
    sf.write(d / "steady.wav", 0.01 * rng.standard_normal((4 * RATE, 2)), RATE, subtype="PCM_24")
    sf.write(d / "rate44.wav", 0.01 * rng.standard_normal((44100, 2)), 44100, subtype="PCM_24")
    sf.write(d / "mono.wav", 0.01 * rng.standard_normal(RATE), RATE, subtype="PCM_24")
    return d


@pytest.mark.parametrize("extra, words", [
    (["--noise-span", "7:9"], ["outside the file", "0 .. 8 s"]),
    (["--noise-span", "2:2"], ["empty span"]),
    (["--noise-span", "0.10:0.15"], ["no whole analysis segment", "--noise-span"]),
    (["--noise-clip", "{bad}/rate44.wav"], ["44100 Hz", "48000 Hz", "rates must agree"]),
    (["--noise-clip", "{bad}/mono.wav"], ["1 channel", "2"]),
])
def test_bad_noise_reference(made, bad_files, extra, words, capsys):
    extra = [e.replace("{bad}", str(bad_files)) for e in extra]
    code, out, err = run(["survey", made["mix"], *extra], capsys)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert "clip.wav" in err or "rate44.wav" in err or "mono.wav" in err
    for w in words:
        assert w in err


def test_digital_silence_is_refused(bad_files, capsys):
    code, _, err = run(["survey", bad_files / "zeros.wav"], capsys)
    assert code == 2 and "zeros.wav" in err and "digital silence" in err and err.count("\n") == 1


def test_no_quiet_frames_asks_for_a_span(bad_files, capsys):
    code, _, err = run(["survey", bad_files / "steady.wav"], capsys)
    assert code == 2 and "steady.wav" in err and "no quiet frames" in err and "--noise-span" in err
    assert err.count("\n") == 1
    # ... and with a span it works
    code, out, _ = run(["survey", bad_files / "steady.wav", "--noise-span", "0:1", "--json"], capsys)
    assert code == 0 and json.loads(out)["noise"]["rms_dbfs"]["flat"] == pytest.approx(-40.0, abs=0.2)


def test_low_confidence_warns(tmp_path, capsys):
    # No lead-in: the quietest frames hold programme, the search must say it is unsure.
    clip = synth.synthesise(seconds=10, rate_hz=44100, channels=1, hiss_dbfs=-50, hiss="tape",
                            lead_in_seconds=0.0, seed=2)
    sf.write(tmp_path / "nolead.wav", clip.mix, 44100, subtype="FLOAT")
    code, out, err = run(["survey", tmp_path / "nolead.wav"], capsys)
    assert code == 0
    r_text = out + err
    assert "warning" in err and "--noise-span" in err
    assert "confidence low" in r_text or "confidence medium" in r_text


def test_api_errors_are_audition_errors():
    c = np.zeros((RATE, 1))
    with pytest.raises(BadInputFile, match="digital silence"):
        onepass.survey_array(c, RATE)
    with pytest.raises(BadParameter, match="rates must agree"):
        onepass.survey_blocks([c + 0.01], RATE, noise_blocks=[c], noise_rate_hz=44100, noise_name="leader.wav",
                               name="take.wav")


def test_docstring_examples():
    # The examples in the survey modules' documentation run as written.
    import doctest
    import importlib
    import pkgutil

    import audition.survey

    attempted = failed = 0
    for info in pkgutil.iter_modules(audition.survey.__path__):
        module = importlib.import_module(f"audition.survey.{info.name}")
        result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        attempted, failed = attempted + result.attempted, failed + result.failed
    assert attempted > 0 and failed == 0
