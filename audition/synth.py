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
    values were taken from a secondary transcription, not the printed standard),
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
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterator, NamedTuple

import numpy as np

from audition.errors import BadParameter

#: Frames made per step; fixed, so the result does not depend on how it is read.
CHUNK_FRAMES = 65536
HISS_COLOURS = ("white", "pink", "tape")
PROGRAMMES = ("broadband", "dark")
DEFAULT_PROGRAMME = "broadband"
DEFAULT_TOP_HZ = 5000.0
DEFAULT_HISS_DBFS = -50.0
#: Upper bound of the hiss level: keeps the mix below full scale (see module notes).
MAX_HISS_DBFS = -30.0
MIN_HISS_DBFS = -140.0
MAX_SECONDS = 24 * 3600.0
MAX_CHANNELS = 32
MIN_RATE_HZ = 8000.0
MAX_RATE_HZ = 768000.0
#: Sum of the voice amplitudes: the programme's sample-peak bound (-3.10 dBFS).
PROGRAMME_PEAK = 0.7
#: 120 µs and 30 µs time constants of the tape shelf, Hz.
TAPE_SHELF_HZ = (1.0 / (2 * math.pi * 120e-6), 1.0 / (2 * math.pi * 30e-6))
PINK_HIGHPASS_HZ = 10.0
#: Samples per period of a note's wavetable; linear interpolation in it errs by
#: at most (π/M)²/8 of a harmonic's amplitude (about -170 dB for the fundamental).
TABLE_SIZE = 16384
#: Major scale, semitones above the root.
SCALE = (0, 2, 4, 5, 7, 9, 11)

# Random streams (first element of each spawn key).
_SCHEDULE, _PHASES, _HISS, _PREROLL, _GLOBAL, _EVENTS = range(6)


@dataclass(frozen=True)
class _Voice:
    name: str
    midi_lo: int
    midi_hi: int
    amplitude: float
    tilt: float
    beats: tuple
    tau_seconds: tuple
    attack_seconds: tuple
    rest_probability: float


# Amplitudes sum to PROGRAMME_PEAK (0.7).
_VOICES = (
    _Voice("bass", 36, 52, 0.21, 1.2, (1, 2, 2, 4), (0.6, 1.2), (0.010, 0.030), 0.10),
    _Voice("tenor", 50, 67, 0.168, 1.0, (1, 1, 2), (0.4, 0.9), (0.008, 0.025), 0.12),
    _Voice("alto", 57, 74, 0.154, 1.0, (1, 1, 2, 0.5), (0.4, 0.9), (0.008, 0.025), 0.12),
    _Voice("lead", 67, 86, 0.168, 0.9, (0.5, 0.5, 1, 1.5), (0.25, 0.6), (0.006, 0.020), 0.15),
)
# Share of each voice's power common to all channels ("partly panned").
_BLEED = 0.35
# Where the faster-decaying treble part of a note begins, Hz, and how much faster it decays.
_BRIGHT_HZ = 1500.0
_BRIGHT_SPEEDUP = 4.0
_RELEASE_SECONDS = 0.08


@dataclass(frozen=True)
class Clip:
    """A synthesised clip and the truth it was made from.

    Attributes
    ----------
    mix, programme, hiss : np.ndarray, (frames, channels) float64, full scale ±1.0
        ``mix == programme + hiss`` exactly. Read-only.
    rate_hz : float
    seconds : float
    channels : int
    hiss_dbfs : float
        Requested hiss level per channel, dBFS as 20·log10(rms) (the expected RMS).
    hiss_colour : str
        ``"white"``, ``"pink"`` or ``"tape"`` (the ``hiss`` argument).
    lead_in_seconds : float
        Hiss alone before the programme starts.
    seed : int
    programme_top_hz : float
        Where the programme starts to roll off at 24 dB per octave.
    programme_kind : str
        ``"broadband"`` (the default programme) or ``"dark"`` (the former default).
    """

    mix: np.ndarray
    programme: np.ndarray
    hiss: np.ndarray
    rate_hz: float
    seconds: float
    channels: int
    hiss_dbfs: float
    hiss_colour: str
    lead_in_seconds: float
    seed: int
    programme_top_hz: float
    programme_kind: str = DEFAULT_PROGRAMME

    @property
    def frames(self) -> int:
        return int(self.mix.shape[0])

    def params(self) -> dict:
        """The parameters as a JSON-ready dict (units in the keys)."""
        return {"seconds": self.seconds, "rate_hz": self.rate_hz, "channels": self.channels,
                "hiss_dbfs": self.hiss_dbfs, "hiss": self.hiss_colour, "lead_in_seconds": self.lead_in_seconds,
                "seed": self.seed, "programme_top_hz": self.programme_top_hz,
                "programme": self.programme_kind}


class ClipBlock(NamedTuple):
    """One chunk of :func:`synth_blocks`: frames ``start_frame .. start_frame + len(mix)``."""

    start_frame: int
    mix: np.ndarray
    programme: np.ndarray
    hiss: np.ndarray


def _is_number(x) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool) and math.isfinite(x)


def check_params(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
                 lead_in_seconds=1.0, seed=0, programme_top_hz=None, programme=DEFAULT_PROGRAMME) -> dict:
    """Validate the synthesis parameters; return them normalised (floats, ints).

    ``programme_top_hz=None`` takes the programme's own default: 5000 Hz for ``"dark"``,
    min(16000, 0.45·rate) Hz for ``"broadband"``.

    Raises
    ------
    BadParameter
        Naming the parameter, its value and the allowed range.
    """
    if not _is_number(rate_hz) or not MIN_RATE_HZ <= rate_hz <= MAX_RATE_HZ or rate_hz != int(rate_hz):
        raise BadParameter(f"rate={rate_hz!r}: the sample rate must be a whole number of Hz from "
                           f"{MIN_RATE_HZ:.0f} to {MAX_RATE_HZ:.0f}")
    rate_hz = float(rate_hz)
    if not _is_number(seconds) or not 0 < seconds <= MAX_SECONDS:
        raise BadParameter(f"seconds={seconds!r}: must be more than 0 and at most {MAX_SECONDS:.0f} (24 hours)")
    if round(seconds * rate_hz) < 1:
        raise BadParameter(f"seconds={seconds!r}: shorter than one frame at {rate_hz:g} Hz")
    if not isinstance(channels, (int, np.integer)) or isinstance(channels, bool) or not 1 <= channels <= MAX_CHANNELS:
        raise BadParameter(f"channels={channels!r}: must be a whole number from 1 to {MAX_CHANNELS}")
    if not _is_number(hiss_dbfs) or not MIN_HISS_DBFS <= hiss_dbfs <= MAX_HISS_DBFS:
        raise BadParameter(f"hiss-dbfs={hiss_dbfs!r}: must lie from {MIN_HISS_DBFS:g} to {MAX_HISS_DBFS:g} dBFS "
                           "(louder hiss would push the mix past full scale)")
    if hiss not in HISS_COLOURS:
        raise BadParameter(f"hiss={hiss!r}: allowed colours are {', '.join(HISS_COLOURS)}")
    if not _is_number(lead_in_seconds) or not 0 <= lead_in_seconds < seconds:
        raise BadParameter(f"lead-in={lead_in_seconds!r} s: must be at least 0 and shorter than the clip "
                           f"({seconds!r} s)")
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise BadParameter(f"seed={seed!r}: must be a whole number, 0 or more")
    if programme not in PROGRAMMES:
        raise BadParameter(f"programme={programme!r}: allowed programmes are {', '.join(PROGRAMMES)}")
    if programme_top_hz is None:
        programme_top_hz = DEFAULT_TOP_HZ if programme == "dark" else min(BROADBAND_TOP_HZ, 0.45 * rate_hz)
    nyq = rate_hz / 2
    if not _is_number(programme_top_hz) or not 50.0 <= programme_top_hz < nyq:
        raise BadParameter(f"programme-top={programme_top_hz!r} Hz: must satisfy 50 <= top < rate/2 "
                           f"(rate={rate_hz:g} -> {nyq:g} Hz)")
    return {"seconds": float(seconds), "rate_hz": rate_hz, "channels": int(channels), "hiss_dbfs": float(hiss_dbfs),
            "hiss": hiss, "lead_in_seconds": float(lead_in_seconds), "seed": int(seed),
            "programme_top_hz": float(programme_top_hz), "programme": programme}


# ---------------------------------------------------------------------------
# Hiss
# ---------------------------------------------------------------------------


def hiss_magnitude(colour: str, f_hz) -> np.ndarray:
    """Target magnitude |H(f)| of a hiss colour's shaping filter (unnormalised).

    white: 1; pink: sqrt(1000/f)·f/sqrt(f² + 10²) (S ∝ 1/f above 10 Hz);
    tape: |(1 + j f/1326.3)/(1 + j f/5305.2)| (first-order shelf, +12.04 dB).
    """
    f = np.abs(np.asarray(f_hz, dtype=float))
    if colour == "white":
        return np.ones_like(f)
    if colour == "pink":
        fh = PINK_HIGHPASS_HZ
        with np.errstate(divide="ignore", invalid="ignore"):
            a = np.sqrt(1000.0 / f) * f / np.sqrt(f * f + fh * fh)
        return np.where(f > 0, a, 0.0)
    if colour == "tape":
        f1, f2 = TAPE_SHELF_HZ
        return np.abs((1 + 1j * f / f1) / (1 + 1j * f / f2))
    raise BadParameter(f"hiss={colour!r}: allowed colours are {', '.join(HISS_COLOURS)}")


def hiss_filter(colour: str, rate_hz: float) -> np.ndarray | None:
    """Linear-phase FIR taps that shape white noise into ``colour`` (None for white).

    Frequency sampling: the target magnitude on the rfft grid of length L (a
    power of two near 0.34·rate), inverse FFT, centred and Blackman-windowed.
    The taps are scaled to unit power gain (sum of squares 1), so filtered unit
    white noise has unit variance.
    """
    if colour == "white":
        return None
    n = 2 ** int(round(math.log2(rate_hz * 0.34)))
    from scipy.signal import get_window

    h = np.fft.irfft(hiss_magnitude(colour, np.fft.rfftfreq(n, 1.0 / rate_hz)), n)
    h = np.roll(h, n // 2) * get_window("blackman", n)
    return h / math.sqrt(float(np.sum(h * h)))


def _rng(seed: int, *key: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=tuple(key)))


class _Hiss:
    """Chunked hiss: white noise per chunk, FIR overlap-save with the input tail carried."""

    def __init__(self, p: dict):
        self.seed, self.ch = p["seed"], p["channels"]
        self.sigma = 10.0 ** (p["hiss_dbfs"] / 20.0)
        self.h = hiss_filter(p["hiss"], p["rate_hz"])
        if self.h is not None:
            # Run-in: the filter's memory is filled from its own stream, so frame 0 is already stationary.
            self.tail = _rng(self.seed, _PREROLL).standard_normal((len(self.h) - 1, self.ch))

    def chunk(self, index: int, n: int) -> np.ndarray:
        w = _rng(self.seed, _HISS, index).standard_normal((n, self.ch))
        if self.h is None:
            return w * self.sigma
        from scipy.signal import fftconvolve

        x = np.concatenate([self.tail, w], axis=0)
        self.tail = x[-(len(self.h) - 1):]
        return fftconvolve(x, self.h[:, None], mode="valid", axes=0) * self.sigma


# ---------------------------------------------------------------------------
# Programme
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Note:
    voice: int
    midi: int
    onset: int      # frame
    length: int     # frames, release included
    gain: float     # voice amplitude × velocity / table bound
    phase0: float   # cycles
    attack: int     # frames
    release: int    # frames
    tau: float      # seconds
    key: tuple      # wavetable cache key


def _midi_hz(m: int) -> float:
    # Equal temperament, A4 = 440 Hz = MIDI 69 (common practice).
    return 440.0 * 2.0 ** ((m - 69) / 12.0)


def _schedule(p: dict, voices=_VOICES, absolute: bool = False) -> list:
    """Every note of every voice (monophonic: a voice's notes never overlap).

    ``absolute``: the note's gain is its velocity alone (the broadband programme sets harmonic
    amplitudes itself); otherwise the voice's amplitude times the velocity (the dark programme).
    """
    rate, frames = p["rate_hz"], int(round(p["seconds"] * p["rate_hz"]))
    g = _rng(p["seed"], _GLOBAL)
    root = int(g.integers(0, 12))
    bpm = float(g.uniform(84.0, 126.0))
    beat = 60.0 / bpm
    pitches = {m for m in range(0, 128) if (m - root) % 12 in SCALE}
    notes = []
    for v, voice in enumerate(voices):
        r = _rng(p["seed"], _SCHEDULE, v)
        scale = sorted(m for m in pitches if voice.midi_lo <= m <= voice.midi_hi)
        idx = int(r.integers(0, len(scale)))
        t = p["lead_in_seconds"]
        while True:
            slot = float(r.choice(voice.beats)) * beat
            rest = r.random() < voice.rest_probability
            step = int(r.integers(-2, 3))
            velocity = float(r.uniform(0.5, 1.0))
            tau = float(r.uniform(*voice.tau_seconds))
            attack = float(r.uniform(*voice.attack_seconds))
            phase0 = float(r.random())
            onset = int(round(t * rate))
            end = min(int(round((t + slot) * rate)), frames)
            if onset >= frames or end - onset < int(0.1 * rate):
                break
            t += slot
            if rest:
                continue
            idx = min(max(idx + step, 0), len(scale) - 1)
            m = scale[idx]
            length = end - onset
            table_key = (v, m)
            notes.append(_Note(v, m, onset, length, velocity if absolute else voice.amplitude * velocity, phase0,
                               max(1, int(attack * rate)), max(1, min(int(_RELEASE_SECONDS * rate), length // 3)),
                               tau, table_key))
    notes.sort(key=lambda n: n.onset)
    return notes


def harmonic_amplitudes(f0_hz: float, rate_hz: float, top_hz: float, tilt: float = 1.0) -> np.ndarray:
    """a_k = k^-tilt / sqrt(1 + (k f0/top)^8) for k = 1 .. K with K·f0 < 0.475·rate."""
    k = np.arange(1, max(1, int(0.475 * rate_hz / f0_hz)) + 1, dtype=float)
    k = k[k * f0_hz < 0.475 * rate_hz]
    return k ** -tilt / np.sqrt(1.0 + (k * f0_hz / top_hz) ** 8)


def _bright(f_hz):
    """Share of a harmonic's amplitude in the fast-decaying treble part: f²/(f² + 1500²)."""
    f = np.asarray(f_hz, dtype=float)
    return f * f / (f * f + _BRIGHT_HZ ** 2)


def _render_note(prog, note: _Note, i0: int, i1: int, normalise: bool) -> np.ndarray:
    """Frames i0 .. i1 of a note from ``prog``'s wavetables (peak-normalised for the dark programme)."""
    body, bright, bound = prog._table(note.key)
    i = np.arange(i0, i1)
    t = i / prog.rate
    pos = ((_midi_hz(note.midi) * t + note.phase0) % 1.0) * TABLE_SIZE
    j = pos.astype(np.int64)
    np.minimum(j, TABLE_SIZE - 1, out=j)
    frac = pos - j
    fast = np.exp(-_BRIGHT_SPEEDUP * t / note.tau)
    x = body[j] + frac * (body[j + 1] - body[j]) + fast * (bright[j] + frac * (bright[j + 1] - bright[j]))
    env = np.exp(-t / note.tau)
    a = i < note.attack
    env[a] *= 0.5 - 0.5 * np.cos(np.pi * i[a] / note.attack)
    r0 = note.length - note.release
    r = i >= r0
    env[r] *= 0.5 + 0.5 * np.cos(np.pi * (i[r] - r0) / note.release)
    return x * env * (note.gain / bound if normalise else note.gain)


class _Programme:
    """The dark programme: four voices of harmonic notes rolling off above ``programme_top_hz``."""

    def __init__(self, p: dict):
        self.p = p
        self.rate = p["rate_hz"]
        self.notes = _schedule(p)
        self.next_note = 0
        self.active: list = []
        self.tables: dict = {}
        self.gains = _pan_gains(p["channels"], p["seed"])

    def _table(self, key):
        """(body, bright, bound): wavetables of one period (M + 1 points, wrapped) and their joint peak bound."""
        if key not in self.tables:
            v, m = key
            f0 = _midi_hz(m)
            a = harmonic_amplitudes(f0, self.rate, self.p["programme_top_hz"], _VOICES[v].tilt)
            f = f0 * np.arange(1, len(a) + 1)
            bright = f * f / (f * f + _BRIGHT_HZ ** 2)
            phases = _rng(self.p["seed"], _PHASES, v, m).uniform(0, 2 * np.pi, len(a))
            out = []
            for w in (a * (1 - bright), a * bright):
                spec = np.zeros(TABLE_SIZE // 2 + 1, dtype=complex)
                # sin(2πkθ + φ) has rfft coefficient -j·(M/2)·e^{jφ} at bin k.
                spec[1:len(a) + 1] = -0.5j * TABLE_SIZE * w * np.exp(1j * phases)
                t = np.fft.irfft(spec, TABLE_SIZE)
                out.append(np.append(t, t[0]))
            bound = float(np.max(np.abs(out[0])) + np.max(np.abs(out[1])))
            self.tables[key] = (out[0], out[1], bound)
        return self.tables[key]

    def chunk(self, start: int, n: int) -> np.ndarray:
        stop = start + n
        while self.next_note < len(self.notes) and self.notes[self.next_note].onset < stop:
            self.active.append(self.notes[self.next_note])
            self.next_note += 1
        voices = np.zeros((len(_VOICES), n))
        still = []
        for note in self.active:
            lo, hi = max(start, note.onset), min(stop, note.onset + note.length)
            if hi > lo:
                voices[note.voice, lo - start:hi - start] += self._render(note, lo - note.onset, hi - note.onset)
            if note.onset + note.length > stop:
                still.append(note)
        self.active = still
        return voices.T @ self.gains

    def _render(self, note: _Note, i0: int, i1: int) -> np.ndarray:
        return _render_note(self, note, i0, i1, normalise=True)


def _pan_gains(channels: int, seed: int, sources: int = len(_VOICES)) -> np.ndarray:
    """(sources, channels) amplitude gains: constant total power 1 per source, each gain <= 1."""
    g = np.ones((sources, channels))
    if channels == 1:
        return g
    r = _rng(seed, _GLOBAL, 1)
    for v in range(sources):
        # bass near the centre, the others anywhere but the extremes
        u = 0.5 + r.uniform(-0.1, 0.1) if v == 0 else r.uniform(0.1, 0.9)
        x = u * (channels - 1)
        lo = min(int(math.floor(x)), channels - 2)
        frac = x - lo
        pan = np.zeros(channels)
        pan[lo], pan[lo + 1] = math.cos(frac * math.pi / 2), math.sin(frac * math.pi / 2)
        g[v] = np.sqrt(_BLEED / channels + (1 - _BLEED) * pan ** 2)
    return g


# ---------------------------------------------------------------------------
# Broadband programme (the default)
# ---------------------------------------------------------------------------

#: IEC 60268-1:1985 clause 7, Table II: relative levels (dB) of the one-third-octave bands of the
#: simulated programme signal, 20 Hz .. 20 kHz (the bands' exact centres are the base-10 ones of
#: IEC 61260-1, 1000·10^(n/10), n = -17 .. 13). Not read from the printed standard: taken from a
#: secondary transcription (an open-source acoustics library's table), agreeing with what we
#: recall of its shape (flat 250-800 Hz, about -12 dB at 10 kHz); tolerances there ±0.5 dB in
#: the middle, ±1 dB from 31.5 Hz to 10 kHz, ±1.5 .. ±3 dB at the ends.
IEC60268_1_TABLE_DB = (-13.5, -10.2, -7.4, -5.2, -3.5, -2.3, -1.4, -0.9, -0.5, -0.2, -0.1, 0.0, 0.0, 0.0, 0.0, 0.0,
                       0.0, -0.1, -0.3, -0.6, -1.0, -1.6, -2.5, -3.7, -5.1, -7.0, -9.4, -11.9, -14.8, -18.2, -21.6)
#: Exact base-10 one-third-octave centres the table is given at (IEC 61260-1:2014, 20 Hz .. 20 kHz).
IEC60268_1_CENTRES_HZ = tuple(1000.0 * 10.0 ** (n / 10.0) for n in range(-17, 14))
#: Where the broadband programme's medium rolls off (24 dB/octave) unless --programme-top says otherwise.
BROADBAND_TOP_HZ = 16000.0
#: Long-term RMS of the broadband programme per channel after the lead-in, dBFS (20·log10 rms),
#: unless the peak bound asks for less: a transfer digitised with headroom (our choice).
BROADBAND_RMS_DBFS = -24.0
#: Where the broadband programme's soft saturation begins (-6.02 dBFS); it never passes
#: PROGRAMME_PEAK (0.7), so the programme's sample peak is at most -3.10 dBFS by construction.
SATURATION_KNEE = 0.5

# The three shares of the long-term spectrum (they sum to 1 above the bass high-pass): tonal voices
# below a crossover, sibilance in a band around 6-10 kHz, cymbals and hi-hats the rest.
_TREBLE_HZ = 5000.0            # cymbals and sibilants take (f/5k)²/(1 + (f/5k)²) of the spectrum
_TONAL_HIGHPASS_HZ = 40.0      # nothing is asked of the voices below the lowest bass notes
_KICK_SHARE, _KICK_HZ = 0.5, 100.0
_SNARE_SHARE, _SNARE_HZ = 0.3, (200.0, 4000.0)
_SIB_SHARE = 0.35              # the sibilance band's peak share of the long-term spectrum
_SIB_CENTRE_HZ = (5500.0, 9500.0)
_SIB_Q = 1.1
_HAT_SPLIT_HZ = 5000.0         # hats take the part above this, crashes the part below (power-complementary)
_CAL_SECONDS = 240.0           # the stretch of the seed's own schedule that sets the layer levels
_CHOKE_SECONDS = 0.004

# Voices of the broadband ensemble: an electric-bass-like low voice down to D1 (36.7 Hz), two
# inner voices and a lead. Amplitudes are set by the spectral rule, not per voice.
_BB_VOICES = (
    _Voice("bass", 26, 50, 0.0, 1.0, (1, 1, 2, 2), (0.35, 0.9), (0.006, 0.015), 0.10),
    _Voice("tenor", 48, 67, 0.0, 1.0, (1, 1, 2), (0.4, 0.9), (0.008, 0.025), 0.12),
    _Voice("alto", 57, 76, 0.0, 1.0, (1, 1, 2, 0.5), (0.4, 0.9), (0.008, 0.025), 0.12),
    _Voice("lead", 64, 88, 0.0, 1.0, (0.5, 0.5, 1, 1.5), (0.25, 0.6), (0.006, 0.020), 0.15),
)
_HAT, _CRASH, _SIB, _KICK, _SNARE = range(5)
_LAYER_NAMES = ("hat", "crash", "sib", "kick", "snare")
_PHRASE = 9    # stream of the 4-bar phrases' drums-on/off draws


def iec_programme_band_db(f_hz) -> np.ndarray:
    """IEC 60268-1 Table II band level (dB) at ``f_hz``, straight in dB over log f between centres.

    Beyond 20 Hz and 20 kHz the end segments' slopes continue.
    """
    u = np.log10(np.maximum(np.asarray(f_hz, dtype=float), 1e-3))
    c = np.log10(IEC60268_1_CENTRES_HZ)
    t = np.asarray(IEC60268_1_TABLE_DB)
    inner = np.interp(u, c, t)
    lo = t[0] + (t[1] - t[0]) / (c[1] - c[0]) * (u - c[0])
    hi = t[-1] + (t[-1] - t[-2]) / (c[-1] - c[-2]) * (u - c[-1])
    return np.where(u < c[0], lo, np.where(u > c[-1], hi, inner))


def _iec_psd(f_hz) -> np.ndarray:
    """Power per hertz whose one-third-octave band powers follow Table II (0 dB band = power 1).

    A base-10 third-octave band at f is f·(10^0.05 - 10^-0.05) = 0.2308·f wide.
    """
    f = np.asarray(f_hz, dtype=float)
    with np.errstate(divide="ignore"):
        s = 10.0 ** (iec_programme_band_db(f) / 10.0) / ((10 ** 0.05 - 10 ** -0.05) * f)
    return np.where(f > 0, s, 0.0)


def _top(f, top_hz):
    return 1.0 / (1.0 + (np.asarray(f, dtype=float) / top_hz) ** 8)


def _sib_band(f, centre_hz):
    """Power shape of one sibilant: a second-order band-pass response, 1 at ``centre_hz``."""
    f = np.asarray(f, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = _SIB_Q * (f / centre_hz - centre_hz / f)
        return np.where(f > 0, 1.0 / (1.0 + x * x), 0.0)


@dataclass(frozen=True)
class _Event:
    layer: int
    index: int       # the event's own number within its layer (its random stream)
    onset: int       # frame
    length: int      # frames (unclipped: the noise is made for the whole event)
    gain: float      # velocity
    tau: float       # seconds; 0 = no decay (sibilants)
    attack: int      # frames
    release: int     # frames
    span: int        # frames the event would last unchoked: its noise is made this long, so a
                     # choke by a later event (or the clip's end) leaves the earlier samples alone
    centre_hz: float = 0.0

    def energy(self, rate: float) -> float:
        """∫ env² dt in seconds (closed form; the short attack of a decaying event is neglected)."""
        length = self.length / rate
        if self.tau > 0:
            return self.gain ** 2 * self.tau / 2 * (1 - math.exp(-2 * length / self.tau))
        a, r = self.attack / rate, self.release / rate
        # a raised-cosine taper of length a holds ∫(½ - ½cos)² = 3a/8
        return self.gain ** 2 * (length - a - r + 3 * (a + r) / 8)


def _drums_on(seed: int, phrase: int) -> bool:
    """Whether a 4-bar phrase has its hi-hats, kick and snare (the first always does)."""
    return phrase == 0 or _rng(seed, _EVENTS, _PHRASE, phrase).random() >= 0.2


def _bb_events(p: dict, notes: list, frames: int, start_s: float, beat: float) -> list:
    """Hi-hats on an eighth-note grid, kick and snare on the beats, crash cymbals on bar lines,
    sibilants on the lead's notes; each event's random draws come from its own stream."""
    rate = p["rate_hz"]
    seed = p["seed"]
    ev = []
    # hi-hats: a 4-bar phrase either has them or not; each eighth closed, open or silent
    slots = []
    i = 0
    while True:
        onset = int(round((start_s + i * beat / 2) * rate))
        if onset >= frames:
            break
        on = _drums_on(seed, i // 32)
        r = _rng(seed, _EVENTS, _HAT, i)
        u, vel = r.random(), float(r.uniform(0.35, 0.8))
        tau_closed, tau_open = float(r.uniform(0.02, 0.06)), float(r.uniform(0.2, 0.45))
        if on and u < 0.86:
            tau = tau_open if u >= 0.78 else tau_closed
            slots.append((i, onset, min(1.0, vel + (0.2 if i % 2 == 0 else 0.0)), tau))
        i += 1
    for k, (i, onset, vel, tau) in enumerate(slots):
        span = length = int(round(6 * tau * rate))
        if k + 1 < len(slots):
            length = min(length, slots[k + 1][1] - onset)      # the next hat chokes this one
        ev.append(_Event(_HAT, i, onset, length, vel, tau, max(1, int(0.001 * rate)),
                         max(1, int(_CHOKE_SECONDS * rate)), span))
    # crashes: on a bar line (4 beats) with probability 0.25; kick on beats 1 and 3 (sometimes
    # also on the half-beat after 3), snare on 2 and 4, unless the phrase drops its drums
    bars = []
    j = 0
    while True:
        onset = int(round((start_s + 4 * j * beat) * rate))
        if onset >= frames:
            break
        r = _rng(seed, _EVENTS, _CRASH, j)
        if r.random() < 0.25 or j == 0:
            bars.append((j, onset, float(r.uniform(0.6, 1.0)), float(r.uniform(0.7, 1.6))))
        if _drums_on(seed, j // 4):
            r = _rng(seed, _EVENTS, _KICK, j)
            extra = r.random() < 0.3
            for n, (layer, at) in enumerate(((_KICK, 0.0), (_SNARE, 1.0), (_KICK, 2.0), (_KICK, 2.5),
                                             (_SNARE, 3.0))):
                vel, tau = float(r.uniform(0.7, 1.0)), float(r.uniform(0.07, 0.14))
                if at == 2.5 and not extra:
                    continue
                t0 = int(round((start_s + (4 * j + at) * beat) * rate))
                span = int(round(6 * tau * rate))
                if t0 < frames:
                    ev.append(_Event(layer, 8 * j + n, t0, span, vel, tau, max(1, int(0.001 * rate)),
                                     max(1, int(0.01 * rate)), span))
        j += 1
    for k, (j, onset, vel, tau) in enumerate(bars):
        span = length = int(round(5 * tau * rate))
        if k + 1 < len(bars):
            length = min(length, bars[k + 1][1] - onset)        # the next crash cuts this one short
        ev.append(_Event(_CRASH, j, onset, length, vel, tau, max(1, int(0.002 * rate)),
                         max(1, int(_CHOKE_SECONDS * 5 * rate)), span))
    # sibilants: at the onset of some of the lead's notes, shorter than the note
    lead = [n for n in notes if n.voice == len(_BB_VOICES) - 1]
    for k, n in enumerate(lead):
        r = _rng(seed, _EVENTS, _SIB, k)
        if r.random() >= 0.45:
            continue
        length = min(int(r.uniform(0.06, 0.18) * rate), n.length)
        lo, hi = _SIB_CENTRE_HZ
        centre = float(lo * (hi / lo) ** r.random())
        vel = float(r.uniform(0.5, 1.0))
        att, rel = int(0.015 * rate), int(0.025 * rate)
        if length < att + rel + 1:
            continue
        ev.append(_Event(_SIB, k, n.onset, length, vel, 0.0, att, rel, length, centre))
    ev.sort(key=lambda e: (e.onset, e.layer))
    return ev


def saturate(x, knee: float = SATURATION_KNEE, limit: float = PROGRAMME_PEAK) -> np.ndarray:
    """Memoryless soft saturation: linear up to ``knee``, then a tanh approach to ``limit``.

    y = x for |x| <= knee; y = sign(x)·(knee + (limit - knee)·tanh((|x| - knee)/(limit - knee)))
    above, so |y| <= limit always (equal only where tanh rounds to 1, beyond about 19·(limit - knee)
    past the knee) and the slope is continuous (1) at the knee, as a tape's transfer curve bends
    (a shape of our own, not a measured tape).
    """
    x = np.asarray(x, dtype=float)
    a = np.abs(x)
    over = a > knee
    if not over.any():
        return x
    y = x.copy()
    span = limit - knee
    y[over] = np.sign(x[over]) * (knee + span * np.tanh((a[over] - knee) / span))
    return y


class _Broadband:
    """The default programme: voices, drums and sibilants sharing IEC 60268-1's long-term shape.

    Each part is given a share W(f) of the long-term spectrum K·S(f)·R(f), where S is the
    density whose third-octave bands follow Table II, R the medium's roll-off above
    ``programme_top_hz`` and K the level; the shares add to one. Their levels are set from the
    first 240 s of the seed's own schedule (its notes' and events' envelope energies, in
    closed form), which a clip of any length and lead-in shares, so the long-term spectrum
    follows the table for every seed, not only on average.
    """

    def __init__(self, p: dict):
        self.p = p
        self.rate = rate = p["rate_hz"]
        self.top = p["programme_top_hz"]
        frames = int(round(p["seconds"] * rate))
        g = _rng(p["seed"], _GLOBAL)
        g.integers(0, 12)
        self.beat = 60.0 / float(g.uniform(84.0, 126.0))
        cal = dict(p, seconds=_CAL_SECONDS, lead_in_seconds=0.0)
        cal_frames = int(round(_CAL_SECONDS * rate))
        cal_notes = _schedule(cal, _BB_VOICES, absolute=True)
        cal_events = _bb_events(cal, cal_notes, cal_frames, 0.0, self.beat)
        self._calibrate(cal_notes, cal_events)
        self.notes = _schedule(p, _BB_VOICES, absolute=True)
        self.events = _bb_events(p, self.notes, frames, p["lead_in_seconds"], self.beat)
        self.next_note = self.next_event = 0
        self.active: list = []
        self.active_events: list = []
        self.noise: dict = {}
        self.tables: dict = {}
        g = _pan_gains(p["channels"], p["seed"], len(_BB_VOICES) + len(_LAYER_NAMES))
        g[len(_BB_VOICES) + _KICK] = g[len(_BB_VOICES) + _SNARE] = math.sqrt(1.0 / p["channels"])  # centred
        # unit mean power per channel: the level K is then every channel's, whatever their number
        self.gains = g * math.sqrt(p["channels"])
        self._set_level()

    # -- levels ------------------------------------------------------------------------
    def _calibrate(self, notes, events):
        rate, t_cal = self.rate, _CAL_SECONDS
        # Tonal: a harmonic at f of a note at f0 stands for the band (k ± ½)·f0, so a note covers
        # f >= f0/2; D(f) = Σ_notes [f >= f0/2]·v²·E_note(b(f)) / T is what a density c(f)·f0 per
        # harmonic (a_k² / 2 = c·f0) turns into long-term power: PSD = c(f)·D(f).
        f0 = np.array([_midi_hz(n.midi) for n in notes])
        v2 = np.array([n.gain ** 2 for n in notes])
        taus = np.array([n.tau for n in notes])
        secs = np.array([n.length / rate for n in notes])
        order = np.argsort(f0)
        self._cal_f0 = f0[order] / 2
        parts = []
        for div in (1.0, 3.0, 5.0):
            t = taus[order] / div
            parts.append(np.cumsum(v2[order] * t / 2 * (1 - np.exp(-2 * secs[order] / t))) / t_cal)
        self._cal_parts = parts
        # Noise layers: long-term PSD = γ·K·S·R·shape·Σ_e ∫env² / T, so γ = T / Σ_e ∫env².
        f = np.geomspace(20.0, rate / 2, 2000)
        self._layer_gamma = [0.0] * len(_LAYER_NAMES)
        for layer in (_HAT, _CRASH, _KICK, _SNARE):
            e = sum(ev.energy(rate) for ev in events if ev.layer == layer)
            self._layer_gamma[layer] = t_cal / e
        q = np.zeros_like(f)
        for ev in events:
            if ev.layer == _SIB:
                q += ev.energy(rate) * _sib_band(f, ev.centre_hz)
        q /= t_cal
        # Sibilance: the layer's long-term shape is γ·Q(f) with Q = Σ_e ∫env²·B_e(f) / T; γ puts
        # its peak at the sibilance share.
        self._layer_gamma[_SIB] = _SIB_SHARE / float(q.max())
        self._sib_q = (f, q)

    def _coverage(self, f):
        """D(f) of the calibration notes (see _calibrate)."""
        k = np.searchsorted(self._cal_f0, np.asarray(f, dtype=float), side="right") - 1
        b = _bright(f)
        ok = k >= 0
        a1, a3, a5 = (part[np.maximum(k, 0)] for part in self._cal_parts)
        d = (1 - b) ** 2 * a1 + 2 * b * (1 - b) * a3 + b * b * a5
        return np.where(ok, d, 0.0)

    def share(self, f, layer: str):
        """The share W(f) of the long-term spectrum given to ``layer`` (module notes)."""
        f = np.asarray(f, dtype=float)
        treble = (f / _TREBLE_HZ) ** 2 / (1 + (f / _TREBLE_HZ) ** 2)
        if layer == "sib":
            return self._layer_gamma[_SIB] * np.interp(f, *self._sib_q, left=0.0, right=0.0)
        if layer in ("hat", "crash"):
            wx = np.maximum(treble - self.share(f, "sib"), 0.0)
            h = (f / _HAT_SPLIT_HZ) ** 2 / (1 + (f / _HAT_SPLIT_HZ) ** 2)
            return wx * h if layer == "hat" else wx * (1 - h)
        if layer == "kick":
            return _KICK_SHARE / (1 + (f / _KICK_HZ) ** 4)
        if layer == "snare":
            return (_SNARE_SHARE * (f / _SNARE_HZ[0]) ** 2 / (1 + (f / _SNARE_HZ[0]) ** 2)
                    / (1 + (f / _SNARE_HZ[1]) ** 2))
        if layer == "tonal":
            rest = 1.0 - treble - self.share(f, "kick") - self.share(f, "snare")
            hp = (f / _TONAL_HIGHPASS_HZ) ** 4 / (1.0 + (f / _TONAL_HIGHPASS_HZ) ** 4)
            return np.maximum(rest, 0.0) * hp
        raise ValueError(layer)

    def target_psd(self, f):
        """Expected long-term power per hertz, per channel, of the programme (after the lead-in)."""
        f = np.asarray(f, dtype=float)
        w = sum(self.share(f, k) for k in ("tonal",) + _LAYER_NAMES)
        return self.level * _iec_psd(f) * _top(f, self.top) * w

    def _set_level(self):
        nyq = self.rate / 2
        f = np.linspace(0.0, nyq, 1 << 16)
        self.level = 1.0
        power = float(np.sum(self.target_psd(f)) * (f[1] - f[0]))
        self.level = 10 ** (BROADBAND_RMS_DBFS / 10) / power

    def _event_psd(self, layer: int, f, centre_hz: float = 0.0):
        base = self.level * _iec_psd(f) * _top(f, self.top) * self._layer_gamma[layer]
        if layer == _SIB:
            return base * _sib_band(f, centre_hz)
        return base * self.share(f, _LAYER_NAMES[layer])

    # -- tonal voices ------------------------------------------------------------------
    def _table(self, key):
        if key not in self.tables:
            v, m = key
            f0 = _midi_hz(m)
            k = np.arange(1, max(1, int(0.475 * self.rate / f0)) + 1, dtype=float)
            f = k * f0
            f = f[f < 0.475 * self.rate]
            d = self._coverage(f)
            with np.errstate(divide="ignore", invalid="ignore"):
                c = np.where(d > 0, self.level * _iec_psd(f) * _top(f, self.top) * self.share(f, "tonal") / d, 0.0)
            a = np.sqrt(2 * c * f0)
            bright = _bright(f)
            phases = _rng(self.p["seed"], _PHASES, v, m).uniform(0, 2 * np.pi, len(a))
            out = []
            for w in (a * (1 - bright), a * bright):
                spec = np.zeros(TABLE_SIZE // 2 + 1, dtype=complex)
                spec[1:len(a) + 1] = -0.5j * TABLE_SIZE * w * np.exp(1j * phases)
                t = np.fft.irfft(spec, TABLE_SIZE)
                out.append(np.append(t, t[0]))
            bound = float(np.max(np.abs(out[0])) + np.max(np.abs(out[1])))
            self.tables[key] = (out[0], out[1], bound)
        return self.tables[key]

    # -- noise events ------------------------------------------------------------------
    def _event_noise(self, e: _Event) -> np.ndarray:
        """The event's Gaussian noise, made in the frequency domain with the event's exact PSD.

        Complex Gaussian bins of variance P(f)·rate·n/2 (P one-sided, per hertz) give, through the
        inverse real FFT, a circular stationary process of variance ∫P df.
        """
        from scipy.fft import irfft, next_fast_len

        n = next_fast_len(e.span, real=True)
        f = np.fft.rfftfreq(n, 1.0 / self.rate)
        psd = self._event_psd(e.layer, f, e.centre_hz)
        psd[0] = 0.0
        r = _rng(self.p["seed"], _EVENTS, 10 + e.layer, e.index)
        z = r.standard_normal((2, f.size))
        spec = np.sqrt(psd * self.rate * n / 4) * (z[0] + 1j * z[1])
        return irfft(spec, n)[:e.length]

    def _render_event(self, e: _Event, i0: int, i1: int) -> np.ndarray:
        if e.index not in self.noise.get(e.layer, {}):
            self.noise.setdefault(e.layer, {})[e.index] = self._event_noise(e)
        x = self.noise[e.layer][e.index][i0:i1]
        i = np.arange(i0, i1)
        env = np.full(i.size, e.gain)
        if e.tau > 0:
            env *= np.exp(-i / self.rate / e.tau)
        a = i < e.attack
        env[a] *= 0.5 - 0.5 * np.cos(np.pi * i[a] / e.attack)
        r0 = e.length - e.release
        r = i >= r0
        env[r] *= 0.5 + 0.5 * np.cos(np.pi * (i[r] - r0) / e.release)
        return x * env

    def chunk(self, start: int, n: int) -> np.ndarray:
        stop = start + n
        src = np.zeros((len(_BB_VOICES) + len(_LAYER_NAMES), n))
        while self.next_note < len(self.notes) and self.notes[self.next_note].onset < stop:
            self.active.append(self.notes[self.next_note])
            self.next_note += 1
        still = []
        for note in self.active:
            lo, hi = max(start, note.onset), min(stop, note.onset + note.length)
            if hi > lo:
                src[note.voice, lo - start:hi - start] += _render_note(self, note, lo - note.onset, hi - note.onset,
                                                                       normalise=False)
            if note.onset + note.length > stop:
                still.append(note)
        self.active = still
        while self.next_event < len(self.events) and self.events[self.next_event].onset < stop:
            self.active_events.append(self.events[self.next_event])
            self.next_event += 1
        still = []
        for e in self.active_events:
            lo, hi = max(start, e.onset), min(stop, e.onset + e.length)
            if hi > lo:
                src[len(_BB_VOICES) + e.layer, lo - start:hi - start] += self._render_event(e, lo - e.onset,
                                                                                          hi - e.onset)
            if e.onset + e.length > stop:
                still.append(e)
            else:
                self.noise.get(e.layer, {}).pop(e.index, None)
        self.active_events = still
        return saturate(src.T @ self.gains)


# ---------------------------------------------------------------------------
# Public entry points
# ---------------------------------------------------------------------------


def synth_blocks(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
                 lead_in_seconds=1.0, seed=0, programme_top_hz=None,
                 programme=DEFAULT_PROGRAMME) -> Iterator[ClipBlock]:
    """Yield the clip in chunks of :data:`CHUNK_FRAMES` frames (flat memory for long clips).

    The parameters are those of :func:`synthesise`, checked before the first
    chunk. Concatenating the chunks gives :func:`synthesise`'s arrays exactly.
    """
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz, programme)
    return _blocks(p)


def _blocks(p: dict) -> Iterator[ClipBlock]:
    frames = int(round(p["seconds"] * p["rate_hz"]))
    noise = _Hiss(p)
    prog = _Programme(p) if p.get("programme", DEFAULT_PROGRAMME) == "dark" else _Broadband(p)
    for index, start in enumerate(range(0, frames, CHUNK_FRAMES)):
        n = min(CHUNK_FRAMES, frames - start)
        x, h = prog.chunk(start, n), noise.chunk(index, n)
        yield ClipBlock(start, x + h, x, h)


def synthesise(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
               lead_in_seconds=1.0, seed=0, programme_top_hz=None, programme=DEFAULT_PROGRAMME) -> Clip:
    """Synthesise a programme-plus-hiss clip with its truth (in memory).

    Parameters
    ----------
    seconds : float
        Length, 0 < seconds <= 86400.
    rate_hz : int
        Sample rate, 8000 .. 768000 Hz.
    channels : int
        1 .. 32; hiss independent per channel, programme partly panned.
    hiss_dbfs : float
        Expected hiss RMS per channel, dBFS as 20·log10(rms), -140 .. -30.
    hiss : {"white", "pink", "tape"}
        Colour of the hiss (see the module notes).
    lead_in_seconds : float
        Hiss alone before the programme (0 <= lead-in < seconds).
    seed : int
        Seed of every random choice; the same arguments give the same bytes.
    programme_top_hz : float or None
        Where the programme begins to roll off at 24 dB/octave (50 Hz .. Nyquist); None
        takes the programme's default (broadband: min(16000, 0.45·rate); dark: 5000).
    programme : {"broadband", "dark"}
        ``"broadband"`` (default): voices, hi-hats, crash cymbals and sibilants whose long-term
        spectrum follows IEC 60268-1's simulated programme signal; ``"dark"``: the four voices
        alone, rolling off above ``programme_top_hz`` (the former default).

    Returns
    -------
    Clip
        ``mix = programme + hiss``, each (frames, channels) float64.

    Raises
    ------
    BadParameter
        Any argument outside its range (the message names it and the range).

    Notes
    -----
    Memory is three arrays of the clip; for long clips use :func:`synth_blocks`.
    """
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz, programme)
    frames = int(round(p["seconds"] * p["rate_hz"]))
    arrays = [np.empty((frames, p["channels"])) for _ in range(3)]
    for b in _blocks(p):
        for a, x in zip(arrays, (b.mix, b.programme, b.hiss)):
            a[b.start_frame:b.start_frame + len(x)] = x
    for a in arrays:
        a.setflags(write=False)
    return Clip(*arrays, rate_hz=p["rate_hz"], seconds=p["seconds"], channels=p["channels"],
                hiss_dbfs=p["hiss_dbfs"], hiss_colour=p["hiss"], lead_in_seconds=p["lead_in_seconds"],
                seed=p["seed"], programme_top_hz=p["programme_top_hz"], programme_kind=p["programme"])
