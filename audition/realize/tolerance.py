"""Tolerance: the spread of a realisation's figures over its parts' tolerances (Monte Carlo)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter
from audition.realize._numeric import _db
from audition.realize.stages import ANALOG_BAND_HZ, Realisation, lowpass_response

#: Tolerance classes summarised side by side (the usual classes of resistors and capacitors).
TOLERANCE_CLASSES_PCT = (1.0, 2.0, 5.0, 10.0)


@dataclass(frozen=True)
class Tolerance:
    """A Monte Carlo of a realisation over its parts' tolerances.

    Each part is multiplied by 1 + t·u with u uniform on [-1, 1] and t the
    tolerance of its kind (resistors and capacitors ``tolerance_pct``, inductors
    ``inductor_tolerance_pct``); every part of every trial is drawn independently
    from one seeded generator. Uniform within the tolerance is an assumption
    (common practice, no source): real batches are often binned or skewed, so
    the percentiles describe this model, not a guarantee. Source and load are
    taken as exact.

    Attributes
    ----------
    f0_hz, q, h0 : ndarray (trials, stages)
        Per-trial figures of each stage (q NaN for first-order stages).
    max_deviation_db : ndarray (trials,)
        Largest |real - target| magnitude difference over 20 Hz .. 20 kHz, dB.
    """

    realisation: Realisation
    tolerance_pct: float
    inductor_tolerance_pct: float
    trials: int
    seed: int
    f0_hz: np.ndarray = field(repr=False, compare=False)
    q: np.ndarray = field(repr=False, compare=False)
    h0: np.ndarray = field(repr=False, compare=False)
    max_deviation_db: np.ndarray = field(repr=False, compare=False)

    def responses(self, f_hz) -> np.ndarray:
        """Complex responses, shape (trials, len(f_hz))."""
        f = np.asarray(f_hz, dtype=float)[None, :]
        h = np.ones((self.trials, f.shape[1]), dtype=complex)
        for j, st in enumerate(self.realisation.stages):
            q = None if st.target.q is None else self.q[:, j:j + 1]
            h = h * lowpass_response(f, self.f0_hz[:, j:j + 1], q, self.h0[:, j:j + 1])
        return h

    def band_db(self, f_hz, percentiles=(5.0, 50.0, 95.0)) -> np.ndarray:
        """Percentiles of the magnitude in dB at each frequency, shape (len(percentiles), len(f_hz))."""
        return np.percentile(_db(self.responses(f_hz)), percentiles, axis=0)

    def to_dict(self) -> dict:
        def pct(x):
            x = x[np.isfinite(x)]
            if x.size == 0:
                return None
            p5, p50, p95 = np.percentile(x, [5, 50, 95])
            return {"p5": float(p5), "p50": float(p50), "p95": float(p95)}

        stages = []
        for j, st in enumerate(self.realisation.stages):
            stages.append({"index": j + 1, "f0_hz": pct(self.f0_hz[:, j]),
                           "q": None if st.target.q is None else pct(self.q[:, j]),
                           "h0_db": pct(20 * np.log10(self.h0[:, j]))})
        return {"distribution": "uniform within the tolerance", "tolerance_pct": self.tolerance_pct,
                "inductor_tolerance_pct": self.inductor_tolerance_pct, "trials": self.trials, "seed": self.seed,
                "stages": stages, "max_deviation_db": pct(self.max_deviation_db),
                "deviation_band_hz": list(ANALOG_BAND_HZ)}


def monte_carlo(realisation: Realisation, *, tolerance_pct: float = 5.0, inductor_tolerance_pct: float = 10.0,
                trials: int = 2000, seed: int = 0) -> Tolerance:
    """Spread of f0, Q and H0 per stage, and of the deviation from the target, over part tolerances.

    Parameters
    ----------
    realisation : Realisation
    tolerance_pct : float
        Tolerance of resistors and capacitors, percent (0 <= t < 50), e.g. 1, 2, 5, 10.
    inductor_tolerance_pct : float
        Tolerance of inductors, percent.
    trials : int
        Number of simulated builds, 1 .. 200000.
    seed : int
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same figures.
    """
    for name, v in (("tolerance-pct", tolerance_pct), ("inductor-tolerance-pct", inductor_tolerance_pct)):
        if not (isinstance(v, (int, float)) and 0.0 <= v < 50.0):
            raise BadParameter(f"{name}={v!r}: a tolerance must satisfy 0 <= t < 50 (percent)")
    if not (isinstance(trials, int) and 1 <= trials <= 200000):
        raise BadParameter(f"trials={trials!r}: must be an integer from 1 to 200000")
    if not (isinstance(seed, int) and seed >= 0):
        raise BadParameter(f"seed={seed!r}: must be a non-negative integer")
    rng = np.random.default_rng(seed)
    n = len(realisation.stages)
    f0 = np.empty((trials, n))
    q = np.full((trials, n), np.nan)
    h0 = np.empty((trials, n))
    for j, st in enumerate(realisation.stages):
        parts = {}
        for k, v in st.parts.items():
            t = (inductor_tolerance_pct if k.endswith("_henry") else tolerance_pct) / 100.0
            parts[k] = v * (1.0 + t * rng.uniform(-1.0, 1.0, trials))
        a, b, c = st.figures(parts)
        f0[:, j] = a
        h0[:, j] = c
        if b is not None:
            q[:, j] = b
    tol = Tolerance(realisation, float(tolerance_pct), float(inductor_tolerance_pct), trials, seed, f0, q, h0,
                    np.zeros(trials))
    f = np.geomspace(ANALOG_BAND_HZ[0], ANALOG_BAND_HZ[1], 400)
    dev = _db(tol.responses(f)) - _db(realisation.target_response(f))[None, :]
    object.__setattr__(tol, "max_deviation_db", np.max(np.abs(dev), axis=1))
    return tol


def tolerance_classes(realisation: Realisation, *, classes_pct=TOLERANCE_CLASSES_PCT,
                      inductor_tolerance_pct: float = 10.0, trials: int = 2000, seed: int = 0) -> list[dict]:
    """The Monte Carlo of :func:`monte_carlo` repeated for each resistor/capacitor tolerance class.

    Every class uses the same seed, so the builds differ only by the width of
    the tolerance (common random numbers): the classes compare like with like.
    The inductors keep ``inductor_tolerance_pct`` throughout, which shows when
    they, not the resistors and capacitors, set the spread.

    Returns
    -------
    list of dict
        One per class: ``tolerance_pct``; ``stages``, each with the 5th and 95th
        percentiles of f0 and Q as percent errors against the stage's target
        (``q_pct`` None for first order); ``max_deviation_db``, the 50th and 95th
        percentiles of the worst |real - target| over 20 Hz .. 20 kHz.
    """
    out = []
    for t in classes_pct:
        tol = monte_carlo(realisation, tolerance_pct=float(t), inductor_tolerance_pct=inductor_tolerance_pct,
                          trials=trials, seed=seed)
        stages = []
        for j, st in enumerate(realisation.stages):
            f5, f95 = np.percentile(tol.f0_hz[:, j], [5, 95]) / st.target.f0_hz * 100.0 - 100.0
            row = {"index": j + 1, "f0_pct": {"p5": float(f5), "p95": float(f95)}, "q_pct": None}
            if st.target.q is not None:
                q5, q95 = np.percentile(tol.q[:, j], [5, 95]) / st.target.q * 100.0 - 100.0
                row["q_pct"] = {"p5": float(q5), "p95": float(q95)}
            stages.append(row)
        d50, d95 = np.percentile(tol.max_deviation_db, [50, 95])
        out.append({"tolerance_pct": float(t), "inductor_tolerance_pct": float(inductor_tolerance_pct),
                    "stages": stages, "max_deviation_db": {"p50": float(d50), "p95": float(d95)}})
    return out
