"""The hiss: white, pink and tape-like colours, each a seeded stream."""

from __future__ import annotations

import math

import numpy as np

from audition.errors import BadParameter
from audition.synth.params import HISS_COLOURS, PINK_HIGHPASS_HZ, TAPE_SHELF_HZ, _HISS, _PREROLL, _rng


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
