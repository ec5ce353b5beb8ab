"""Two small helpers the rooms share: a response in dB and the frequency where a level is crossed."""

from __future__ import annotations

import numpy as np


def _db(h) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h))


def _crossing_hz(level_fn, level_db: float, f_lo: float, f_hi: float) -> float | None:
    """The highest frequency in [f_lo, f_hi] where level_fn(f) >= level_db (bracketed, then brentq)."""
    f = np.geomspace(f_lo, f_hi, 3000)
    above = level_fn(f) >= level_db - 1e-12
    if not above.any() or above[-1]:
        return None
    i = int(np.nonzero(above)[0][-1])
    from scipy.optimize import brentq

    return float(brentq(lambda x: float(level_fn(x)) - level_db, f[i], f[i + 1], xtol=1e-9 * f[i]))
