"""Parameters of a synthesised clip, their checks, the clip objects and the seeded streams."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from audition.errors import BadParameter


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


def _rng(seed: int, *key: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=tuple(key)))


#: Where the broadband programme's medium rolls off (24 dB/octave) unless --programme-top says otherwise.
BROADBAND_TOP_HZ = 16000.0
