"""Analog sections: the second-order (and first-order) building blocks and the alignments.

A filter of order n is a cascade of n // 2 second-order sections plus one first-order
section for odd n, each given by its own f0 and Q (:class:`Section`).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from audition.design.checks import check_alignment, check_order, check_ripple
from audition.errors import BadParameter

@dataclass(frozen=True)
class Section:
    """One analog section of a cascade.

    Parameters
    ----------
    kind : {"lowpass", "highpass"}
    f0_hz : float
        Natural frequency f0 = omega0 / (2 pi), in Hz.
    q : float or None
        Quality factor of a second-order section; ``None`` for a first-order
        section H(s) = omega0 / (s + omega0) (low-pass) or s / (s + omega0).
    gain_db : float
        Passband gain H0 in dB (0 dB = unity).
    """

    kind: str
    f0_hz: float
    q: float | None
    gain_db: float = 0.0

    @property
    def order(self) -> int:
        return 1 if self.q is None else 2

    def analog_coefficients(self) -> tuple[np.ndarray, np.ndarray]:
        """Numerator and denominator of H(s) in descending powers of s (rad/s).

        Low-pass: H0·w0² / (s² + (w0/Q)s + w0²); high-pass: H0·s² / (same).
        """
        w0 = 2.0 * math.pi * self.f0_hz
        h0 = 10.0 ** (self.gain_db / 20.0)
        if self.q is None:
            a = np.array([1.0, w0])
            b = np.array([0.0, h0 * w0]) if self.kind == "lowpass" else np.array([h0, 0.0])
        else:
            a = np.array([1.0, w0 / self.q, w0 * w0])
            if self.kind == "lowpass":
                b = np.array([0.0, 0.0, h0 * w0 * w0])
            else:
                b = np.array([h0, 0.0, 0.0])
        return b, a

    def analog_response(self, f_hz) -> np.ndarray:
        """Complex H(j 2 pi f) of this section."""
        b, a = self.analog_coefficients()
        s = 2j * math.pi * np.asarray(f_hz, dtype=float)
        return np.polyval(b, s) / np.polyval(a, s)


def butterworth_qs(order: int) -> list[float | None]:
    """Section Q values of an order-N Butterworth low-pass, all sharing f0.

    Notes
    -----
    The poles lie on the unit circle at angles theta_k = pi (N + 1 - 2k) / (2N),
    k = 1 .. floor(N/2), from the negative real axis; a conjugate pair at angle
    theta has Q = 1 / (2 cos theta).
    For odd N one real pole (a first-order section, ``None``) remains.
    Section Qs ordered from lowest to highest (least peaking first), so a
    cascade never peaks more than it must at any intermediate node.

    References
    ----------
    S. Butterworth, "On the theory of filter amplifiers", Wireless Engineer 7 (1930).
    """
    qs: list[float | None] = []
    for k in range(1, order // 2 + 1):
        theta = math.pi * (order + 1 - 2 * k) / (2 * order)
        qs.append(1.0 / (2.0 * math.cos(theta)))
    qs.sort()
    if order % 2:
        qs.insert(0, None)
    return qs


def bessel_sections(order: int) -> list[tuple[float, float | None]]:
    """(f0 factor, Q) of an order-N Bessel low-pass normalised to -3 dB at 1.

    The normalisation is by magnitude: the whole cascade is 3.01 dB down at the
    design f0 (scipy's ``norm="mag"``), so "f0" means the same to a technician
    for every alignment. Each section's own f0 is the design f0 times the factor.

    Notes
    -----
    The poles are the roots of the reverse Bessel polynomial
    theta_N(s) = sum_k (2N - k)! / (2^(N - k) k! (N - k)!) s^k (the delay-normalised
    Bessel-Thomson low-pass H(s) = theta_N(0)/theta_N(s); e.g. Williams & Taylor, Electronic
    Filter Design Handbook, ch. 2), divided by the frequency where |H|^2 = 1/2. A pair p
    gives omega0 = |p| and Q = |p| / (-2 Re p). tests/test_design.py checks them against
    :func:`scipy.signal.besselap` with ``norm="mag"``, which is not imported here: importing
    scipy.signal takes about a second, longer than the whole plan of a short clip.
    """
    return list(_bessel_table(int(order)))


def _bessel_poles(order: int) -> np.ndarray:
    """Poles of the order-N Bessel low-pass, magnitude-normalised (-3.01 dB at 1 rad/s)."""
    n = order
    a = np.array([math.factorial(2 * n - k) / (2 ** (n - k) * math.factorial(k) * math.factorial(n - k))
                  for k in range(n + 1)])  # a[k]: coefficient of s^k
    poly = a[::-1]  # highest power first, as np.roots and np.polyval take it

    def falls_past_half(w: float) -> bool:  # |H(jw)|^2 < 1/2; |H| falls monotonically for a Bessel
        return abs(np.polyval(poly, 1j * w)) ** 2 > 2.0 * a[0] ** 2

    lo, hi = 0.0, 1.0
    while not falls_past_half(hi):
        lo, hi = hi, 2.0 * hi
    for _ in range(200):  # bisection to the last bits of a double
        mid = 0.5 * (lo + hi)
        if mid in (lo, hi):
            break
        lo, hi = (lo, mid) if falls_past_half(mid) else (mid, hi)
    return np.roots(poly) / (0.5 * (lo + hi))


@functools.lru_cache(maxsize=None)
def _bessel_table(order: int) -> tuple[tuple[float, float | None], ...]:
    # Computed once per order: the planner asks at every f0 of its grid.
    out: list[tuple[float, float | None]] = []
    for p in _bessel_poles(order):
        if abs(p.imag) < 1e-9 * abs(p):
            out.append((float(-p.real), None))
        elif p.imag > 0:
            out.append((float(abs(p)), float(abs(p) / (-2.0 * p.real))))
    out.sort(key=lambda fq: -1.0 if fq[1] is None else fq[1])
    return tuple(out)


def chebyshev_sections(order: int, ripple_db: float) -> list[tuple[float, float | None]]:
    """(f0 factor, Q) of an order-N Chebyshev type I low-pass, normalised to -3.01 dB at 1.

    The cascade has unity gain at DC; an even order then rises ``ripple_db`` above it
    inside the passband (its peaks), an odd order dips ``ripple_db`` below it. The
    normalisation puts the half-power point (3.01 dB under the DC gain) at the design f0,
    as for the other alignments.

    Notes
    -----
    With eps = sqrt(10^(r/10) - 1) and v = asinh(1/eps)/N, the poles normalised to the
    ripple band edge are (Chebyshev type I; e.g. Williams & Taylor, Electronic Filter
    Design Handbook, ch. 2)::

        p_k = -sinh(v) sin(theta_k) + j cosh(v) cos(theta_k),  theta_k = (2k - 1) pi / (2N)

    and |H(w)|² = 1/(1 + eps² T_N(w)²) relative to the passband peak. The half-power
    point relative to DC is at w3 = cosh(acosh(c)/N), c = 1/eps for odd N (DC is the
    peak) and c = sqrt(1 + 2 eps²)/eps for even N (DC lies 1/(1 + eps²) under it);
    the poles are divided by w3. A pair p gives omega0 = |p|, Q = |p| / (-2 Re p).
    """
    return list(_chebyshev_table(int(order), float(check_ripple(ripple_db))))


@functools.lru_cache(maxsize=256)
def _chebyshev_table(order: int, ripple_db: float) -> tuple[tuple[float, float | None], ...]:
    eps = math.sqrt(10.0 ** (ripple_db / 10.0) - 1.0)
    v = math.asinh(1.0 / eps) / order
    c = 1.0 / eps if order % 2 else math.sqrt(1.0 + 2.0 * eps * eps) / eps
    w3 = math.cosh(math.acosh(c) / order)
    out: list[tuple[float, float | None]] = []
    for k in range(1, order // 2 + 1):
        theta = (2 * k - 1) * math.pi / (2 * order)
        re, im = -math.sinh(v) * math.sin(theta), math.cosh(v) * math.cos(theta)
        mag = math.hypot(re, im)
        out.append((mag / w3, mag / (-2.0 * re)))
    if order % 2:
        out.append((math.sinh(v) / w3, None))
    out.sort(key=lambda fq: -1.0 if fq[1] is None else fq[1])
    return tuple(out)


def alignment_sections(f0_hz: float, order: int, alignment: str, kind: str = "lowpass",
                       ripple_db: float | None = None) -> list[Section]:
    """Analog sections of a named alignment at design frequency f0.

    Parameters
    ----------
    f0_hz : float
        Design frequency in Hz: where Butterworth, Bessel and Chebyshev are 3.01 dB down and
        Linkwitz-Riley is 6.02 dB down.
    order : int
        Overall order N (Linkwitz-Riley needs an even N).
    alignment : {"butterworth", "bessel", "linkwitz-riley", "chebyshev"}
    ripple_db : float, optional
        Passband ripple of a Chebyshev alignment (required for it, refused for the others).
    """
    check_alignment(alignment)
    check_order(order)
    if (alignment == "chebyshev") != (ripple_db is not None):
        raise BadParameter("a Chebyshev alignment needs its passband ripple (ripple-db), and only it takes one"
                           if alignment == "chebyshev" else
                           f"ripple-db={ripple_db!r} applies to the Chebyshev alignment only, not {alignment!r}")
    if alignment == "butterworth":
        return [Section(kind, f0_hz, q) for q in butterworth_qs(order)]
    if alignment == "bessel":
        if kind != "lowpass":
            raise BadParameter(f"alignment {alignment!r} is offered for low-pass sections only")
        return [Section(kind, f0_hz * factor, q) for factor, q in bessel_sections(order)]
    if alignment == "chebyshev":
        if kind != "lowpass":
            raise BadParameter(f"alignment {alignment!r} is offered for low-pass sections only")
        return [Section(kind, f0_hz * factor, q) for factor, q in chebyshev_sections(order, ripple_db)]
    if order % 2:
        raise BadParameter(f"order={order!r}: a Linkwitz-Riley alignment needs an even order (2, 4, 6, ...)")
    # Two identical Butterworth filters of half the order in cascade. Two
    # first-order sections at the same f0 make one second-order section of Q = 1/2.
    half = butterworth_qs(order // 2)
    qs = [q for q in half if q is not None] * 2
    if None in half:
        qs.insert(0, 0.5)
    return [Section(kind, f0_hz, q) for q in sorted(qs)]


#: The prototype's step response is taken on the cascade digitised with its highest f0 at 1/64 of the
#: rate: 8,193 response points, 16,384 samples (256 periods of that f0).
_STEP_F0_FRACTION = 1.0 / 64.0
_STEP_SAMPLES = 16384


def step_overshoot_pct(sections) -> float:
    """Step-response overshoot of a low-pass cascade's analog prototype, percent of its final value.

    ``sections``: ``(f0, Q)`` pairs (Q None for a first-order section), any frequency unit.
    The ringing of the shape itself, the same at every sample rate: computed on the
    cascade digitised by the bilinear transform with its highest f0 at rate/64, where
    the warping is 0.08 %, as the running sum of the impulse response that the inverse
    real FFT of its frequency response gives over 16,384 samples (256 periods of that
    f0; the slowest section searched, an eighth-order Chebyshev's lowest, has died away
    by orders of magnitude before the circular wrap). Within 0.1 percentage point of the
    analog step response for every shape the planner searches (tests). A digital filter's own step response (``Design.overshoot_pct``) adds
    the sampling's share near Nyquist.
    """
    secs = [(float(f), None if q is None else float(q)) for f, q in sections]
    if not secs:
        return 0.0
    top = max(f for f, _ in secs)
    w = np.linspace(0.0, np.pi, _STEP_SAMPLES // 2 + 1)[:-1]
    x = np.tan(w / 2.0) / math.tan(np.pi * _STEP_F0_FRACTION)
    h = np.ones(len(x), dtype=complex)
    for f, q in secs:
        v = x * (top / f)
        h = h / (1.0 + 1j * v) if q is None else h / (1.0 - v * v + 1j * v / q)
    h = np.append(h, 0.0)  # every low-pass here is zero at Nyquist (x infinite)
    step = np.cumsum(np.fft.irfft(h, _STEP_SAMPLES))
    final = float(np.real(h[0]))
    return max(0.0, (float(step.max()) - final) / final * 100.0)
