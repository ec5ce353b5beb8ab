"""Noise-measurement weighting curves and the K-weighting filter of loudness metering.

Two kinds of weighting live here:

Curves on a frequency axis (for weighting a PSD)
    ``"flat"``, ``"a"`` and ``"itu468"`` are analytic magnitude curves |W(f)|,
    evaluated at any frequency and therefore at any sample rate; a spectrum is
    weighted by multiplying its PSD by :func:`power_gain` = |W(f)|² before
    integrating it, which is RMS detection of the weighted noise.

A digital filter (for weighting a signal)
    :func:`k_weighting_sos` gives the two second-order sections of the
    ITU-R BS.1770-4 K-weighting at any rate; :mod:`audition.loudness` runs audio
    through them.

Examples
--------
>>> from audition.weighting import gain_db
>>> [round(float(g), 1) for g in gain_db("a", [100.0, 1000.0, 10000.0])]
[-19.1, 0.0, -2.5]
>>> round(float(gain_db("itu468", 6300.0)), 1)
12.2
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter

WEIGHTINGS = ("flat", "a", "itu468")


def check_name(name: str) -> str:
    """Return ``name`` if it is one of :data:`WEIGHTINGS`, else raise BadParameter."""
    if name not in WEIGHTINGS:
        raise BadParameter(f"weighting={name!r}: allowed are {', '.join(WEIGHTINGS)}")
    return name


def _frequencies(f_hz) -> np.ndarray:
    f = np.asarray(f_hz, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f < 0.0):
        bad = f[~(np.isfinite(f) & (f >= 0.0))].ravel()[0]
        raise BadParameter(f"f_hz={float(bad)!r}: weighting frequencies must be finite and >= 0 Hz")
    return f


# ---------------------------------------------------------------------------
# A-weighting, IEC 61672-1:2013 Annex E
# ---------------------------------------------------------------------------


def _a_pole_frequencies() -> tuple[float, float, float, float]:
    # IEC 61672-1:2013 Annex E derives the pole frequencies from the design
    # constants (from memory): fr = 1 kHz, fL = 10^1.5 Hz, fH = 10^3.9 Hz,
    # D² = 1/2, fA = 10^2.45 Hz. Computing them keeps the full precision the
    # standard's rounded values (20.60, 107.7, 737.9, 12194 Hz) lack.
    fr, fl, fh, d = 1000.0, 10.0**1.5, 10.0**3.9, math.sqrt(0.5)
    c = fl * fl * fh * fh
    b = (fr * fr + c / (fr * fr) - d * (fl * fl + fh * fh)) / (1.0 - d)
    root = math.sqrt(b * b - 4.0 * c)
    f1 = math.sqrt((-b - root) / 2.0)
    f4 = math.sqrt((-b + root) / 2.0)
    fa = 10.0**2.45
    f2 = (3.0 - math.sqrt(5.0)) / 2.0 * fa
    f3 = (3.0 + math.sqrt(5.0)) / 2.0 * fa
    return f1, f2, f3, f4


#: f1, f2, f3, f4 of the A-weighting (about 20.599, 107.65, 737.86, 12194.2 Hz).
A_POLE_FREQUENCIES_HZ = _a_pole_frequencies()


def _a_unnormalised(f: np.ndarray) -> np.ndarray:
    f1, f2, f3, f4 = A_POLE_FREQUENCIES_HZ
    f_sq = f * f
    return (f4 * f4 * f_sq * f_sq) / ((f_sq + f1 * f1) * np.sqrt(f_sq + f2 * f2) * np.sqrt(f_sq + f3 * f3)
                                      * (f_sq + f4 * f4))


# The standard writes this normalisation as A1000 = -2.000 dB (rounded); dividing
# by the exact value makes 1 kHz read 0 dB exactly.
_A_1000 = float(_a_unnormalised(np.array(1000.0)))


def a_weighting(f_hz) -> np.ndarray:
    """Linear magnitude |A(f)| of the IEC 61672-1 A-weighting, 1 at 1 kHz.

    Parameters
    ----------
    f_hz : array_like
        Frequencies in Hz, >= 0.

    Returns
    -------
    ndarray
        |A(f)|, 0 at f = 0.

    Notes
    -----
    IEC 61672-1:2013 Annex E:

    .. math:: A(f) = \\frac{f_4^2 f^4}{(f^2 + f_1^2)\\sqrt{f^2 + f_2^2}\\sqrt{f^2 + f_3^2}(f^2 + f_4^2)} / A_{1000}

    with the pole frequencies of :data:`A_POLE_FREQUENCIES_HZ`.

    References
    ----------
    IEC 61672-1:2013, Electroacoustics - Sound level meters - Part 1: Specifications, Annex E.
    """
    return _a_unnormalised(_frequencies(f_hz)) / _A_1000


# ---------------------------------------------------------------------------
# ITU-R BS.468-4
# ---------------------------------------------------------------------------


def _r468_unnormalised(f: np.ndarray) -> np.ndarray:
    # The magnitude of the standard's weighting network written as polynomials
    # (the widely published analytic form); verified in the tests against the
    # Recommendation's table, not against the network itself.
    h1 = (-4.737338981378384e-24 * f**6 + 2.043828333606125e-15 * f**4
          - 1.363894795463638e-7 * f**2 + 1.0)
    h2 = 1.306612257412824e-19 * f**5 - 2.118150887518656e-11 * f**3 + 5.559488023498642e-4 * f
    return 1.246332637532143e-4 * f / np.hypot(h1, h2)


# About -18.24 dB; often rounded to the "+18.2 dB" offset, which leaves 1 kHz at -0.04 dB.
_R468_1000 = float(_r468_unnormalised(np.array(1000.0)))


def itu468_weighting(f_hz) -> np.ndarray:
    """Linear magnitude of the ITU-R BS.468-4 noise weighting curve, 1 at 1 kHz.

    Used here with RMS detection (power spectra), not the standard's quasi-peak
    detector, so readings are not BS.468 quasi-peak readings: on hiss they read
    lower than a quasi-peak meter would.

    Parameters
    ----------
    f_hz : array_like
        Frequencies in Hz, >= 0.

    Returns
    -------
    ndarray
        |W(f)|, 0 at f = 0; about +12.2 dB (x 4.07) at its peak near 6.3 kHz.

    Notes
    -----
    .. math::

        h_1 = -4.737338981378384\\cdot10^{-24} f^6 + 2.043828333606125\\cdot10^{-15} f^4
              - 1.363894795463638\\cdot10^{-7} f^2 + 1

        h_2 = 1.306612257412824\\cdot10^{-19} f^5 - 2.118150887518656\\cdot10^{-11} f^3
              + 5.559488023498642\\cdot10^{-4} f

        R(f) = \\frac{1.246332637532143\\cdot10^{-4} f}{\\sqrt{h_1^2 + h_2^2}}, \\qquad
        W(f) = R(f) / R(1000)

    References
    ----------
    ITU-R BS.468-4 (1986), Measurement of audio-frequency noise voltage level in
    sound broadcasting: the weighting curve and its table of values and tolerances.
    """
    return _r468_unnormalised(_frequencies(f_hz)) / _R468_1000


_CURVES = {
    "flat": lambda f: np.ones_like(_frequencies(f)),
    "a": a_weighting,
    "itu468": itu468_weighting,
}


def power_gain(name: str, f_hz) -> np.ndarray:
    """|W(f)|², the linear power gain by which to multiply a PSD.

    Parameters
    ----------
    name : {"flat", "a", "itu468"}
    f_hz : array_like
        Frequencies in Hz, >= 0.

    Returns
    -------
    ndarray
        Same shape as ``f_hz``; 0 at f = 0 for "a" and "itu468", 1 everywhere for "flat".

    Raises
    ------
    BadParameter
        Unknown name, or a negative or non-finite frequency.
    """
    check_name(name)
    w = _CURVES[name](f_hz)
    return w * w


def gain_db(name: str, f_hz) -> np.ndarray:
    """Weighting gain 20·log10|W(f)| in dB, 0 dB at 1 kHz (−inf at f = 0 for "a", "itu468").

    >>> float(gain_db("flat", 50.0))
    0.0
    """
    g = power_gain(name, f_hz)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(g)


# ---------------------------------------------------------------------------
# K-weighting, ITU-R BS.1770-4
# ---------------------------------------------------------------------------

#: The sections ITU-R BS.1770-4 tabulates for 48 kHz, rows [b0 b1 b2 a0 a1 a2]:
#: Table 1 (stage 1, the shelving pre-filter) and Table 2 (stage 2, the RLB
#: high-pass). Checked with the search tool: the same digits appear in a public C
#: implementation of EBU R 128 (its PRE_B0.. and RLB_A1.. constants) and in an
#: unofficial note on the BS.1770 filters that reprints both tables.
K_WEIGHTING_48K_SOS = np.array([
    [1.53512485958697, -2.69169618940638, 1.19839281085285, 1.0, -1.69065929318241, 0.73248077421585],
    [1.0, -2.0, 1.0, 1.0, -1.99004745483398, 0.99007225036621],
])
K_WEIGHTING_TABLE_RATE_HZ = 48000.0


@dataclass(frozen=True)
class AnalogBiquad:
    """An analog second-order section in the shelf/peak form.

    .. math:: H(s) = \\frac{V_h s^2 + V_b (\\omega_0/Q) s + V_l \\omega_0^2}{s^2 + (\\omega_0/Q) s + \\omega_0^2}

    Vh is the gain far above f0, Vl the gain at DC, Vb the weight of the
    band-pass term (Vb = sqrt(Vh) for the usual shelf).
    """

    f0_hz: float
    q: float
    vh: float
    vb: float
    vl: float

    def sos(self, rate_hz: float) -> np.ndarray:
        """One row [b0 b1 b2 1 a1 a2] by the bilinear transform prewarped at f0.

        Notes
        -----
        With K = tan(pi f0 / rate) and D = 1 + K/Q + K² (W3C Audio EQ Cookbook
        substitution, the same as :func:`audition.design.bilinear_section`)::

            b = [Vh + Vb K/Q + Vl K², 2 (Vl K² - Vh), Vh - Vb K/Q + Vl K²] / D
            a = [1, 2 (K² - 1) / D, (1 - K/Q + K²) / D]
        """
        k = math.tan(math.pi * self.f0_hz / rate_hz)
        kq = k / self.q
        d = 1.0 + kq + k * k
        return np.array([(self.vh + self.vb * kq + self.vl * k * k) / d,
                         2.0 * (self.vl * k * k - self.vh) / d,
                         (self.vh - self.vb * kq + self.vl * k * k) / d,
                         1.0,
                         2.0 * (k * k - 1.0) / d,
                         (1.0 - kq + k * k) / d])

    @classmethod
    def from_sos(cls, row, rate_hz: float) -> AnalogBiquad:
        """Invert :meth:`sos`: the analog section whose prewarped bilinear image is ``row``.

        Notes
        -----
        From the sums 1 + a1 + a2 = 4K²/D, 1 - a1 + a2 = 4/D and 1 - a2 = 2(K/Q)/D,
        and likewise b0 + b1 + b2 = 4 Vl K²/D, b0 - b1 + b2 = 4 Vh/D,
        b0 - b2 = 2 Vb (K/Q)/D.
        """
        b0, b1, b2, a0, a1, a2 = (float(v) for v in row)
        b0, b1, b2, a1, a2 = b0 / a0, b1 / a0, b2 / a0, a1 / a0, a2 / a0
        d = 4.0 / (1.0 - a1 + a2)
        k = math.sqrt((1.0 + a1 + a2) / (1.0 - a1 + a2))
        kq = (1.0 - a2) * d / 2.0
        return cls(f0_hz=math.atan(k) * rate_hz / math.pi, q=k / kq,
                   vh=(b0 - b1 + b2) * d / 4.0,
                   vb=(b0 - b2) * d / (2.0 * kq),
                   vl=(b0 + b1 + b2) * d / (4.0 * k * k))


#: The analog sections implied by the 48 kHz table: a shelf of about +4 dB
#: (f0 1681.97 Hz, Q 0.70718, Vh 3.99984 dB, Vb = Vh^0.49967, Vl 1) and a high-pass
#: (f0 38.135 Hz, Q 0.50033, Vb = Vl = 0) whose Vh of about 1.005 (+0.043 dB)
#: is what b = [1, -2, 1] at 48 kHz implies. Re-digitised at 48 kHz they give
#: the table back to about 1e-15, so every rate is digitised from one description.
K_WEIGHTING_ANALOG = tuple(AnalogBiquad.from_sos(row, K_WEIGHTING_TABLE_RATE_HZ) for row in K_WEIGHTING_48K_SOS)


def k_weighting_sos(rate_hz: float) -> np.ndarray:
    """Second-order sections (2, 6) of the ITU-R BS.1770-4 K-weighting at ``rate_hz``.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz, at least 8000.

    Returns
    -------
    ndarray (2, 6)
        Rows [b0 b1 b2 1 a1 a2]: the shelving pre-filter, then the RLB high-pass.
        At 48 kHz exactly the Recommendation's tabulated coefficients.

    Raises
    ------
    BadParameter
        A rate below 8 kHz or not finite.

    Notes
    -----
    BS.1770-4 tabulates the filter for 48 kHz only and asks for the same
    response at other rates. The analog sections of :data:`K_WEIGHTING_ANALOG`
    (the inverse prewarped bilinear transform of the table) are digitised at
    ``rate_hz`` by :meth:`AnalogBiquad.sos`, the derivation also used by
    pyloudnorm's "DeMan" filter class (and, from memory, libebur128). Unlike those,
    the high-pass keeps the table's analog gain, so its passband gain does not
    drift with the rate (the table's b0 = 1 then becomes 0.99956 at 44.1 kHz).

    References
    ----------
    ITU-R BS.1770-4 (2015), Algorithms to measure audio programme loudness and
    true-peak audio level, Annex 1, Tables 1 and 2.

    Examples
    --------
    >>> sos = k_weighting_sos(44100)
    >>> sos.shape, round(float(sos[1, 0]), 6)
    ((2, 6), 0.99956)
    """
    from audition.design import check_rate

    rate = check_rate(rate_hz)
    if rate == K_WEIGHTING_TABLE_RATE_HZ:
        return K_WEIGHTING_48K_SOS.copy()
    return np.array([section.sos(rate) for section in K_WEIGHTING_ANALOG])
