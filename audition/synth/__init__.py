"""Test clips with known truth: a synthetic programme plus hiss of stated colour and level.

Every measurement the survey makes can be checked against this module's stems:
the mix is exactly ``programme + hiss``, both returned (and written) apart.
The scenario is our own, deterministic for a seed:

Programme
    Two programmes, both silent through the lead-in.

    ``"broadband"`` (the default) has the long-term spectrum of real programme
    material: its one-third-octave band levels follow the simulated programme
    signal of IEC 60268-1:1985 clause 7, Table II (flat from 250 to 800 Hz,
    -11.9 dB at 10 kHz, -14.8 dB at 12.5 kHz, -18.2 dB at 16 kHz; the table's
    values were taken from a secondary copy, not the printed standard),
    times the medium's roll-off 1/(1 + (f/top)^8) in power above
    ``programme_top_hz`` (default 16 kHz, 24 dB per octave). That spectrum
    K·S(f)·R(f) is shared out between the parts of a small band, the shares
    adding to one (our own split):

    - four monophonic voices (bass from D1 = 36.7 Hz, two inner voices, a lead)
      of harmonic notes, moving by small steps on a major scale with a random
      root, the treble part of each note (weight f²/(f² + 1500²)) decaying five
      times faster than the body; they take what the others leave, above a
      fourth-order high-pass at 40 Hz;
    - hi-hats on the eighth notes (closed, decay 20-60 ms; sometimes open,
      200-450 ms; a new one chokes the last) and crash cymbals on some bar
      lines (decay 0.7-1.6 s): Gaussian noise bursts sharing the treble
      (f/5k)²/(1 + (f/5k)²), the hats its upper part;
    - sibilants: 60-180 ms bursts on 45 % of the lead's notes, noise through a
      second-order band-pass centred at 5.5-9.5 kHz, Q 1.1 (about -6 dB an
      octave either side, so they reach 12-16 kHz), up to 35 % of the spectrum
      around 7 kHz;
    - kick (beats 1 and 3, share 0.5/(1 + (f/100)^4)) and snare (2 and 4, share
      0.3 between 200 Hz and 4 kHz): decaying noise bursts. A 4-bar phrase
      drops hats, kick and snare with probability 0.2 (never the first).

    Each noise burst is made in the frequency domain with its layer's exact
    density, so a layer's long-term spectrum is its share of the target once its
    events' envelope energies (closed form) are summed; the voices' harmonic
    amplitudes are set from the notes' envelope energies the same way (a
    harmonic at k·f0 stands for the band (k ± 1/2)·f0). Both sums are taken over
    the first 240 s of the seed's own schedule, which every clip of that seed
    shares whatever its length or lead-in; so the long-term spectrum follows the
    table for each seed, within the scatter of a finite clip (over 40 s, seeds
    0-11: within 2.3 dB from 250 Hz to 12.5 kHz, 5 dB from 40 to 200 Hz, where
    bass notes and kicks are few; tests/test_synth.py). K sets the
    long-term RMS per channel to -24 dBFS (20·log10 rms); a memoryless soft
    saturation above 0.5 (:func:`saturate`, our own tape-like curve, reached by
    a few tens of samples per million) keeps the sample peak at most 0.7
    (-3.10 dBFS) by construction. With the default hiss (tape, -50 dBFS) the
    12.5 kHz band's short-term level (125 ms) stands about 10 dB above the hiss
    in its loudest 10 % of time and 6-7 dB above it on average: treble that a hiss
    filter can cut audibly, as on a real cassette.

    ``"dark"`` (the former default) is a small ensemble of four monophonic voices
    (bass, tenor, alto, lead) playing notes of a major scale with a random
    root, moving by small steps, with occasional rests. Each note is a sum of
    harmonics k·f0 with amplitudes

    .. math:: a_k = k^{-t}\\;\\frac{1}{\\sqrt{1 + (k f_0 / f_{top})^{8}}}

    a tilt of t·6.02 dB per octave of harmonic number (t ≈ 1, like a sawtooth,
    per voice between 0.9 and 1.2) times a fourth-order Butterworth-shaped
    roll-off above ``programme_top_hz`` (24 dB per octave; default 5 kHz), so
    the programme sinks into the hiss above a few kHz, darker than any real
    cassette. Harmonics stop below 0.475·rate (no aliasing). Envelopes:
    raised-cosine attack of 6..30 ms, exponential decay (time constant
    0.25..1.2 s), raised-cosine release; the part of each harmonic above about
    1.5 kHz, weighted by f²/(f² + 1500²), decays four times faster, as the
    treble of a struck or plucked string does. Each voice peaks at most at its
    own amplitude and the amplitudes sum to 0.7, so the programme's sample
    peak is at most -3.10 dBFS by construction, whatever the seed (typically
    it peaks near -11 dBFS with an RMS near -27 dBFS).

    In both, sources are panned partly: 35 % of each one's power is shared by
    all channels, the rest amplitude-panned (constant power) between the two
    nearest channels (the broadband kick and snare sit in the centre).

Hiss
    Gaussian noise, independent in every channel (decorrelated stereo), shaped
    by a linear-phase FIR filter designed by frequency sampling (Blackman
    window, about 0.34 s long; within 0.03 dB of the target magnitude from 20 Hz
    to Nyquist) and scaled so its expected RMS in each channel is ``hiss_dbfs``
    (dBFS as 20·log10(rms): the power gain of the filter is the sum of its
    squared taps). Colours, by their power spectral density S(f):

    - ``"white"``: flat.
    - ``"pink"``: S ∝ 1/f (equal power per octave), with a first-order
      high-pass at 10 Hz so the process has no DC drift.
    - ``"tape"``: white through a first-order treble shelf, flat up to
      1326 Hz (the 120 µs cassette playback time constant, from memory), rising
      6 dB per octave to 5305 Hz (30 µs, our choice) and flat above: +12.04 dB of
      treble emphasis, the rising-then-flat hiss a tape replay chain gives before
      head losses. Our own scenario, not a measured machine.

    The filter is run in from a separate noise pre-roll, so the hiss is
    stationary from the first frame (the lead-in is a valid noise reference).

Determinism and streaming
-------------------------
Everything is made in chunks of :data:`CHUNK_FRAMES` frames. Each voice's note
list, each pitch's harmonic phases, each drum or sibilant event and each chunk
of noise have their own random stream (``numpy.random.SeedSequence(seed,
spawn_key=...)``, PCG64), so
:func:`synth_blocks` (flat memory, for hour-long files) and :func:`synthesise`
(the concatenation) give the same bytes, and a longer clip starts with the
shorter one's programme.

Levels: the hiss is at most -30 dBFS, so with either programme's 0.7 peak bound
the mix stays below full scale (a Gaussian peak of 6.3 σ, rarer than once in an
hour of stereo at 48 kHz, is 0.2 at -30 dBFS RMS: 0.7 + 0.2 < 1).

The rooms: :mod:`~audition.synth.params` (parameters, checks, clip objects, seeded streams),
:mod:`~audition.synth.hiss`, :mod:`~audition.synth.dark` and :mod:`~audition.synth.broadband`
(the two programmes), :mod:`~audition.synth.clip` (the mix, streamed or whole).
"""

from __future__ import annotations

from audition.synth.broadband import iec_programme_band_db, saturate
from audition.synth.clip import _blocks, synth_blocks, synthesise
from audition.synth.params import (BROADBAND_TOP_HZ, CHUNK_FRAMES, DEFAULT_HISS_DBFS, DEFAULT_PROGRAMME, DEFAULT_TOP_HZ,
                                   HISS_COLOURS, MAX_CHANNELS, MAX_HISS_DBFS, MAX_RATE_HZ, MAX_SECONDS, MIN_HISS_DBFS,
                                   MIN_RATE_HZ, PROGRAMME_PEAK, PROGRAMMES, Clip, ClipBlock, check_params)
from audition.synth.broadband import SATURATION_KNEE
from audition.synth.hiss import hiss_filter, hiss_magnitude

__all__ = ["BROADBAND_TOP_HZ", "CHUNK_FRAMES", "DEFAULT_HISS_DBFS", "DEFAULT_PROGRAMME", "DEFAULT_TOP_HZ",
           "HISS_COLOURS", "MAX_CHANNELS", "MAX_HISS_DBFS", "MAX_RATE_HZ", "MAX_SECONDS", "MIN_HISS_DBFS",
           "MIN_RATE_HZ", "PROGRAMME_PEAK", "PROGRAMMES", "SATURATION_KNEE", "Clip", "ClipBlock", "_blocks",
           "check_params", "hiss_filter", "hiss_magnitude", "iec_programme_band_db", "saturate", "synth_blocks",
           "synthesise"]
