"""Filter design: analog prototypes, alignments and their digital second-order sections.

The design is a visible pipeline of small public steps::

    alignment -> analog sections (f0, Q) -> digitise each section -> sos rows

The basic block is the second-order low-pass

.. math:: H(s) = H_0 \\frac{\\omega_0^2}{s^2 + (\\omega_0/Q)\\,s + \\omega_0^2}

flat below f0, falling 40 dB/decade above, with a resonant peak when
Q > 1/sqrt(2). A series RLC divider (output across C) is one, with
omega0 = 1/sqrt(LC) and Q = (1/R)·sqrt(L/C). Higher orders are cascades of such
sections plus one first-order section for odd orders; a rumble high-pass is the
same machinery with s^2 in the numerator.

Digitising methods
------------------
``"bilinear"`` (default)
    The bilinear transform prewarped at each section's own f0, so the digital
    magnitude and phase at f0 equal the analog ones exactly. The transform maps
    the whole analog axis onto 0..Nyquist, so toward Nyquist the digital
    response falls below the analog one (a zero at Nyquist).
``"matched"``
    M. Vicanek, "Matched Second Order Digital Filters" (2016): poles by the
    impulse-invariant map (exact analog pole positions), numerator chosen so the
    magnitude matches the analog one at DC and at f0 (low-pass) or at f0, with
    the double zero kept at DC (high-pass). Much closer to the analog magnitude
    near Nyquist; the phase is not matched.

Every design reports the largest digital-minus-analog magnitude deviation over
the audible band, so a user can choose between them.
"""

from __future__ import annotations

import functools

import math
from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter

ALIGNMENTS = ("butterworth", "bessel", "linkwitz-riley")
METHODS = ("bilinear", "matched")
KINDS = ("lowpass", "highpass")
MIN_RATE_HZ = 8000.0
#: Q of the second-order Butterworth section, 1/sqrt(2).
BUTTERWORTH_Q = 1.0 / math.sqrt(2.0)


# ---------------------------------------------------------------------------
# Analog sections
# ---------------------------------------------------------------------------


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
    Poles from :func:`scipy.signal.besselap`; a pair p gives omega0 = |p| and
    Q = |p| / (-2 Re p).
    """
    return list(_bessel_table(int(order)))


@functools.lru_cache(maxsize=None)
def _bessel_table(order: int) -> tuple[tuple[float, float | None], ...]:
    # Computed once per order: besselap takes milliseconds and the planner asks at every f0 of its grid.
    from scipy.signal import besselap

    _, poles, _ = besselap(order, norm="mag")
    out: list[tuple[float, float | None]] = []
    for p in poles:
        if abs(p.imag) < 1e-12 * abs(p):
            out.append((float(-p.real), None))
        elif p.imag > 0:
            out.append((float(abs(p)), float(abs(p) / (-2.0 * p.real))))
    out.sort(key=lambda fq: -1.0 if fq[1] is None else fq[1])
    return tuple(out)


def alignment_sections(f0_hz: float, order: int, alignment: str, kind: str = "lowpass") -> list[Section]:
    """Analog sections of a named alignment at design frequency f0.

    Parameters
    ----------
    f0_hz : float
        Design frequency in Hz: where Butterworth and Bessel are 3.01 dB down and
        Linkwitz-Riley is 6.02 dB down.
    order : int
        Overall order N (Linkwitz-Riley needs an even N).
    alignment : {"butterworth", "bessel", "linkwitz-riley"}
    """
    check_alignment(alignment)
    check_order(order)
    if alignment == "butterworth":
        return [Section(kind, f0_hz, q) for q in butterworth_qs(order)]
    if alignment == "bessel":
        if kind != "lowpass":
            raise BadParameter(f"alignment {alignment!r} is offered for low-pass sections only")
        return [Section(kind, f0_hz * factor, q) for factor, q in bessel_sections(order)]
    if order % 2:
        raise BadParameter(f"order={order!r}: a Linkwitz-Riley alignment needs an even order (2, 4, 6, ...)")
    # Two identical Butterworth filters of half the order in cascade. Two
    # first-order sections at the same f0 make one second-order section of Q = 1/2.
    half = butterworth_qs(order // 2)
    qs = [q for q in half if q is not None] * 2
    if None in half:
        qs.insert(0, 0.5)
    return [Section(kind, f0_hz, q) for q in sorted(qs)]


# ---------------------------------------------------------------------------
# Digitising one section
# ---------------------------------------------------------------------------


def bilinear_section(section: Section, rate_hz: float) -> np.ndarray:
    """One sos row [b0 b1 b2 1 a1 a2] by the bilinear transform prewarped at f0.

    Notes
    -----
    With K = tan(pi f0 / rate) the substitution s = (omega0 / K)(1 - z^-1)/(1 + z^-1)
    maps analog f0 exactly onto digital f0. For the second-order low-pass this
    gives the W3C Audio EQ Cookbook low-pass (W3C Working Group Note, 2021)::

        b = H0·K²·[1, 2, 1] / D,   a = [1, 2(K² - 1)/D, (K² - K/Q + 1)/D],
        D = K² + K/Q + 1

    and for the high-pass b = H0·[1, -2, 1] / D. First order: b = H0·K·[1, 1]/(K+1)
    (low-pass) or H0·[1, -1]/(K+1) (high-pass), a = [1, (K-1)/(K+1)].
    """
    k = math.tan(math.pi * section.f0_hz / rate_hz)
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


_DIGITISERS = {"bilinear": bilinear_section, "matched": matched_section}


def digitise(sections, rate_hz: float, method: str = "bilinear") -> np.ndarray:
    """Second-order sections (n, 6), a0 = 1, of an analog cascade at ``rate_hz``."""
    check_method(method)
    return np.array([_DIGITISERS[method](s, rate_hz) for s in sections], dtype=float)


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


# ---------------------------------------------------------------------------
# The design object
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Figures:
    """The figures of merit of one digital design.

    All frequencies in Hz; gains in dB relative to unity; delays in ms.
    ``max_deviation_db`` is digital minus analog magnitude at the frequency in
    the band 20 Hz .. min(20 kHz, 0.45 rate) where their difference is largest
    (a negative figure: the digital response lies below the analog one).
    """

    max_deviation_db: float
    max_deviation_hz: float
    deviation_band_hz: tuple[float, float]
    minus3db_hz: float | None
    peak_gain_db: float
    peak_hz: float
    overshoot_pct: float | None
    group_delay_ms_1k: float
    group_delay_ms_f0: float


@dataclass(frozen=True)
class Design:
    """A digital filter design: analog sections digitised at one rate by one method.

    Attributes
    ----------
    sections : tuple of Section
        The analog cascade, low-pass sections first, then any high-pass ones.
    rate_hz : float
        Sample rate of the digital sections.
    method : {"bilinear", "matched"}
    f0_hz, q : float, float or None
        The nominal design frequency and Q as the user gave them (for an
        alignment, ``q`` is the Q of a second-order one, else None).
    order : int
        Order of the low-pass part.
    alignment : str or None
    highpass_hz : float or None
        Rumble high-pass frequency, if any.

    Examples
    --------
    >>> d = lowpass(8000.0, 48000.0, q=0.7071)
    >>> d.sos.shape
    (1, 6)
    >>> round(float(abs(d.digital_response(8000.0))), 4)
    0.7071
    """

    sections: tuple[Section, ...]
    rate_hz: float
    method: str = "bilinear"
    f0_hz: float = 0.0
    q: float | None = None
    order: int = 2
    alignment: str | None = None
    highpass_hz: float | None = None
    sos: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        check_rate(self.rate_hz)
        check_method(self.method)
        for s in self.sections:
            check_f0(s.f0_hz, self.rate_hz, name="section f0")
            if s.q is not None:
                check_q(s.q)
        # Left writable: scipy.signal.sosfilt refuses a read-only sos array.
        object.__setattr__(self, "sos", digitise(self.sections, self.rate_hz, self.method))

    # -- responses --------------------------------------------------------
    def analog_response(self, f_hz) -> np.ndarray:
        """Complex response of the analog cascade at ``f_hz`` (Hz)."""
        f = np.asarray(f_hz, dtype=float)
        h = np.ones(f.shape, dtype=complex)
        for s in self.sections:
            h = h * s.analog_response(f)
        return h

    def digital_response(self, f_hz) -> np.ndarray:
        """Complex response of the digital sections at ``f_hz`` (Hz, below rate/2)."""
        return sos_response(self.sos, f_hz, self.rate_hz)

    def group_delay_s(self, f_hz) -> np.ndarray:
        """Group delay of the digital sections, seconds."""
        return sos_group_delay(self.sos, f_hz, self.rate_hz)

    @property
    def lowpass_sos(self) -> np.ndarray:
        """The sos rows of the low-pass part alone (no rumble high-pass)."""
        keep = [i for i, s in enumerate(self.sections) if s.kind == "lowpass"]
        return self.sos[keep]

    @property
    def passband_gain_db(self) -> float:
        return float(sum(s.gain_db for s in self.sections))

    def with_rate(self, rate_hz: float) -> Design:
        """The same analog design digitised at another rate."""
        return Design(self.sections, rate_hz, self.method, self.f0_hz, self.q, self.order, self.alignment, self.highpass_hz)

    def with_method(self, method: str) -> Design:
        return Design(self.sections, self.rate_hz, method, self.f0_hz, self.q, self.order, self.alignment, self.highpass_hz)

    # -- figures ----------------------------------------------------------
    def deviation_band_hz(self) -> tuple[float, float]:
        return 20.0, min(20000.0, 0.45 * self.rate_hz)

    def max_deviation(self) -> tuple[float, float]:
        """(deviation_db, f_hz): the largest |digital| - |analog| in dB over the band.

        A dense logarithmic grid (4000 points) locates the worst point and a
        bounded scalar search polishes it.
        """
        lo, hi = self.deviation_band_hz()
        f = np.geomspace(lo, hi, 4000)
        dev = self._deviation_db(f)
        i = int(np.argmax(np.abs(dev)))
        f_best, d_best = float(f[i]), float(dev[i])
        a, b = f[max(i - 1, 0)], f[min(i + 1, f.size - 1)]
        if b > a:
            from scipy.optimize import minimize_scalar

            res = minimize_scalar(lambda x: -abs(float(self._deviation_db(x))), bounds=(a, b), method="bounded",
                                  options={"xatol": 1e-6 * a})
            if -res.fun > abs(d_best):
                f_best, d_best = float(res.x), float(self._deviation_db(res.x))
        return d_best, f_best

    def _deviation_db(self, f):
        return _db(self.digital_response(f)) - _db(self.analog_response(f))

    def minus3db_hz(self) -> float | None:
        """Upper half-power frequency of the digital response, Hz.

        The highest frequency below Nyquist at which the response is still within
        10·log10(2) = 3.01 dB of the passband gain H0 (so a Butterworth design of
        any order reads exactly f0). ``None`` if the response never falls that far.
        """
        ref = self.passband_gain_db - 10.0 * math.log10(2.0)
        nyq = self.rate_hz / 2.0
        f = np.geomspace(1.0, nyq * (1 - 1e-9), 6000)
        above = _db(self.digital_response(f)) >= ref
        if not above.any() or above[-1]:
            return None
        i = int(np.nonzero(above)[0][-1])
        from scipy.optimize import brentq

        return float(brentq(lambda x: float(_db(self.digital_response(x))) - ref, f[i], f[i + 1], xtol=1e-9))

    def peak(self) -> tuple[float, float]:
        """(peak_gain_db, f_hz) of the digital magnitude over 0..Nyquist."""
        nyq = self.rate_hz / 2.0
        f = np.concatenate([[0.0], np.geomspace(1.0, nyq, 6000)])
        mag = _db(self.digital_response(f))
        i = int(np.argmax(mag))
        if 0 < i < f.size - 1:
            from scipy.optimize import minimize_scalar

            res = minimize_scalar(lambda x: -float(_db(self.digital_response(x))), bounds=(f[i - 1], f[i + 1]),
                                  method="bounded", options={"xatol": 1e-6 * f[i]})
            if -res.fun >= mag[i]:
                return float(-res.fun), float(res.x)
        return float(mag[i]), float(f[i])

    def overshoot_pct(self) -> float | None:
        """Step-response overshoot of the digital low-pass part, percent of its final value.

        The step is run long enough for the slowest section to settle (60 time
        constants of its envelope). ``None`` when there is no low-pass part.
        """
        sos = self.lowpass_sos
        if len(sos) == 0:
            return None
        from scipy.signal import sosfilt

        slowest = min(s.f0_hz / (2.0 * (s.q or 0.5)) for s in self.sections if s.kind == "lowpass")
        n = int(min(max(60.0 * self.rate_hz / (2.0 * math.pi * slowest), 256), 20 * self.rate_hz))
        step = sosfilt(sos, np.ones(n))
        final = float(np.prod([r[:3].sum() / r[3:].sum() for r in sos]))
        return max(0.0, float((step.max() - final) / final * 100.0))

    def figures(self) -> Figures:
        dev_db, dev_hz = self.max_deviation()
        peak_db, peak_hz = self.peak()
        f0 = self.f0_hz or self.sections[0].f0_hz
        return Figures(
            max_deviation_db=dev_db,
            max_deviation_hz=dev_hz,
            deviation_band_hz=self.deviation_band_hz(),
            minus3db_hz=self.minus3db_hz(),
            peak_gain_db=peak_db,
            peak_hz=peak_hz,
            overshoot_pct=self.overshoot_pct(),
            group_delay_ms_1k=float(self.group_delay_s(1000.0)) * 1e3 if 1000.0 < self.rate_hz / 2 else float("nan"),
            group_delay_ms_f0=float(self.group_delay_s(f0)) * 1e3,
        )

    # -- serialisation ----------------------------------------------------
    def to_dict(self) -> dict:
        """A JSON-ready description: what was asked for and the sos rows it gave."""
        return {
            "rate_hz": self.rate_hz,
            "method": self.method,
            "f0_hz": self.f0_hz,
            "q": self.q,
            "order": self.order,
            "alignment": self.alignment,
            "highpass_hz": self.highpass_hz,
            "analog_sections": [
                {"kind": s.kind, "f0_hz": s.f0_hz, "q": s.q, "gain_db": s.gain_db} for s in self.sections
            ],
            "sections": [{"b": [float(x) for x in row[:3]], "a": [float(x) for x in row[3:]]} for row in self.sos],
        }

    @classmethod
    def from_dict(cls, d: dict) -> Design:
        """Rebuild a design from :meth:`to_dict` output (the sos are recomputed)."""
        sections = tuple(Section(s["kind"], float(s["f0_hz"]), None if s["q"] is None else float(s["q"]),
                                 float(s.get("gain_db", 0.0))) for s in d["analog_sections"])
        return cls(sections, float(d["rate_hz"]), d.get("method", "bilinear"), float(d["f0_hz"]), d.get("q"),
                   int(d.get("order", 2)), d.get("alignment"), d.get("highpass_hz"))


# ---------------------------------------------------------------------------
# Public constructors
# ---------------------------------------------------------------------------


def lowpass(f0_hz: float, rate_hz: float, *, q: float | None = None, order: int = 2, alignment: str | None = None,
            gain_db: float = 0.0, method: str = "bilinear", highpass_hz: float | None = None,
            highpass_q: float = BUTTERWORTH_Q) -> Design:
    """A low-pass design: one second-order section of given Q, or a named alignment.

    Parameters
    ----------
    f0_hz : float
        Cutoff (natural frequency) in Hz, 0 < f0 < rate/2.
    rate_hz : float
        Sample rate in Hz, at least 8000.
    q : float, optional
        Q of a second-order design (default 1/sqrt(2), Butterworth). Not allowed
        with ``alignment`` or an order other than 2.
    order : int
        Filter order; above 2 (or 1) an alignment is used (Butterworth unless named).
    alignment : {"butterworth", "bessel", "linkwitz-riley"}, optional
    gain_db : float
        Passband gain H0 in dB, applied in the first section.
    method : {"bilinear", "matched"}
    highpass_hz : float, optional
        Adds a second-order rumble high-pass (Q ``highpass_q``) at this frequency.

    Raises
    ------
    BadParameter
        For a value outside its range; the message gives the range for this rate.
    """
    check_rate(rate_hz)
    check_order(order)
    check_f0(f0_hz, rate_hz)
    if q is not None and alignment is not None:
        raise BadParameter(f"q={q!r} and alignment={alignment!r} both set the Q: give one of them")
    if q is not None and order != 2:
        raise BadParameter(f"q={q!r} applies to a single second-order section; for order={order} name an alignment "
                           "or give the sections one by one")
    if alignment is None and order == 2:
        qq = BUTTERWORTH_Q if q is None else check_q(q)
        sections = [Section("lowpass", f0_hz, qq)]
        nominal_q: float | None = qq
    else:
        alignment = alignment or "butterworth"
        sections = alignment_sections(f0_hz, order, alignment)
        nominal_q = sections[0].q if order == 2 else None
    return _assemble(sections, rate_hz, method, f0_hz, nominal_q, order, alignment, gain_db, highpass_hz, highpass_q)


def from_sections(pairs, rate_hz: float, *, gain_db: float = 0.0, method: str = "bilinear",
                  highpass_hz: float | None = None, highpass_q: float = BUTTERWORTH_Q) -> Design:
    """A low-pass cascade from an explicit list of (f0_hz, q) pairs; q None = first order."""
    check_rate(rate_hz)
    pairs = list(pairs)
    if not pairs:
        raise BadParameter("sections: give at least one F0:Q section")
    sections = []
    for f0, q in pairs:
        check_f0(f0, rate_hz, name="section f0")
        sections.append(Section("lowpass", float(f0), None if q is None else check_q(q)))
    order = sum(s.order for s in sections)
    f0, q = sections[0].f0_hz, sections[0].q
    return _assemble(sections, rate_hz, method, f0, q, order, None, gain_db, highpass_hz, highpass_q)


def highpass(f0_hz: float, rate_hz: float, *, q: float = BUTTERWORTH_Q, method: str = "bilinear") -> Design:
    """A second-order high-pass (rumble filter) alone."""
    check_rate(rate_hz)
    check_f0(f0_hz, rate_hz, name="highpass")
    sec = Section("highpass", f0_hz, check_q(q))
    return Design((sec,), rate_hz, method, f0_hz, q, 2, None, f0_hz)


def from_rlc(r_ohm: float, l_henry: float, c_farad: float, rate_hz: float, *, method: str = "bilinear") -> Design:
    """The design of an unloaded series RLC low-pass (R, L in series, output across C).

    Notes
    -----
    H(s) = 1 / (LC s² + RC s + 1), so omega0 = 1/sqrt(LC) and
    Q = (1/R) sqrt(L/C), H0 = 1 (circuit theory).
    """
    for name, v in (("r_ohm", r_ohm), ("l_henry", l_henry), ("c_farad", c_farad)):
        if not v > 0:
            raise BadParameter(f"{name}={v!r}: a component value must be > 0")
    f0 = 1.0 / (2.0 * math.pi * math.sqrt(l_henry * c_farad))
    q = math.sqrt(l_henry / c_farad) / r_ohm
    return lowpass(f0, rate_hz, q=q, method=method)


def _assemble(sections, rate_hz, method, f0_hz, q, order, alignment, gain_db, highpass_hz, highpass_q) -> Design:
    check_method(method)
    if gain_db:
        first = sections[0]
        sections[0] = Section(first.kind, first.f0_hz, first.q, float(gain_db))
    if highpass_hz is not None:
        check_f0(highpass_hz, rate_hz, name="highpass")
        if highpass_hz >= f0_hz:
            raise BadParameter(f"highpass={highpass_hz!r} Hz must lie below the low-pass f0={f0_hz!r} Hz")
        sections.append(Section("highpass", float(highpass_hz), check_q(highpass_q)))
    return Design(tuple(sections), float(rate_hz), method, float(f0_hz), q, int(order), alignment,
                  None if highpass_hz is None else float(highpass_hz))


# ---------------------------------------------------------------------------
# Checks: messages say what is allowed and why
# ---------------------------------------------------------------------------


def check_rate(rate_hz: float) -> float:
    if not (isinstance(rate_hz, (int, float)) and math.isfinite(rate_hz) and rate_hz >= MIN_RATE_HZ):
        raise BadParameter(f"rate={rate_hz!r}: the sample rate must be at least {MIN_RATE_HZ:.0f} Hz")
    return float(rate_hz)


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
    if not (isinstance(q, (int, float)) and math.isfinite(q) and 0.0 < q <= 100.0):
        raise BadParameter(f"q={q!r}: Q must satisfy 0 < Q <= 100")
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


def _db(h) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(h))
