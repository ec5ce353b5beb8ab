"""Filter design against published formulas, handbook results and scipy.signal."""

import json
import math
import os

import numpy as np
import pytest
from scipy import integrate, optimize, signal

from audition import design
from audition.cli import main
from audition.errors import BadParameter

RATES = [8000, 22050, 44100, 48000, 96000, 192000, 384000]


def cookbook_lowpass(f0, q, fs):
    """W3C Audio EQ Cookbook (W3C Working Group Note, 2021), LPF, normalised by a0."""
    w0 = 2 * math.pi * f0 / fs
    alpha = math.sin(w0) / (2 * q)
    cw = math.cos(w0)
    b = np.array([(1 - cw) / 2, 1 - cw, (1 - cw) / 2])
    a = np.array([1 + alpha, -2 * cw, 1 - alpha])
    return np.concatenate([b / a[0], a / a[0]])


def cookbook_highpass(f0, q, fs):
    """W3C Audio EQ Cookbook (W3C Working Group Note, 2021), HPF, normalised by a0."""
    w0 = 2 * math.pi * f0 / fs
    alpha = math.sin(w0) / (2 * q)
    cw = math.cos(w0)
    b = np.array([(1 + cw) / 2, -(1 + cw), (1 + cw) / 2])
    a = np.array([1 + alpha, -2 * cw, 1 - alpha])
    return np.concatenate([b / a[0], a / a[0]])


@pytest.mark.parametrize("rate", RATES)
@pytest.mark.parametrize("f0_frac", [0.001, 0.01, 0.1, 0.3, 0.45])
@pytest.mark.parametrize("q", [0.3, 0.5, 0.7071, 1.0, 3.0, 10.0])
def test_bilinear_equals_cookbook(rate, f0_frac, q):
    # Source: W3C Audio EQ Cookbook, the prewarped bilinear transform of this prototype.
    f0 = f0_frac * rate
    row = design.lowpass(f0, rate, q=q).sos[0]
    np.testing.assert_allclose(row, cookbook_lowpass(f0, q, rate), rtol=0, atol=1e-12)
    hp = design.highpass(f0, rate, q=q).sos[0]
    np.testing.assert_allclose(hp, cookbook_highpass(f0, q, rate), rtol=0, atol=1e-12)


@pytest.mark.parametrize("order,alignment", [(2, None), (3, "butterworth"), (4, "bessel"), (5, "bessel"),
                                             (4, "linkwitz-riley"), (6, "linkwitz-riley")])
def test_analog_response_against_scipy_freqs(order, alignment):
    # Reference library: scipy.signal.freqs on the product polynomial of the sections.
    d = design.lowpass(3000.0, 48000, order=order, alignment=alignment)
    b, a = np.array([1.0]), np.array([1.0])
    for s in d.sections:
        sb, sa = s.analog_coefficients()
        b, a = np.polymul(b, sb), np.polymul(a, sa)
    f = np.geomspace(10, 24000, 300)
    _, h_ref = signal.freqs(b, a, worN=2 * np.pi * f)
    np.testing.assert_allclose(d.analog_response(f), h_ref, rtol=1e-9, atol=1e-14)


@pytest.mark.parametrize("method", design.METHODS)
def test_digital_response_against_sosfreqz(method):
    # Reference library: scipy.signal.sosfreqz of the same sos rows.
    d = design.lowpass(5000.0, 44100, order=5, alignment="bessel", method=method, highpass_hz=25.0)
    f = np.linspace(0, 22000, 500)
    _, h_ref = signal.sosfreqz(d.sos, worN=f, fs=44100)
    np.testing.assert_allclose(d.digital_response(f), h_ref, rtol=1e-10, atol=1e-13)


@pytest.mark.parametrize("order", range(1, 9))
@pytest.mark.parametrize("rate,f0", [(44100, 1000.0), (48000, 9000.0), (96000, 30000.0)])
def test_butterworth_against_scipy_butter(order, rate, f0):
    # Reference library: scipy.signal.butter(N, f0, fs=rate, output="sos"), whole-filter response.
    # All Butterworth sections share f0, so prewarping each at f0 is scipy's one prewarp.
    ours = design.lowpass(f0, rate, order=order, alignment="butterworth")
    ref = signal.butter(order, f0, fs=rate, output="sos")
    f = np.linspace(0, rate / 2 * 0.999, 800)
    _, h_ref = signal.sosfreqz(ref, worN=f, fs=rate)
    np.testing.assert_allclose(ours.digital_response(f), h_ref, rtol=0, atol=1e-9)


@pytest.mark.parametrize("order,expected", [
    # Butterworth section Qs as tabulated in active-filter handbooks (from memory, 4 decimals);
    # also the alignment definition the planner issue names for 2 and 4.
    (2, [0.7071]), (3, [1.0000]), (4, [0.5412, 1.3066]), (5, [0.6180, 1.6180]), (6, [0.5176, 0.7071, 1.9319]),
])
def test_butterworth_section_q_table(order, expected):
    qs = [q for q in design.butterworth_qs(order) if q is not None]
    np.testing.assert_allclose(qs, expected, atol=5e-5)


@pytest.mark.parametrize("order,expected", [
    # Bessel (-3 dB at f0) section f0 multipliers and Qs, tabulated to two decimals in the
    # Signal Processing Stack Exchange question "Bessel filter second-order sections Q and Fc
    # multiplier derivation" (a practical biquad guide's table); None = first-order section.
    (2, [(1.27, 0.58)]),
    (3, [(1.32, None), (1.45, 0.69)]),
    (4, [(1.43, 0.52), (1.60, 0.81)]),
    (5, [(1.50, None), (1.56, 0.56), (1.76, 0.92)]),
    (6, [(1.60, 0.51), (1.69, 0.61), (1.90, 1.02)]),
])
def test_bessel_sections_published_table(order, expected):
    got = design.bessel_sections(order)
    assert len(got) == len(expected)
    for (fg, qg), (fe, qe) in zip(got, expected):
        assert fg == pytest.approx(fe, abs=0.0051)
        if qe is None:
            assert qg is None
        else:
            assert qg == pytest.approx(qe, abs=0.0051)


def test_bessel_second_order_worked_example():
    # Worked example: H(s) = 3/(s^2 + 3s + 3) (the delay-normalised second-order Bessel polynomial)
    # has Q = 1/sqrt(3) and |H|^2 = 1/2 where w^4 + 3w^2 - 9 = 0, so w_3dB^2 = (-3 + sqrt(45))/2;
    # the section f0 multiplier is sqrt(3)/w_3dB.
    (factor, q), = design.bessel_sections(2)
    assert q == pytest.approx(1 / math.sqrt(3), rel=1e-12)
    assert factor == pytest.approx(math.sqrt(3) / math.sqrt((-3 + math.sqrt(45)) / 2), rel=1e-12)


@pytest.mark.parametrize("order", range(1, 9))
def test_bessel_sections_match_scipy_besselap(order):
    # Reference library: scipy.signal.besselap(N, norm="mag") poles; a pair p is a section with
    # omega0 = |p| and Q = |p| / (-2 Re p), a real pole a first-order section at -p.
    from scipy.signal import besselap

    _, poles, _ = besselap(order, norm="mag")
    want = sorted([(float(-p.real), None) for p in poles if abs(p.imag) < 1e-9] +
                  [(float(abs(p)), float(abs(p) / (-2 * p.real))) for p in poles if p.imag > 1e-9],
                  key=lambda fq: -1.0 if fq[1] is None else fq[1])
    got = design.bessel_sections(order)
    assert len(got) == len(want)
    for (fg, qg), (fw, qw) in zip(got, want):
        assert fg == pytest.approx(fw, rel=1e-10)
        assert (qg is None) == (qw is None)
        if qw is not None:
            assert qg == pytest.approx(qw, rel=1e-10)


@pytest.mark.parametrize("order", [2, 3, 4, 6])
def test_bessel_is_3db_down_at_f0(order):
    # Magnitude normalisation (scipy.signal.besselap norm="mag"): -3.01 dB at the design f0.
    d = design.lowpass(1000.0, 48000, order=order, alignment="bessel")
    assert 20 * math.log10(abs(d.analog_response(1000.0))) == pytest.approx(-10 * math.log10(2), abs=1e-6)


@pytest.mark.parametrize("order", [2, 4, 6])
def test_linkwitz_riley_6db_at_f0(order):
    # Definition: two cascaded Butterworth filters of half the order, -6.02 dB at f0 (common practice, no source).
    d = design.lowpass(2000.0, 48000, order=order, alignment="linkwitz-riley")
    assert 20 * math.log10(abs(d.analog_response(2000.0))) == pytest.approx(-20 * math.log10(2), abs=1e-9)
    ref = design.lowpass(2000.0, 48000, order=order // 2, alignment="butterworth")
    f = np.geomspace(20, 20000, 50)
    np.testing.assert_allclose(d.analog_response(f), ref.analog_response(f) ** 2, rtol=1e-10)


@pytest.mark.parametrize("q", [0.5, 0.7071, 1.5, 4.0])
@pytest.mark.parametrize("f0", [500.0, 8000.0])
def test_noise_equivalent_bandwidth(q, f0):
    # Handbook result: the second-order low-pass H0 w0^2/(s^2 + (w0/Q)s + w0^2) has noise-equivalent
    # bandwidth integral_0^inf |H(f)|^2 df = (pi/2) Q f0 (for H0 = 1). Sources, both from memory: the
    # noise-bandwidth section of H. W. Ott, "Noise Reduction Techniques in Electronic Systems" (2nd ed.,
    # 1988), and the table of integrals I_n = (1/2 pi j) integral H(s)H(-s) ds of H. M. James,
    # N. B. Nichols, R. S. Phillips, "Theory of Servomechanisms" (1947), whose
    # I_2 = (c1^2 d0 + c0^2 d2) / (2 d0 d1 d2) for H = (c1 s + c0)/(d2 s^2 + d1 s + d0)
    # gives Q w0 / 2 over -inf..inf in rad/s, i.e. (pi/2) Q f0 one-sided in Hz.
    d = design.lowpass(f0, 48000, q=q)

    def power(f):
        return abs(complex(d.analog_response(f))) ** 2

    # numerical integration of the design's own analog response (scipy.integrate.quad)
    val = sum(integrate.quad(power, lo, hi, limit=400)[0] for lo, hi in
              [(0, f0 / 2), (f0 / 2, f0), (f0, 2 * f0), (2 * f0, 1e3 * f0)])
    val += integrate.quad(power, 1e3 * f0, np.inf)[0]
    assert val == pytest.approx(math.pi / 2 * q * f0, rel=1e-6)
    # the same figure from the James-Nichols-Phillips I_2 with the design's analog coefficients
    num, (d2, d1, d0) = d.sections[0].analog_coefficients()
    c1, c0 = num[-2], num[-1]
    i2 = (c1 * c1 * d0 + c0 * c0 * d2) / (2 * d0 * d1 * d2)  # = integral over all f of |H(j 2 pi f)|^2 df
    assert i2 / 2 == pytest.approx(val, rel=1e-6)  # |H|^2 is even in f: half of it is the 0..inf part


@pytest.mark.parametrize("r,l,c", [(100.0, 10e-3, 1e-6), (2200.0, 0.1, 4.7e-9), (10.0, 1e-3, 100e-9)])
def test_series_rlc(r, l, c):
    # Circuit theory: R and L in series, output across C: H(s) = 1/(LC s^2 + RC s + 1),
    # omega0 = 1/sqrt(LC), Q = (1/R) sqrt(L/C), H0 = 1.
    d = design.from_rlc(r, l, c, 384000)
    assert d.f0_hz == pytest.approx(1 / (2 * math.pi * math.sqrt(l * c)), rel=1e-12)
    assert d.q == pytest.approx(math.sqrt(l / c) / r, rel=1e-12)
    f = np.geomspace(10, 100e3, 100)
    s = 2j * np.pi * f
    np.testing.assert_allclose(d.analog_response(f), 1 / (l * c * s**2 + r * c * s + 1), rtol=1e-10)


def dense_deviation(d):
    """Independent evaluation: scipy.signal.freqs and sosfreqz on a dense grid (reference library)."""
    lo, hi = 20.0, min(20000.0, 0.45 * d.rate_hz)
    f = np.geomspace(lo, hi, 200_000)
    b, a = np.array([1.0]), np.array([1.0])
    for s in d.sections:
        sb, sa = s.analog_coefficients()
        b, a = np.polymul(b, sb), np.polymul(a, sa)
    _, ha = signal.freqs(b, a, worN=2 * np.pi * f)
    _, hd = signal.sosfreqz(d.sos, worN=f, fs=d.rate_hz)
    dev = 20 * np.log10(np.abs(hd)) - 20 * np.log10(np.abs(ha))
    i = np.argmax(np.abs(dev))
    return dev[i], f[i]


@pytest.mark.parametrize("method", design.METHODS)
@pytest.mark.parametrize("f0,q,rate,order,alignment", [
    (8000, 0.7071, 44100, 2, None), (12000, 2.0, 48000, 2, None), (3000, None, 96000, 4, "bessel"),
    (15000, None, 44100, 3, "butterworth"), (2500, 0.5, 8000, 2, None),
])
def test_deviation_against_dense_evaluation(method, f0, q, rate, order, alignment):
    d = design.lowpass(f0, rate, q=q, order=order, alignment=alignment, method=method)
    got_db, got_hz = d.max_deviation()
    ref_db, ref_hz = dense_deviation(d)
    assert got_db == pytest.approx(ref_db, abs=1e-3)
    assert abs(math.log(got_hz / ref_hz)) < 1e-3 or abs(got_db - float(d._deviation_db(ref_hz))) < 1e-3


@pytest.mark.parametrize("f0,q,rate", [(8000, 0.7071, 44100), (12000, 1.5, 48000), (3000, 0.5, 22050),
                                      (15000, 0.9, 44100)])
def test_matched_reduces_deviation_and_matches_at_f0(f0, q, rate):
    # M. Vicanek (2016): magnitude matched at DC and at f0 (where |H| = Q for H0 = 1).
    m = design.lowpass(f0, rate, q=q, method="matched")
    assert abs(m.digital_response(0.0)) == pytest.approx(1.0, abs=1e-12)
    assert abs(m.digital_response(f0)) == pytest.approx(q, rel=1e-9)
    b = design.lowpass(f0, rate, q=q)
    assert abs(m.max_deviation()[0]) < abs(b.max_deviation()[0]) / 4


@pytest.mark.parametrize("f0,q", [(8000, 0.7071), (12000, 2.0), (200, 0.5)])
def test_matched_highpass_matches_at_f0(f0, q):
    # M. Vicanek (2016): high-pass numerator b0 (1 - z^-1)^2 (double zero at DC), magnitude
    # matched at f0 where |H| = Q; closer to the analog magnitude at 20 kHz than the bilinear one.
    d = design.Design((design.Section("highpass", f0, q),), 48000, "matched", f0, q)
    assert abs(d.digital_response(f0)) == pytest.approx(q, rel=1e-9)
    assert abs(d.digital_response(0.0)) == 0.0
    bil = d.with_method("bilinear")
    ha = abs(d.analog_response(20000.0))
    assert abs(abs(d.digital_response(20000.0)) - ha) < abs(abs(bil.digital_response(20000.0)) - ha)


@pytest.mark.parametrize("kind", design.KINDS)
def test_matched_first_order(kind):
    # Our own first-order matched section: pole exp(-w0) (impulse invariance), -3.01 dB at f0,
    # unity at DC (low-pass) or the zero at DC (high-pass).
    d = design.Design((design.Section(kind, 5000.0, None),), 48000, "matched", 5000.0, None, 1)
    assert d.sos[0, 4] == pytest.approx(-math.exp(-2 * math.pi * 5000 / 48000), rel=1e-12)
    assert abs(d.digital_response(5000.0)) == pytest.approx(1 / math.sqrt(2), rel=1e-9)
    assert abs(d.digital_response(0.0)) == pytest.approx(1.0 if kind == "lowpass" else 0.0, abs=1e-12)


@pytest.mark.parametrize("method", design.METHODS)
@pytest.mark.parametrize("order,alignment", [(1, None), (2, None), (3, "butterworth"), (5, "bessel"),
                                             (6, "linkwitz-riley")])
def test_invariants(method, order, alignment):
    # Invariants (scipy.signal test style): poles inside the unit circle, unity DC gain, a0 = 1.
    d = design.lowpass(9000.0, 44100, order=order, alignment=alignment, method=method)
    assert np.all(d.sos[:, 3] == 1.0)
    for row in d.sos:
        assert np.all(np.abs(np.roots(row[3:])) < 1.0)
    assert abs(d.digital_response(0.0)) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("order", [2, 3, 4, 7])
def test_butterworth_minus3db_at_f0(order):
    # Prewarping at f0 makes each section exact at f0, so the half-power point of a
    # Butterworth design is f0 exactly (bilinear transform property, scipy.signal.bilinear_zpk docs).
    d = design.lowpass(10000.0, 44100, order=order)
    assert d.minus3db_hz() == pytest.approx(10000.0, rel=1e-7)


@pytest.mark.parametrize("q", [0.7071, 1.0, 2.0, 5.0])
def test_overshoot_and_peak_against_second_order_formulas(q):
    # Control-engineering handbook formulas for the second-order system (e.g. Ogata, Modern
    # Control Engineering; from memory): overshoot = exp(-pi zeta / sqrt(1 - zeta^2)), zeta = 1/(2Q);
    # resonant peak Q / sqrt(1 - 1/(4 Q^2)) at f0 sqrt(1 - 1/(2 Q^2)). Low f0/rate keeps the
    # bilinear warping negligible.
    d = design.lowpass(100.0, 96000, q=q)
    zeta = 1 / (2 * q)
    assert d.overshoot_pct() == pytest.approx(100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2)), abs=0.02)
    peak_db, peak_hz = d.peak()
    if q > 1 / math.sqrt(2) + 1e-3:
        assert peak_db == pytest.approx(20 * math.log10(q / math.sqrt(1 - 1 / (4 * q * q))), abs=1e-3)
        assert peak_hz == pytest.approx(100 * math.sqrt(1 - 1 / (2 * q * q)), rel=2e-3)
    else:
        assert peak_db == pytest.approx(0.0, abs=1e-3)


@pytest.mark.parametrize("method", design.METHODS)
def test_group_delay_against_scipy(method):
    # Reference library: scipy.signal.group_delay of each section, summed.
    d = design.lowpass(6000.0, 48000, order=4, alignment="bessel", method=method, highpass_hz=30.0)
    f = np.array([100.0, 1000.0, 6000.0, 15000.0])
    ref = sum(signal.group_delay((row[:3], row[3:]), w=f, fs=48000)[1] for row in d.sos) / 48000
    np.testing.assert_allclose(d.group_delay_s(f), ref, rtol=1e-6, atol=1e-12)  # scipy conditioning near DC


def test_group_delay_low_frequency_limit():
    # The second-order low-pass has tau(0) = 1/(Q omega0) (derivative of its phase at DC).
    d = design.lowpass(200.0, 96000, q=0.8)
    assert float(d.group_delay_s(1.0)) == pytest.approx(1 / (0.8 * 2 * math.pi * 200.0), rel=1e-3)


def test_gain_db_scales_passband():
    d = design.lowpass(5000.0, 48000, q=0.7071, gain_db=-6.0)
    assert 20 * math.log10(abs(d.digital_response(0.0))) == pytest.approx(-6.0, abs=1e-12)


def test_from_dict_round_trip():
    d = design.lowpass(7000.0, 44100, order=4, alignment="bessel", method="matched", highpass_hz=40.0)
    back = design.Design.from_dict(json.loads(json.dumps(d.to_dict())))
    np.testing.assert_array_equal(back.sos, d.sos)
    assert back.with_rate(88200).sos.shape == d.sos.shape


@pytest.mark.parametrize("kwargs,needle", [
    ({"f0_hz": 0.0, "rate_hz": 48000}, "0 < f0 < rate/2 (rate=48000 -> 24000 Hz); a frequency must be above 0"),
    ({"f0_hz": -10.0, "rate_hz": 44100}, "0 < f0 < rate/2 (rate=44100 -> 22050 Hz)"),
    ({"f0_hz": 24000.0, "rate_hz": 48000}, "0 < f0 < rate/2 (rate=48000 -> 24000 Hz); a cutoff at or above Nyquist"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "q": -0.5}, "q=-0.5: Q must satisfy 0.1 <= Q <= 100"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "q": 0.0}, "Q must satisfy 0.1 <= Q"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 0}, "order must be an integer from 1 to 12"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 4, "alignment": "elliptic"}, "allowed are butterworth"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 4, "alignment": "chebyshev"}, "needs its passband ripple"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 4, "alignment": "bessel", "ripple_db": 0.5}, "Chebyshev"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 4, "alignment": "chebyshev", "ripple_db": 9.0}, "0 < ripple <= 3"),
    ({"f0_hz": 1000.0, "rate_hz": 6000}, "at least 8000 Hz"),
    ({"f0_hz": 1000.0, "rate_hz": 48000, "order": 3, "alignment": "linkwitz-riley"}, "even order"),
])
def test_bad_parameters(kwargs, needle):
    with pytest.raises(BadParameter, match=None) as info:
        design.lowpass(**kwargs)
    assert needle in str(info.value)


def test_cli_json_has_required_keys(capsys):
    assert main(["response", "--f0", "8000", "--q", "0.9", "--rate", "44100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    for key in ("rate", "method", "sections", "f0_hz", "q", "max_deviation_db", "max_deviation_hz", "minus3db_hz",
                "peak_gain_db", "peak_hz", "overshoot_pct", "group_delay_ms"):
        assert key in out
    assert set(out["group_delay_ms"]) == {"1000", "f0"}
    assert out["sections"][0]["a"][0] == 1.0
    np.testing.assert_allclose(out["sections"][0]["b"] + out["sections"][0]["a"],
                               cookbook_lowpass(8000, 0.9, 44100), atol=1e-12)
    assert set(out["methods"]) == set(design.METHODS)


def test_cli_sections_and_plot(tmp_path, capsys):
    png = tmp_path / "r.png"
    assert main(["response", "--section", "9000:0.54", "--section", "9000:1.31", "--section", "12000",
                 "--rate", "48000", "--plot", str(png)]) == 0
    text = capsys.readouterr().out
    assert "3 section(s)" in text and "first order" in text and "a cascade of the sections below" in text
    # the readable table: every figure carries its unit
    for label, unit in [("-3.01 dB (half power)", "Hz"), ("peak gain", "dB at"), ("step overshoot", "%"),
                        ("group delay at 1 kHz", "ms"), ("group delay at f0", "ms"), ("(this design)", "dB at")]:
        line = next(ln for ln in text.splitlines() if label in ln)
        assert unit in line, line
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in tmp_path.iterdir()] == ["r.png"]
    umask = os.umask(0)
    os.umask(umask)
    assert (os.stat(png).st_mode & 0o777) == 0o666 & ~umask  # a plain new file's permissions, not 0600


@pytest.mark.parametrize("argv,needle", [
    (["--f0", "30000", "--rate", "44100"], "f0=30000.0 Hz: must satisfy 0 < f0 < rate/2 (rate=44100 -> 22050 Hz)"),
    (["--f0", "1000", "--q", "-1"], "q=-1.0"),
    (["--f0", "1000", "--order", "0"], "order=0"),
    (["--f0", "1000", "--rate", "4000"], "rate=4000.0"),
    (["--f0", "1000", "--order", "4", "--q", "0.7"], "q=0.7"),
    (["--q", "0.7"], "need --f0"),
    (["--section", "9000:0.7", "--f0", "1000"], "--section gives the whole cascade"),
])
def test_cli_bad_input_one_line_exit_2(argv, needle, capsys):
    assert main(["response", *argv]) == 2
    err = capsys.readouterr().err
    assert needle in err
    assert err.count("\n") == 1 and err.startswith("audition response: error:")


@pytest.mark.parametrize("argv,needle", [
    (["--f0", "1000", "--order", "4", "--alignment", "elliptic"],
     "argument --alignment: invalid choice: 'elliptic' (choose from 'butterworth', 'bessel', 'linkwitz-riley', "
     "'chebyshev')"),
    (["--f0", "1000", "--order", "four"], "argument --order: invalid int value: 'four'"),
    (["--f0", "1000", "--method", "impulse"], "argument --method: invalid choice: 'impulse'"),
])
def test_cli_unknown_names_one_line_exit_2(argv, needle, capsys):
    # The bad-input rule: one line naming the parameter and what it allows, exit status 2
    # (argparse's usage block is left out).
    with pytest.raises(SystemExit) as info:
        main(["response", *argv])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert needle in err
    assert err.count("\n") == 1 and err.startswith("audition response: error:")


# --- Alignments prewarped as a whole: the stated f0 holds once digitised --------------------------------------


def _digital_crossing_hz(d, level_db):
    """Where the digital magnitude (relative to DC) first falls through ``level_db``, from scipy.signal.sosfreqz."""
    f = np.geomspace(10.0, d.rate_hz / 2 * (1 - 1e-6), 20000)
    _, h = signal.sosfreqz(d.sos, worN=f, fs=d.rate_hz)
    _, h0 = signal.sosfreqz(d.sos, worN=[0.0], fs=d.rate_hz)
    db = 20 * np.log10(np.abs(h) / abs(h0[0]))
    i = int(np.nonzero(db < level_db)[0][0])  # the first fall through the level, after any ripple peak
    # linear interpolation in log frequency between the two grid points around the crossing
    x0, x1, y0, y1 = np.log(f[i - 1]), np.log(f[i]), db[i - 1], db[i]
    return float(np.exp(x0 + (level_db - y0) * (x1 - x0) / (y1 - y0)))


ALIGNMENT_CASES = [(a, n, r) for a in ("butterworth", "bessel") for n in range(1, 9) for r in (None,)] + \
    [("chebyshev", n, r) for n in range(2, 9) for r in (0.1, 0.5, 1.0)] + \
    [("linkwitz-riley", n, None) for n in (2, 4, 6, 8)]


@pytest.mark.parametrize("rate_hz", [44100.0, 48000.0, 96000.0])
@pytest.mark.parametrize("f0_hz", [1000.0, 7500.0, 14000.0])
@pytest.mark.parametrize("alignment,order,ripple", ALIGNMENT_CASES)
def test_digital_half_power_point_lies_on_the_stated_f0(alignment, order, ripple, f0_hz, rate_hz):
    # The half-power point is where |H|² is half its DC value (-3.01 dB; -6.02 dB for Linkwitz-Riley, two
    # Butterworth halves in cascade: definition of the alignment). Located with scipy.signal.sosfreqz
    # (reference library). Goal: within 1 % of the stated f0 at every rate.
    d = design.lowpass(f0_hz, rate_hz, order=order, alignment=alignment, ripple_db=ripple)
    level = -20 * math.log10(2.0) if alignment == "linkwitz-riley" else -10 * math.log10(2.0)
    got = _digital_crossing_hz(d, level)
    assert got == pytest.approx(f0_hz, rel=0.01)


@pytest.mark.parametrize("order", range(2, 9))
@pytest.mark.parametrize("ripple", [0.1, 0.5, 1.0, 2.0])
def test_chebyshev_analog_shape_matches_scipy_cheby1(order, ripple):
    # scipy.signal.cheby1(N, rp, 1, analog=True) (reference library) normalised to its ripple edge; rescaled
    # so its half-power point (relative to DC) is at 1, it must equal our analog cascade at f/f0.
    b, a = signal.cheby1(order, ripple, 1.0, analog=True)

    def ref(w):
        return np.abs(np.polyval(b, 1j * w) / np.polyval(a, 1j * w))

    dc = ref(0.0)
    w3 = optimize.brentq(lambda w: ref(w) / dc - 1 / math.sqrt(2), 1.0, 10.0)
    d = design.lowpass(1000.0, 48000.0, order=order, alignment="chebyshev", ripple_db=ripple)
    f = np.geomspace(50.0, 8000.0, 300)
    ours = np.abs(d.analog_response(f))
    np.testing.assert_allclose(ours, ref(f / 1000.0 * w3) / dc, rtol=1e-9)
    # the passband rises by the ripple (even order) or dips by it (odd order), relative to DC
    peak_db = 20 * np.log10(ours.max())
    if order % 2 == 0:
        assert peak_db == pytest.approx(ripple, abs=1e-3)


def test_butterworth_prewarped_as_a_whole_is_the_per_section_cookbook_design():
    # For Butterworth every section sits at f0, so prewarping the cascade at f0 is prewarping each section at
    # its own f0: the W3C Audio EQ Cookbook low-pass per section, bit for bit.
    d = design.lowpass(9000.0, 44100.0, order=4, alignment="butterworth")
    per_section = design.digitise(d.sections, 44100.0, "bilinear")
    np.testing.assert_array_equal(d.sos, per_section)
