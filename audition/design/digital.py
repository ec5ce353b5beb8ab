"""Digitising sections (prewarped bilinear transform, matched) and the responses of sos cascades."""

from __future__ import annotations

import math

import numpy as np

from audition.design.analog import Section
from audition.design.checks import check_method

def bilinear_section(section: Section, rate_hz: float, warp_hz: float | None = None) -> np.ndarray:
    """One sos row [b0 b1 b2 1 a1 a2] by the bilinear transform prewarped at f0 (or at ``warp_hz``).

    Notes
    -----
    With K = tan(pi f0 / rate) the substitution s = (omega0 / K)(1 - z^-1)/(1 + z^-1)
    maps analog f0 exactly onto digital f0. Prewarped at another frequency fw (the
    design f0 of an alignment whose sections sit at other frequencies), the same
    substitution with the whole cascade's scale, s = (2 pi fw / tan(pi fw / rate))·
    (1 - z^-1)/(1 + z^-1), gives K = tan(pi fw / rate)·f0/fw for this section: fw
    itself then lands exactly, and K = tan(pi f0 / rate) again when fw = f0. For the second-order low-pass this
    gives the W3C Audio EQ Cookbook low-pass (W3C Working Group Note, 2021)::

        b = H0·K²·[1, 2, 1] / D,   a = [1, 2(K² - 1)/D, (K² - K/Q + 1)/D],
        D = K² + K/Q + 1

    and for the high-pass b = H0·[1, -2, 1] / D. First order: b = H0·K·[1, 1]/(K+1)
    (low-pass) or H0·[1, -1]/(K+1) (high-pass), a = [1, (K-1)/(K+1)].
    """
    if warp_hz is None or warp_hz == section.f0_hz:
        k = math.tan(math.pi * section.f0_hz / rate_hz)
    else:
        k = math.tan(math.pi * warp_hz / rate_hz) * (section.f0_hz / warp_hz)
    h0 = 10.0 ** (section.gain_db / 20.0)
    if section.q is None:
        d = k + 1.0
        a = [1.0, (k - 1.0) / d, 0.0]
        b = [h0 * k / d, h0 * k / d, 0.0] if section.kind == "lowpass" else [h0 / d, -h0 / d, 0.0]
        return np.array(b + a)
    q = section.q
    d = k * k + k / q + 1.0
    a = [1.0, 2.0 * (k * k - 1.0) / d, (k * k - k / q + 1.0) / d]
    if section.kind == "lowpass":
        g = h0 * k * k / d
        b = [g, 2.0 * g, g]
    else:
        g = h0 / d
        b = [g, -2.0 * g, g]
    return np.array(b + a)


def matched_section(section: Section, rate_hz: float) -> np.ndarray:
    """One sos row by M. Vicanek's magnitude-matched design (2016).

    Notes
    -----
    Second order, with w0 = 2 pi f0 / rate and zeta = 1/(2Q), poles by the
    impulse-invariant map (Vicanek eq. for a1, a2)::

        a1 = -2 exp(-zeta w0) cos(sqrt(1 - zeta²) w0)     (zeta <= 1; cosh otherwise)
        a2 = exp(-2 zeta w0)

    then, with A0 = (1 + a1 + a2)², A1 = (1 - a1 + a2)², A2 = -4 a2 and
    phi0 = 1 - sin²(w0/2), phi1 = sin²(w0/2), phi2 = 4 phi0 phi1:

    - low-pass: R1 = (A0 phi0 + A1 phi1 + A2 phi2) Q², B0 = A0,
      B1 = (R1 - B0 phi0) / phi1, b0 = (sqrt(B0) + sqrt(B1))/2, b1 = sqrt(B0) - b0, b2 = 0;
    - high-pass: b0 = Q sqrt(A0 phi0 + A1 phi1 + A2 phi2) / (4 phi1), b1 = -2 b0, b2 = b0.

    First order (our own derivation in the same spirit): pole exp(-w0), and the
    numerator b0 + b1 z^-1 that gives the analog 1/sqrt(2) at f0 with unity gain at
    DC (low-pass), or with the zero kept at DC (high-pass).
    """
    w0 = 2.0 * math.pi * section.f0_hz / rate_hz
    h0 = 10.0 ** (section.gain_db / 20.0)
    if section.q is None:
        return _matched_first_order(section.kind, w0, h0)
    zeta = 1.0 / (2.0 * section.q)
    if zeta <= 1.0:
        a1 = -2.0 * math.exp(-zeta * w0) * math.cos(math.sqrt(1.0 - zeta * zeta) * w0)
    else:
        a1 = -2.0 * math.exp(-zeta * w0) * math.cosh(math.sqrt(zeta * zeta - 1.0) * w0)
    a2 = math.exp(-2.0 * zeta * w0)
    big_a0 = (1.0 + a1 + a2) ** 2
    big_a1 = (1.0 - a1 + a2) ** 2
    big_a2 = -4.0 * a2
    phi1 = math.sin(w0 / 2.0) ** 2
    phi0 = 1.0 - phi1
    phi2 = 4.0 * phi0 * phi1
    r = big_a0 * phi0 + big_a1 * phi1 + big_a2 * phi2
    q = section.q
    if section.kind == "lowpass":
        r1 = r * q * q
        b_0 = big_a0
        b_1 = max((r1 - b_0 * phi0) / phi1, 0.0)
        b0 = 0.5 * (math.sqrt(b_0) + math.sqrt(b_1))
        b1 = math.sqrt(b_0) - b0
        b = [h0 * b0, h0 * b1, 0.0]
    else:
        b0 = q * math.sqrt(max(r, 0.0)) / (4.0 * phi1)
        b = [h0 * b0, -2.0 * h0 * b0, h0 * b0]
    return np.array(b + [1.0, a1, a2])


def _matched_first_order(kind: str, w0: float, h0: float) -> np.ndarray:
    a1 = -math.exp(-w0)
    # |b0 + b1 e^{-jw}|² = b0² + b1² + 2 b0 b1 cos w must equal |1 + a1 e^{-jw}|² / 2 at w0,
    # with b0 + b1 = 1 + a1 (unity DC, low-pass) or b0 - b1 = 1 - a1 (unity Nyquist, high-pass).
    target = 0.5 * (1.0 + a1 * a1 + 2.0 * a1 * math.cos(w0))
    c = math.cos(w0)
    if kind == "lowpass":
        s = 1.0 + a1  # b1 = s - b0
        # b0² + (s-b0)² + 2 b0 (s-b0) c = target  ->  2(1-c) b0² - 2 s (1-c) b0 + s² - target = 0
        qa, qb, qc = 2.0 * (1.0 - c), -2.0 * s * (1.0 - c), s * s - target
        b0 = (-qb + math.sqrt(max(qb * qb - 4.0 * qa * qc, 0.0))) / (2.0 * qa)
        b1 = s - b0
    else:
        # Unity at Nyquist and 1/sqrt(2) at f0 cannot both be met; keep the analog zero at
        # DC instead (b1 = -b0, as Vicanek's second-order high-pass does) and match at f0.
        b0 = math.sqrt(target / (2.0 * (1.0 - c)))
        b1 = -b0
    return np.array([h0 * b0, h0 * b1, 0.0, 1.0, a1, 0.0])


def digitise(sections, rate_hz: float, method: str = "bilinear", warp_hz: float | None = None) -> np.ndarray:
    """Second-order sections (n, 6), a0 = 1, of an analog cascade at ``rate_hz``.

    With ``warp_hz`` (bilinear only) the low-pass sections are prewarped together at that
    one frequency instead of each at its own f0 (:func:`bilinear_section`); a rumble
    high-pass section keeps its own.
    """
    check_method(method)
    if method == "matched":
        return np.array([matched_section(s, rate_hz) for s in sections], dtype=float)
    return np.array([bilinear_section(s, rate_hz, warp_hz if s.kind == "lowpass" else None) for s in sections],
                    dtype=float)


# ---------------------------------------------------------------------------
# Responses of sos cascades
# ---------------------------------------------------------------------------


def sos_response(sos: np.ndarray, f_hz, rate_hz: float) -> np.ndarray:
    """Complex response of a cascade of sos rows at frequencies ``f_hz``."""
    z1 = np.exp(-2j * math.pi * np.asarray(f_hz, dtype=float) / rate_hz)
    h = np.ones_like(z1)
    for b0, b1, b2, a0, a1, a2 in sos:
        h = h * (b0 + z1 * (b1 + z1 * b2)) / (a0 + z1 * (a1 + z1 * a2))
    return h


def sos_group_delay(sos: np.ndarray, f_hz, rate_hz: float) -> np.ndarray:
    """Group delay in seconds of a cascade of sos rows.

    Notes
    -----
    For a polynomial P(z^-1) = sum c_k z^-k the group delay contribution is
    Re[sum k c_k e^{-jwk} / sum c_k e^{-jwk}] samples; a section's delay is the
    numerator's minus the denominator's, and the cascade's is the sum.
    """
    w = 2.0 * math.pi * np.atleast_1d(np.asarray(f_hz, dtype=float)) / rate_hz
    e = np.exp(-1j * np.outer(w, np.arange(3)))
    k = np.arange(3)
    total = np.zeros(w.shape)
    for row in sos:
        for coeffs, sign in ((row[:3], 1.0), (row[3:], -1.0)):
            p = e @ coeffs
            dp = e @ (k * coeffs)
            with np.errstate(divide="ignore", invalid="ignore"):
                total += sign * np.real(dp / p)
    out = total / rate_hz
    return out if np.ndim(f_hz) else out[0]


def _db(h) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h))
