"""The broadband programme (the default): the IEC 60268-1 long-term spectrum, with transient treble."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.synth.params import PROGRAMME_PEAK, _EVENTS, _GLOBAL, _PHASES, _rng
from audition.synth.dark import _Voice, _bright, _midi_hz, _pan_gains, _render_note, _schedule, voice_tables


# ---------------------------------------------------------------------------
# Broadband programme (the default)
# ---------------------------------------------------------------------------

#: IEC 60268-1:1985 clause 7, Table II: relative levels (dB) of the one-third-octave bands of the
#: simulated programme signal, 20 Hz .. 20 kHz (the bands' exact centres are the base-10 ones of
#: IEC 61260-1, 1000·10^(n/10), n = -17 .. 13). Not read from the printed standard: taken from a
#: secondary copy (an open-source acoustics library's table), agreeing with what we
#: recall of its shape (flat 250-800 Hz, about -12 dB at 10 kHz); tolerances there ±0.5 dB in
#: the middle, ±1 dB from 31.5 Hz to 10 kHz, ±1.5 .. ±3 dB at the ends.
IEC60268_1_TABLE_DB = (-13.5, -10.2, -7.4, -5.2, -3.5, -2.3, -1.4, -0.9, -0.5, -0.2, -0.1, 0.0, 0.0, 0.0, 0.0, 0.0,
                       0.0, -0.1, -0.3, -0.6, -1.0, -1.6, -2.5, -3.7, -5.1, -7.0, -9.4, -11.9, -14.8, -18.2, -21.6)
#: Exact base-10 one-third-octave centres the table is given at (IEC 61260-1:2014, 20 Hz .. 20 kHz).
IEC60268_1_CENTRES_HZ = tuple(1000.0 * 10.0 ** (n / 10.0) for n in range(-17, 14))
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
            self.tables[key] = voice_tables(a, bright, phases)
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
