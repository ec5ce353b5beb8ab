"""Checks of design parameters: messages say what is allowed and why."""

from __future__ import annotations

import math

from audition.errors import BadParameter

ALIGNMENTS = ("butterworth", "bessel", "linkwitz-riley", "chebyshev")
METHODS = ("bilinear", "matched")
KINDS = ("lowpass", "highpass")
MIN_RATE_HZ = 8000.0
#: Highest sample rate accepted, Hz: 768 kHz, the highest rate of common converters (common practice, no source).
MAX_RATE_HZ = 768000.0
#: Passband gain accepted, +-dB: 60 dB either way is far beyond any level trim (1000x in amplitude);
#: more only overflows or renders silence (our own choice).
MAX_GAIN_DB = 60.0
#: Smallest Q of a second-order section: below 0.1 its two real poles lie about 100:1 apart, and
#: far below it the matched method's exp() overflows (our own choice).
MIN_Q = 0.1
#: Largest Q of a second-order section.
MAX_Q = 100.0
#: Largest passband ripple of a Chebyshev (type I) alignment, dB: more is a resonance, not a hiss filter.
MAX_RIPPLE_DB = 3.0
#: Q of the second-order Butterworth section, 1/sqrt(2).
BUTTERWORTH_Q = 1.0 / math.sqrt(2.0)


def check_rate(rate_hz: float) -> float:
    if not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz >= MIN_RATE_HZ):
        raise BadParameter(f"rate={rate_hz!r}: the sample rate must be at least {MIN_RATE_HZ:.0f} Hz")
    if rate_hz > MAX_RATE_HZ:
        raise BadParameter(f"rate={rate_hz!r}: the sample rate must be at most {MAX_RATE_HZ:.0f} Hz")
    return float(rate_hz)


def check_gain(gain_db: float, name: str = "gain-db") -> float:
    """A passband gain in dB: finite, within +-MAX_GAIN_DB."""
    if not (isinstance(gain_db, (int, float)) and not isinstance(gain_db, bool) and math.isfinite(gain_db)
            and abs(gain_db) <= MAX_GAIN_DB):
        raise BadParameter(f"{name}={gain_db!r} dB: a passband gain must lie within +-{MAX_GAIN_DB:g} dB")
    return float(gain_db)


def check_f0(f0_hz: float, rate_hz: float, name: str = "f0") -> float:
    nyq = rate_hz / 2.0
    if not (isinstance(f0_hz, (int, float)) and math.isfinite(f0_hz) and 0.0 < f0_hz < nyq):
        if not (isinstance(f0_hz, (int, float)) and math.isfinite(f0_hz)):
            why = "a frequency must be a finite number"
        elif f0_hz <= 0.0:
            why = "a frequency must be above 0 Hz"
        else:
            why = "a cutoff at or above Nyquist means nothing"
        raise BadParameter(f"{name}={f0_hz!r} Hz: must satisfy 0 < {name} < rate/2 (rate={rate_hz:g} -> {nyq:g} Hz); "
                           f"{why}")
    return float(f0_hz)


def check_q(q: float) -> float:
    if not (isinstance(q, (int, float)) and math.isfinite(q) and MIN_Q <= q <= MAX_Q):
        raise BadParameter(f"q={q!r}: Q must satisfy {MIN_Q:g} <= Q <= {MAX_Q:g}")
    return float(q)


def check_order(order: int) -> int:
    if not (isinstance(order, int) and 1 <= order <= 12):
        raise BadParameter(f"order={order!r}: the order must be an integer from 1 to 12")
    return order


def check_alignment(alignment: str) -> str:
    if alignment not in ALIGNMENTS:
        raise BadParameter(f"alignment={alignment!r}: allowed are {', '.join(ALIGNMENTS)}")
    return alignment


def check_method(method: str) -> str:
    if method not in METHODS:
        raise BadParameter(f"method={method!r}: allowed are {', '.join(METHODS)}")
    return method


def check_ripple(ripple_db) -> float:
    if not (isinstance(ripple_db, (int, float)) and math.isfinite(ripple_db) and 0.0 < ripple_db <= MAX_RIPPLE_DB):
        raise BadParameter(f"ripple-db={ripple_db!r}: a Chebyshev passband ripple must satisfy "
                           f"0 < ripple <= {MAX_RIPPLE_DB:g} dB")
    return float(ripple_db)
