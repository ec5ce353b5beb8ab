"""The dark programme (``--programme dark``): harmonic voices rolled off above a top frequency."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.synth.params import SCALE, TABLE_SIZE, _GLOBAL, _PHASES, _SCHEDULE, _rng


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


def voice_tables(a: np.ndarray, bright: np.ndarray, phases: np.ndarray):
    """One period of a voice's harmonics ``a`` split into a dull and a bright wavetable, and their peak bound.

    Returns ``(dull, bright, bound)``: tables of TABLE_SIZE + 1 samples (the first repeated at the end,
    for interpolation) and the sum of their peaks.
    """
    out = []
    for w in (a * (1 - bright), a * bright):
        spec = np.zeros(TABLE_SIZE // 2 + 1, dtype=complex)
        # sin(2πkθ + φ) has rfft coefficient -j·(M/2)·e^{jφ} at bin k.
        spec[1:len(a) + 1] = -0.5j * TABLE_SIZE * w * np.exp(1j * phases)
        t = np.fft.irfft(spec, TABLE_SIZE)
        out.append(np.append(t, t[0]))
    return out[0], out[1], float(np.max(np.abs(out[0])) + np.max(np.abs(out[1])))


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
            self.tables[key] = voice_tables(a, bright, phases)
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
