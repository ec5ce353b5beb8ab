"""The survey and the planner against ground truth: synthesised clips whose stems are known.

Truth is computed here, independently of the survey: the programme stem and the
hiss stem are filtered separately with scipy.signal.sosfilt (reference library)
and their spectra estimated with scipy.signal.welch (reference library).
"""

import math
from functools import lru_cache

import numpy as np
import pytest
from scipy import signal

from audition import design, plan, spectrum, synth
from audition.weighting import power_gain

NPERSEG = 8192


@lru_cache(maxsize=None)
def clip(hiss_dbfs=-50.0, top_hz=5000.0, hiss="tape", seed=3):
    return synth.synthesise(seconds=12.0, rate_hz=44100, channels=1, hiss_dbfs=hiss_dbfs, hiss=hiss,
                            lead_in_seconds=1.5, seed=seed, programme_top_hz=top_hz)


@lru_cache(maxsize=None)
def surveyed(*key):
    """The streaming survey every command plans and predicts with."""
    c = clip(*key)
    return spectrum.survey_array(c.mix, c.rate_hz)


def floored_per_bin(s):
    """The naive programme estimate, outside minus noise floored bin by bin, to compare against."""
    return np.maximum(s.outside_psd - s.noise_psd, 0.0)


def welch(x, rate):
    return signal.welch(x[:, 0], fs=rate, nperseg=NPERSEG)


@lru_cache(maxsize=None)
def truth_psds(*key):
    """Programme stem PSD over the programme (after the lead-in) and hiss stem PSD."""
    c = clip(*key)
    start = int(c.lead_in_seconds * c.rate_hz)
    f, pp = welch(c.programme[start:], c.rate_hz)
    _, pn = welch(c.hiss, c.rate_hz)
    return f, pp, pn


def true_effect(key, d, weighting):
    """SNR gain and treble loss computed by filtering the stems separately (reference: sosfilt, welch)."""
    c = clip(*key)
    start = int(c.lead_in_seconds * c.rate_hz)
    f, pp, pn = truth_psds(*key)
    _, pp2 = welch(signal.sosfilt(d.sos, c.programme, axis=0)[start:], c.rate_hz)
    _, pn2 = welch(signal.sosfilt(d.sos, c.hiss, axis=0), c.rate_hz)
    w = power_gain(weighting, f)
    gain = 10 * math.log10((np.sum(pp2 * w) / np.sum(pn2 * w)) / (np.sum(pp * w) / np.sum(pn * w)))
    t = f >= 2000
    loss = 10 * math.log10(np.sum(pp[t]) / np.sum(pp2[t]))  # monotone filters only: lost = before - after
    return gain, loss


KEYS = [(-50.0, 5000.0, "tape"), (-42.0, 3500.0, "white"), (-58.0, 7000.0, "pink")]


@pytest.mark.parametrize("key", KEYS)
def test_noise_level_matches_hiss_stem(key):
    # Ground truth: the survey's noise RMS within 0.5 dB of the hiss stem's RMS (the survey issue's tolerance).
    c = clip(*key)
    s = surveyed(*key)
    stem_dbfs = 20 * math.log10(np.sqrt(np.mean(c.hiss**2)))
    assert s.noise_rms_dbfs == pytest.approx(stem_dbfs, abs=0.5)


@pytest.mark.parametrize("key", KEYS)
@pytest.mark.parametrize("f0,q,order,alignment", [(6000.0, 0.7071, 2, None), (4000.0, 0.5, 2, None),
                                                  (8000.0, None, 4, "butterworth"), (3000.0, None, 4, "bessel")])
def test_prediction_matches_filtered_stems(key, f0, q, order, alignment):
    # Ground truth from the stems filtered separately: predicted SNR gain and treble loss within 0.5 dB.
    from audition import measure

    s = surveyed(*key)
    d = design.lowpass(f0, 44100, q=q, order=order, alignment=alignment)
    p = measure.predict(s.freqs_hz, s.programme_psd, s.noise_psd, d)
    for weighting in ("flat", "a", "itu468"):
        gain, loss = true_effect(key, d, weighting)
        assert p.snr_gain_db[weighting] == pytest.approx(gain, abs=0.5), weighting
    assert p.treble_loss_db == pytest.approx(loss, abs=0.5)


@pytest.mark.parametrize("key", KEYS)
def test_crossover_within_a_third_octave_of_truth(key):
    # Truth: the lowest 1/3-octave band above which the programme stem's band level stays below
    # the hiss stem's (IEC 61260-1 bands, computed here from the stems' welch PSDs).
    f, pp, pn = truth_psds(*key)
    c, bp = spectrum.band_levels(f, np.stack([pp, pn]), 3)
    below = bp[0] < bp[1]
    true_xo = None
    for i in range(len(c)):
        if below[i:].all():
            true_xo = c[i]
            break
    s = surveyed(*key)
    assert true_xo is not None and s.crossover_hz is not None
    assert abs(math.log2(s.crossover_hz / true_xo)) <= 1 / 3 + 1e-9


def brute_force_truth(key, designs, weighting):
    """True gain and cut-only treble loss of every design from the stems' spectra (sums written out here)."""
    f, pp, pn = truth_psds(*key)
    w = power_gain(weighting, f)
    t = f >= 2000
    gains, losses = [], []
    for d in designs:
        h2 = np.abs(d.digital_response(f)) ** 2
        gains.append(10 * math.log10((np.sum(pp * w * h2) / np.sum(pn * w * h2)) / (np.sum(pp * w) / np.sum(pn * w))))
        lost = np.sum(pp[t] * np.maximum(0, 1 - h2[t]))
        losses.append(-10 * math.log10(1 - lost / np.sum(pp[t])))
    return np.array(gains), np.array(losses)


def peak_db(d, f):
    return 10 * math.log10(np.max(np.abs(d.digital_response(f)) ** 2))


@pytest.mark.parametrize("key", KEYS)
def test_refined_programme_estimate_tracks_the_stem_where_the_floor_hides_it(key):
    # Truth: the programme stem's power above the crossover (IEC 61260-1 1/3-octave bands of the
    # stem's scipy welch PSD), scaled to the estimate's level over 200 Hz - 2 kHz, where the programme
    # stands far above the hiss (the survey averages the programme's loud segments only, the stem
    # every frame after the lead-in). The bin-by-bin floored estimate reads up to 8 dB too much
    # there (hiss scatter kept by the floor); the band-averaged one must lie within 3 dB of truth
    # and never further from it than the floored one.
    f, pp, pn = truth_psds(*key)
    s = surveyed(*key)
    c, bp = spectrum.band_levels(f, np.stack([pp, floored_per_bin(s), s.programme_psd]), 3)
    low = (c >= 200) & (c <= 2000)
    truth = bp[0] * (bp[1, low].sum() / bp[0, low].sum())
    high = c >= s.crossover_hz
    err_raw, err_ref = (abs(10 * math.log10(b[high].sum() / truth[high].sum())) for b in (bp[1], bp[2]))
    assert err_ref <= 3.0
    assert err_ref <= err_raw + 1e-9
    # Below the crossover the two agree: the refinement only acts where the hiss dominates.
    np.testing.assert_allclose(bp[2, low], bp[1, low], rtol=0.05)


@pytest.mark.parametrize("key,budget", [(k, b) for b in (0.5, 1.0, 2.0) for k in KEYS])
def test_plan_choice_against_brute_force_truth(key, budget):
    # The planner issue's check: the choice's true treble loss within budget + 0.3 dB, and its true
    # weighted SNR gain within 0.5 dB of the best true gain on the same grid within the budget.
    s = surveyed(*key)
    pl = plan.plan(s.freqs_hz, s.programme_psd, s.noise_psd, 44100, budget_db=budget, weighting="itu468")
    assert pl.choice is not None
    designs = plan.candidate_designs(44100, plan.DEFAULT_ORDERS)
    gains, losses = brute_force_truth(key, designs, "itu468")
    f = s.freqs_hz
    allowed = np.array([peak_db(d, f) <= plan.DEFAULT_MAX_PEAK_DB + 1e-9 for d in designs])
    best = gains[(losses <= budget) & allowed].max()
    (g_choice,), (l_choice,) = brute_force_truth(key, [pl.choice.design], "itu468")
    assert l_choice <= budget + 0.3
    assert g_choice >= best - 0.5


HISS_LEVELS = (-66.0, -58.0, -50.0, -42.0)


def test_more_hiss_never_raises_the_cutoff():
    # Monotonicity: the same programme under louder hiss is never cut higher. Not asserted strictly,
    # and why is checked here against brute-force truth: the choice rule (best weighted SNR
    # gain within a treble-loss budget) is blind to the hiss level, because the SNR gain
    # (P'p/P'n)/(Pp/Pn) and the treble loss are both ratios in which the hiss level cancels. The
    # true best design on the grid is therefore the same at every level, and only a planner that
    # misreads the programme (the old per-bin floor read hiss as treble) moves with the level.
    designs = plan.candidate_designs(44100, plan.DEFAULT_ORDERS)
    allowed = None
    f0s, best = [], []
    for hiss in HISS_LEVELS:
        key = (hiss, 5000.0, "tape", 3)
        s = surveyed(*key)
        pl = plan.plan(s.freqs_hz, s.programme_psd, s.noise_psd, 44100, budget_db=1.0)
        f0s.append(pl.choice.design.f0_hz)
        gains, losses = brute_force_truth(key, designs, "itu468")
        if allowed is None:
            allowed = np.array([peak_db(d, s.freqs_hz) <= plan.DEFAULT_MAX_PEAK_DB + 1e-9 for d in designs])
        ok = (losses <= 1.0) & allowed
        i = int(np.flatnonzero(ok)[np.argmax(gains[ok])])
        best.append((designs[i].f0_hz, gains[i]))
    assert all(b <= a for a, b in zip(f0s, f0s[1:])), f0s
    # The truth's own invariance (same best design, same gain within 0.05 dB, at every hiss level).
    assert len({f0 for f0, _ in best}) == 1 and max(g for _, g in best) - min(g for _, g in best) < 0.05
    # And the planner lands on it at every level.
    assert f0s == [best[0][0]] * len(HISS_LEVELS)


@pytest.mark.parametrize("key", KEYS)
def test_looser_budget_never_worse(key):
    s = surveyed(*key)
    gains = [plan.plan(s.freqs_hz, s.programme_psd, s.noise_psd, 44100, budget_db=b).choice.snr_gain_db["itu468"]
             for b in (0.25, 0.5, 1.0, 2.0, 4.0)]
    assert all(b >= a - 1e-12 for a, b in zip(gains, gains[1:]))


def test_candidate_grid_holds_the_alignments():
    # Alignment definitions: second-order Butterworth Q = 1/sqrt(2); fourth-order Butterworth sections
    # Q = 0.5412 and 1.3066 (active-filter handbook tables, from memory); Bessel sections as in the
    # table checked in test_design.py.
    ds = plan.candidate_designs(44100, (2, 4), f0s=[5000.0])
    qs2 = {round(d.q, 4) for d in ds if d.order == 2}
    assert 0.7071 in qs2 and 0.5774 in qs2
    bw4 = [d for d in ds if d.order == 4 and d.alignment == "butterworth"][0]
    assert [round(sec.q, 4) for sec in bw4.sections] == [0.5412, 1.3066]
    be4 = [d for d in ds if d.alignment == "bessel"][0]
    assert [round(sec.q, 2) for sec in be4.sections] == [0.52, 0.81]


def test_quiet_hiss_warns():
    s = surveyed(-100.0, 5000.0, "tape", 3)
    pl = plan.plan(s.freqs_hz, s.programme_psd, s.noise_psd, 44100, extra_warnings=plan.noise_warnings(s))
    assert any("very low" in w or "gains only" in w for w in pl.warnings)


def test_hum_warns():
    # Hum, not hiss: a 50 Hz line and harmonics in the noise.
    c = clip(*KEYS[0])
    t = np.arange(len(c.mix)) / c.rate_hz
    hum = 0.003 * (np.sin(2 * np.pi * 50 * t) + 0.5 * np.sin(2 * np.pi * 150 * t))
    s = spectrum.survey_array(c.mix + hum[:, None], c.rate_hz, noise_spans=[(0.1, 1.4)])
    assert any(w.startswith("hum") for w in plan.noise_warnings(s))
    assert not any(w.startswith("hum") for w in plan.noise_warnings(surveyed(*KEYS[0])))
