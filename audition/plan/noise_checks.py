"""Signs that the noise is not hiss, so that a low-pass is the wrong tool (our own thresholds)."""

from __future__ import annotations

import math

import numpy as np

#: Mains hum fundamentals, Hz.
MAINS_HZ = (50.0, 60.0)
HUM_PEAK_DB = 12.0
CLICK_SPREAD_DB = 1.5
LOW_HISS_DBFS = -85.0
BROADBAND_SEPARATION_DB = 6.0


def noise_warnings(survey) -> list[str]:
    """Signs that the noise is not hiss, so a low-pass is the wrong tool (our own thresholds).

    - hum: a line at 50/60 Hz or its first harmonics standing >= 12 dB above the
      median density of the octave around it;
    - clicks or crackle: the noise reference's level varies by more than 1.5 dB
      (standard deviation) between Welch segments, where steady hiss varies by about 0.2 dB;
    - low-frequency noise: more than half the noise power lies below 1 kHz (rumble, hum);
    - programme-level noise: the quiet frames lie less than 6 dB below the programme;
    - negligible hiss: the ITU-R 468-weighted hiss below -85 dBFS.
    """
    from audition.measure import band_power, weighted_levels

    f, n = survey.freqs_hz, survey.noise_psd
    out = []
    for mains in MAINS_HZ:
        worst = 0.0
        for k in (1, 2, 3):
            fk = mains * k
            if fk >= f[-1]:
                continue
            i = int(np.argmin(np.abs(f - fk)))
            around = (f > fk / 1.41) & (f < fk * 1.41)
            med = float(np.median(n[around])) if around.sum() > 4 else 0.0
            peak = float(n[max(i - 1, 0):i + 2].max())
            if med > 0 and peak > 0:
                worst = max(worst, 10 * math.log10(peak / med))
        if worst >= HUM_PEAK_DB:
            out.append(f"hum: the noise has a line {worst:.0f} dB above its neighbours at {mains:.0f} Hz or a "
                       "harmonic; a low-pass does not touch it (use a hum filter)")
    c = survey.confidence
    if c.level_spread_db > CLICK_SPREAD_DB:
        out.append(f"the noise reference's level varies by {c.level_spread_db:.1f} dB between segments (steady hiss "
                   "varies by about 0.2 dB): clicks, crackle or a changing floor; de-click before choosing a low-pass")
    total = band_power(f, n)
    if total > 0 and band_power(f, n, hi_hz=1000.0) > 0.5 * total:
        out.append("most of the noise power lies below 1 kHz (rumble or hum, not hiss): a low-pass is the wrong "
                   "tool for it")
    if c.separation_db is not None and c.separation_db < BROADBAND_SEPARATION_DB:
        from audition.survey.noise import below_words

        out.append(f"the quiet frames lie {below_words(c.separation_db)}: the noise is at "
                   "programme level, or the noise reference holds programme; give --noise-span over hiss alone")
    hiss = weighted_levels(f, n, ("itu468",))["itu468"]
    if hiss < LOW_HISS_DBFS:
        out.append(f"the hiss is very low ({hiss:.1f} dBFS, ITU-R 468 weighted): a hiss filter will hardly be heard")
    return out
