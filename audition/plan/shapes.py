"""The planner's search space: filter shapes, each slid along a grid of cutoffs.

A *shape* is a low-pass cascade normalised to its design frequency f0: a list of
sections ``(f0 factor, Q)`` (Q ``None`` for a first-order section). Sliding a shape
along f0 gives the candidates. The search covers orders 1 to 8:

* order 1; order 2 with Q from well damped (0.5) to a mild presence lift (1.2);
* the Butterworth, Bessel, Linkwitz–Riley (even orders) and Chebyshev type I
  (passband ripple 0.1 … 0.5 dB) alignments of orders 3 to 8;
* free cascades: two second-order sections at one f0 with any pair of Qs from
  0.5 to 2.0, and a first-order section with a second-order one.

Every candidate is later held to the resonant-peak limit, so peaky shapes drop out
by their own figures rather than by a rule written here.

Why the power response is cheap here
------------------------------------
An alignment is digitised by the bilinear transform prewarped as a whole at its f0
(:func:`audition.design.digitise` with ``warp_hz``), and a cascade at one f0 is the
same either way. The digital response at f is then the analog prototype's at the
warped, normalised frequency

.. math:: x = \\tan(\\pi f / f_s) / \\tan(\\pi f_0 / f_s)

so a second-order section of factor r and quality Q gives
:math:`|H|^2 = 1 / ((1 - u)^2 + u/Q^2)` with :math:`u = (x/r)^2`, a first-order one
:math:`1/(1 + u)`. Every shape at every f0 is a few array operations, with no
design object built until the choice is made; the resonant peak is a property of
the shape alone (x covers 0 … ∞ as f covers 0 … f_s/2).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter

#: Second-order Qs searched (order 2 alone): from well damped through Bessel (0.5774) and
#: Butterworth (0.7071) to a mild presence lift.
SECOND_ORDER_QS = (0.5, 1 / math.sqrt(3), 0.65, 1 / math.sqrt(2), 0.8, 0.9, 1.0, 1.2)
#: Qs of the free two-section cascades (each pair once).
FREE_QS = (0.5, 0.54, 0.6, 0.7071, 0.8, 1.0, 1.3, 1.6, 2.0)
#: Passband ripples of the Chebyshev alignments searched, dB: up to 0.5 dB, as a lift or dip of more
#: across the upper midrange is heard as colour that the treble-loss figure does not count (engineering
#: judgement, no source).
CHEBYSHEV_RIPPLES_DB = (0.1, 0.25, 0.5)
#: Orders searched by default: all of them.
ALL_ORDERS = (1, 2, 3, 4, 5, 6, 7, 8)
#: Points per octave of the f0 grid (1/24 octave: finer than anyone hears a cutoff move).
F0_POINTS_PER_OCTAVE = 24
F0_LOW_HZ = 1000.0


@dataclass(frozen=True)
class Shape:
    """A normalised low-pass cascade: ``sections`` of (f0 factor, Q or None), and how to name and build it."""

    order: int
    sections: tuple[tuple[float, float | None], ...]
    alignment: str | None = None
    ripple_db: float | None = None
    q: float | None = None          # order 2: the section's Q
    free: bool = False              # a free cascade (sections given one by one)

    @property
    def label(self) -> str:
        if self.alignment == "chebyshev":
            return f"order {self.order} Chebyshev ({self.ripple_db:g} dB ripple)"
        if self.alignment:
            return f"order {self.order} {self.alignment.replace('-', '–').title()}"
        if self.free:
            qs = ", ".join("first order" if q is None else f"Q {q:.2f}" for _, q in self.sections)
            return f"order {self.order}, two sections ({qs})"
        if self.order == 1:
            return "order 1"
        return f"order 2, Q {self.q:.3f}"

    def design(self, f0_hz: float, rate_hz: float, *, method: str = "bilinear", highpass_hz: float | None = None):
        """The :class:`~audition.design.Design` of this shape at ``f0_hz``."""
        from audition import design

        if self.free:
            return design.from_sections([(f0_hz * r, q) for r, q in self.sections], rate_hz, method=method,
                                        highpass_hz=highpass_hz)
        if self.alignment:
            return design.lowpass(f0_hz, rate_hz, order=self.order, alignment=self.alignment,
                                  ripple_db=self.ripple_db, method=method, highpass_hz=highpass_hz)
        if self.order == 1:
            return design.lowpass(f0_hz, rate_hz, order=1, method=method, highpass_hz=highpass_hz)
        return design.lowpass(f0_hz, rate_hz, q=self.q, method=method, highpass_hz=highpass_hz)

    def analog_power(self, x) -> np.ndarray:
        """|H|² of the shape at normalised frequency ``x`` = f/f0 (analog), or the warped x of the module notes."""
        x = np.asarray(x, dtype=float)
        out = np.ones_like(x)
        for r, q in self.sections:
            u = (x / r) ** 2
            out = out / (1.0 + u) if q is None else out / ((1.0 - u) ** 2 + u / (q * q))
        return out

    def analog_response(self, x) -> np.ndarray:
        """Complex H of the shape at normalised frequency ``x`` = f/f0 (s = jx), or at the warped x."""
        x = np.asarray(x, dtype=float)
        out = np.ones(x.shape, dtype=complex)
        for r, q in self.sections:
            v = x / r
            out = out / (1.0 + 1j * v) if q is None else out / (1.0 - v * v + 1j * v / q)
        return out

    def peak_db(self) -> float:
        """The largest gain of the shape over all frequencies, dB (0 for a shape that never rises)."""
        x = np.concatenate([np.linspace(0.0, 3.0, 6001), np.geomspace(3.0, 100.0, 200)])
        return float(10.0 * np.log10(self.analog_power(x).max()))


def overshoot_pct(shape_list) -> np.ndarray:
    """Step-response overshoot of every shape's analog prototype, percent: array (shapes,).

    A property of the shape alone (time scales with 1/f0), the same at every rate
    (:func:`audition.design.analog.step_overshoot_pct`).
    """
    from audition.design.analog import step_overshoot_pct

    return np.array([step_overshoot_pct(s.sections) for s in shape_list])


def shapes(orders=ALL_ORDERS) -> list[Shape]:
    """Every shape of the search for the orders asked for (module notes)."""
    from audition import design

    out: list[Shape] = []
    for order in orders:
        if not (isinstance(order, (int, np.integer)) and 1 <= order <= 8):
            raise BadParameter(f"orders: {order!r} is outside 1..8")
        order = int(order)
        if order == 1:
            out.append(Shape(1, ((1.0, None),)))
            continue
        if order == 2:
            out += [Shape(2, ((1.0, q),), q=q) for q in SECOND_ORDER_QS]
        else:
            out.append(Shape(order, tuple((1.0, q) for q in design.butterworth_qs(order)), "butterworth"))
            out.append(Shape(order, tuple(design.bessel_sections(order)), "bessel"))
            if order % 2 == 0:
                lr = design.alignment_sections(1.0, order, "linkwitz-riley")
                out.append(Shape(order, tuple((s.f0_hz, s.q) for s in lr), "linkwitz-riley"))
        if order >= 2:
            out += [Shape(order, tuple(design.chebyshev_sections(order, r)), "chebyshev", ripple_db=r)
                    for r in CHEBYSHEV_RIPPLES_DB]
        if order == 3:
            out += [Shape(3, ((1.0, None), (1.0, q)), free=True) for q in FREE_QS]
        if order == 4:
            out += [Shape(4, ((1.0, q1), (1.0, q2)), free=True)
                    for q1, q2 in itertools.combinations_with_replacement(FREE_QS, 2)]
    return out


def f0_grid(rate_hz: float, low_hz: float = F0_LOW_HZ, points_per_octave: int = F0_POINTS_PER_OCTAVE) -> np.ndarray:
    """Logarithmic f0 grid from ``low_hz`` up to just below Nyquist (0.95 × rate/2)."""
    top = 0.95 * rate_hz / 2.0
    n = int(math.floor(math.log2(top / low_hz) * points_per_octave)) + 1
    return low_hz * 2.0 ** (np.arange(max(n, 1)) / points_per_octave)


def power_grid(shape_list, f0s_hz, freqs_hz, rate_hz: float) -> np.ndarray:
    """|H(f)|² of every shape at every f0, digitised (module notes): array (shapes, f0s, freqs).

    Exact for the bilinear method (the alignment prewarped at f0); the matched method
    is searched with the same figures and its choice predicted again exactly.
    """
    f0s_hz = np.asarray(f0s_hz, dtype=float)
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    x = np.tan(np.pi * freqs_hz / rate_hz)[None, :] / np.tan(np.pi * f0s_hz / rate_hz)[:, None]
    out = np.empty((len(shape_list), len(f0s_hz), len(freqs_hz)))
    for i, s in enumerate(shape_list):
        out[i] = s.analog_power(x)
    return out
