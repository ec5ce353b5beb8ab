"""The design object (:class:`Design`), its figures, and the public constructors."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from audition.design.analog import Section, alignment_sections
from audition.design.checks import (BUTTERWORTH_Q, check_f0, check_gain, check_method, check_order, check_q,
                                    check_rate)
from audition.design.digital import _db, digitise, sos_group_delay, sos_response
from audition.errors import BadParameter

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
    prototype_overshoot_pct: float | None = None


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
    ripple_db : float or None
        Passband ripple of a Chebyshev alignment.
    warp_hz : float or None
        Where the bilinear transform is prewarped for every low-pass section at once
        (an alignment's design f0, so its half-power point lands exactly there once
        digitised); None prewarps each section at its own f0 (explicit sections).

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
    ripple_db: float | None = None
    warp_hz: float | None = None
    sos: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        check_rate(self.rate_hz)
        check_method(self.method)
        check_gain(sum(s.gain_db for s in self.sections))
        warp = self.warp_hz if self.method == "bilinear" else None
        if warp is not None:
            check_f0(warp, self.rate_hz)
        for s in self.sections:
            if warp is not None and s.kind == "lowpass":
                # prewarped as a whole at warp_hz: a section's own analog f0 may lie above Nyquist
                if not (math.isfinite(s.f0_hz) and s.f0_hz > 0):
                    raise BadParameter(f"section f0={s.f0_hz!r} Hz: must be a positive frequency")
            else:
                check_f0(s.f0_hz, self.rate_hz, name="section f0")
            if s.q is not None:
                check_q(s.q)
        # Left writable: scipy.signal.sosfilt refuses a read-only sos array.
        object.__setattr__(self, "sos", digitise(self.sections, self.rate_hz, self.method, warp))

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
        return dataclasses.replace(self, rate_hz=rate_hz)

    def with_method(self, method: str) -> Design:
        return dataclasses.replace(self, method=method)

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

    def prototype_overshoot_pct(self) -> float | None:
        """Step-response overshoot of the low-pass part's analog prototype, percent (its ringing at any rate).

        ``None`` when there is no low-pass part. See :func:`audition.design.analog.step_overshoot_pct`.
        """
        from audition.design.analog import step_overshoot_pct

        lows = [(s.f0_hz, s.q) for s in self.sections if s.kind == "lowpass"]
        return step_overshoot_pct(lows) if lows else None

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
            prototype_overshoot_pct=self.prototype_overshoot_pct(),
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
            "ripple_db": self.ripple_db,
            "warp_hz": self.warp_hz,
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
                   int(d.get("order", 2)), d.get("alignment"), d.get("highpass_hz"), d.get("ripple_db"),
                   d.get("warp_hz"))


# ---------------------------------------------------------------------------
# Public constructors
# ---------------------------------------------------------------------------


def lowpass(f0_hz: float, rate_hz: float, *, q: float | None = None, order: int = 2, alignment: str | None = None,
            gain_db: float = 0.0, method: str = "bilinear", highpass_hz: float | None = None,
            highpass_q: float = BUTTERWORTH_Q, ripple_db: float | None = None) -> Design:
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
    alignment : {"butterworth", "bessel", "linkwitz-riley", "chebyshev"}, optional
        An alignment's sections are prewarped together at f0 (bilinear), so the digital
        half-power point of Butterworth, Bessel and Chebyshev lands on f0 exactly, and
        Linkwitz–Riley's -6.02 dB point likewise.
    ripple_db : float, optional
        Passband ripple of the Chebyshev (type I) alignment, dB (required for it).
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
        sections = alignment_sections(f0_hz, order, alignment, ripple_db=ripple_db)
        nominal_q = sections[0].q if order == 2 else None
    if ripple_db is not None and alignment != "chebyshev":
        raise BadParameter(f"ripple-db={ripple_db!r} applies to the Chebyshev alignment only")
    return _assemble(sections, rate_hz, method, f0_hz, nominal_q, order, alignment, gain_db, highpass_hz, highpass_q,
                     ripple_db=ripple_db, warp_hz=f0_hz)


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


def _assemble(sections, rate_hz, method, f0_hz, q, order, alignment, gain_db, highpass_hz, highpass_q, *,
              ripple_db=None, warp_hz=None) -> Design:
    check_method(method)
    check_gain(gain_db)
    if gain_db:
        first = sections[0]
        sections[0] = Section(first.kind, first.f0_hz, first.q, float(gain_db))
    if highpass_hz is not None:
        check_f0(highpass_hz, rate_hz, name="highpass")
        if highpass_hz >= f0_hz:
            raise BadParameter(f"highpass={highpass_hz!r} Hz must lie below the low-pass f0={f0_hz!r} Hz")
        sections.append(Section("highpass", float(highpass_hz), check_q(highpass_q)))
    return Design(tuple(sections), float(rate_hz), method, float(f0_hz), q, int(order), alignment,
                  None if highpass_hz is None else float(highpass_hz), ripple_db,
                  None if warp_hz is None else float(warp_hz))
