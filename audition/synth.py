"""Test clips with known truth: a synthetic programme plus hiss of stated colour and level.

Every measurement the survey makes can be checked against this module's stems:
the mix is exactly ``programme + hiss``, both returned (and written) apart.
The scenario is our own, deterministic for a seed:

Programme
    A small ensemble of four monophonic voices (bass, tenor, alto, lead) playing
    notes of a major scale with a random root, moving by small steps, with
    occasional rests, after a silent lead-in. Each note is a sum of harmonics
    k·f0 with amplitudes

    .. math:: a_k = k^{-t}\\;\\frac{1}{\\sqrt{1 + (k f_0 / f_{top})^{8}}}

    a tilt of t·6.02 dB per octave of harmonic number (t ≈ 1, like a sawtooth,
    per voice between 0.9 and 1.2) times a fourth-order Butterworth-shaped
    roll-off above ``programme_top_hz`` (24 dB per octave), so the programme
    sinks into the hiss above a few kHz as on a worn transfer. Harmonics stop
    below 0.475·rate (no aliasing). Envelopes: raised-cosine attack of 6..30 ms,
    exponential decay (time constant 0.25..1.2 s), raised-cosine release; the
    part of each harmonic above about 1.5 kHz, weighted by f²/(f² + 1500²),
    decays four times faster, as the treble of a struck or plucked string does.
    Voices are panned partly: 35 % of each voice's power is shared by all
    channels, the rest amplitude-panned (constant power) between the two nearest
    channels. Each voice peaks at most at its own amplitude and the amplitudes
    sum to 0.7, so the programme's sample peak is at most -3.10 dBFS by
    construction, whatever the seed (typically it peaks near -11 dBFS with an
    RMS near -27 dBFS, like a transfer recorded with headroom).

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
list, each pitch's harmonic phases and each chunk of noise have their own
random stream (``numpy.random.SeedSequence(seed, spawn_key=...)``, PCG64), so
:func:`synth_blocks` (flat memory, for hour-long files) and :func:`synthesise`
(the concatenation) give the same bytes, and a longer clip starts with the
shorter one's programme.

Levels: the hiss is at most -30 dBFS, so with the programme's 0.7 peak bound
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
_SCHEDULE, _PHASES, _HISS, _PREROLL, _GLOBAL = range(5)


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
        Where the programme's harmonics start to roll off at 24 dB per octave.
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

    @property
    def frames(self) -> int:
        return int(self.mix.shape[0])

    def params(self) -> dict:
        """The parameters as a JSON-ready dict (units in the keys)."""
        return {"seconds": self.seconds, "rate_hz": self.rate_hz, "channels": self.channels,
                "hiss_dbfs": self.hiss_dbfs, "hiss": self.hiss_colour, "lead_in_seconds": self.lead_in_seconds,
                "seed": self.seed, "programme_top_hz": self.programme_top_hz}


class ClipBlock(NamedTuple):
    """One chunk of :func:`synth_blocks`: frames ``start_frame .. start_frame + len(mix)``."""

    start_frame: int
    mix: np.ndarray
    programme: np.ndarray
    hiss: np.ndarray


def _is_number(x) -> bool:
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool) and math.isfinite(x)


def check_params(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
                 lead_in_seconds=1.0, seed=0, programme_top_hz=DEFAULT_TOP_HZ) -> dict:
    """Validate the synthesis parameters; return them normalised (floats, ints).

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
    nyq = rate_hz / 2
    if not _is_number(programme_top_hz) or not 50.0 <= programme_top_hz < nyq:
        raise BadParameter(f"programme-top={programme_top_hz!r} Hz: must satisfy 50 <= top < rate/2 "
                           f"(rate={rate_hz:g} -> {nyq:g} Hz)")
    return {"seconds": float(seconds), "rate_hz": rate_hz, "channels": int(channels), "hiss_dbfs": float(hiss_dbfs),
            "hiss": hiss, "lead_in_seconds": float(lead_in_seconds), "seed": int(seed),
            "programme_top_hz": float(programme_top_hz)}


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


def _schedule(p: dict) -> list:
    """Every note of every voice (monophonic: a voice's notes never overlap)."""
    rate, frames = p["rate_hz"], int(round(p["seconds"] * p["rate_hz"]))
    g = _rng(p["seed"], _GLOBAL)
    root = int(g.integers(0, 12))
    bpm = float(g.uniform(84.0, 126.0))
    beat = 60.0 / bpm
    pitches = {m for m in range(0, 128) if (m - root) % 12 in SCALE}
    notes = []
    for v, voice in enumerate(_VOICES):
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
            notes.append(_Note(v, m, onset, length, voice.amplitude * velocity, phase0,
                               max(1, int(attack * rate)), max(1, min(int(_RELEASE_SECONDS * rate), length // 3)),
                               tau, table_key))
    notes.sort(key=lambda n: n.onset)
    return notes


def harmonic_amplitudes(f0_hz: float, rate_hz: float, top_hz: float, tilt: float = 1.0) -> np.ndarray:
    """a_k = k^-tilt / sqrt(1 + (k f0/top)^8) for k = 1 .. K with K·f0 < 0.475·rate."""
    k = np.arange(1, max(1, int(0.475 * rate_hz / f0_hz)) + 1, dtype=float)
    k = k[k * f0_hz < 0.475 * rate_hz]
    return k ** -tilt / np.sqrt(1.0 + (k * f0_hz / top_hz) ** 8)


class _Programme:
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
        body, bright, bound = self._table(note.key)
        i = np.arange(i0, i1)
        t = i / self.rate
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
        return x * env * (note.gain / bound)


def _pan_gains(channels: int, seed: int) -> np.ndarray:
    """(voices, channels) amplitude gains: constant total power 1 per voice, each gain <= 1."""
    g = np.ones((len(_VOICES), channels))
    if channels == 1:
        return g
    r = _rng(seed, _GLOBAL, 1)
    for v in range(len(_VOICES)):
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
# Public entry points
# ---------------------------------------------------------------------------


def synth_blocks(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
                 lead_in_seconds=1.0, seed=0, programme_top_hz=DEFAULT_TOP_HZ) -> Iterator[ClipBlock]:
    """Yield the clip in chunks of :data:`CHUNK_FRAMES` frames (flat memory for long clips).

    The parameters are those of :func:`synthesise`, checked before the first
    chunk. Concatenating the chunks gives :func:`synthesise`'s arrays exactly.
    """
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz)
    return _blocks(p)


def _blocks(p: dict) -> Iterator[ClipBlock]:
    frames = int(round(p["seconds"] * p["rate_hz"]))
    noise, prog = _Hiss(p), _Programme(p)
    for index, start in enumerate(range(0, frames, CHUNK_FRAMES)):
        n = min(CHUNK_FRAMES, frames - start)
        x, h = prog.chunk(start, n), noise.chunk(index, n)
        yield ClipBlock(start, x + h, x, h)


def synthesise(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
               lead_in_seconds=1.0, seed=0, programme_top_hz=DEFAULT_TOP_HZ) -> Clip:
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
    programme_top_hz : float
        Where the programme's harmonics begin to roll off at 24 dB/octave
        (50 Hz .. Nyquist; default 5000).

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
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz)
    frames = int(round(p["seconds"] * p["rate_hz"]))
    arrays = [np.empty((frames, p["channels"])) for _ in range(3)]
    for b in _blocks(p):
        for a, x in zip(arrays, (b.mix, b.programme, b.hiss)):
            a[b.start_frame:b.start_frame + len(x)] = x
    for a in arrays:
        a.setflags(write=False)
    return Clip(*arrays, rate_hz=p["rate_hz"], seconds=p["seconds"], channels=p["channels"],
                hiss_dbfs=p["hiss_dbfs"], hiss_colour=p["hiss"], lead_in_seconds=p["lead_in_seconds"],
                seed=p["seed"], programme_top_hz=p["programme_top_hz"])
