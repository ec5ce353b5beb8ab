"""DSP coefficients: the sections in double, single and fixed-point words, and what rounding does to them.

:func:`quantise` rounds a design's sections to every :class:`NumberFormat` and
judges each: range, pole radius, response deviation, the arithmetic's noise
floor (:func:`rounding_noise_gain`) and the input headroom (:func:`headroom`).
The C header of the result is written by :mod:`audition.realize.cheader`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from audition.design import Design, Section, sos_response
from audition.errors import BadParameter
from audition.realize._numeric import _crossing_hz, _db


@dataclass(frozen=True)
class NumberFormat:
    """A coefficient word: floating point (``frac_bits`` None) or fixed point Qm.n.

    Fixed point Qm.n has m integer bits including the sign and n fractional bits
    in a word of m + n bits: values k / 2^n for integers -2^(m+n-1) <= k < 2^(m+n-1),
    so Q1.15 holds -1 .. 1 - 2^-15 and Q2.14 holds -2 .. 2 - 2^-14.
    """

    key: str
    label: str
    word_bits: int
    frac_bits: int | None = None

    @property
    def fixed(self) -> bool:
        return self.frac_bits is not None

    @property
    def range(self) -> tuple[float, float]:
        if not self.fixed:
            return -math.inf, math.inf
        lsb = 2.0 ** -self.frac_bits
        half = 2 ** (self.word_bits - 1)
        return -half * lsb, (half - 1) * lsb


FORMATS = (
    NumberFormat("double", "double", 64),
    NumberFormat("single", "single", 32),
    NumberFormat("q1_15", "Q1.15", 16, 15),
    NumberFormat("q1_31", "Q1.31", 32, 31),
    NumberFormat("q2_14", "Q2.14", 16, 14),
    NumberFormat("q2_30", "Q2.30", 32, 30),
)
COEFFICIENT_NAMES = ("b0", "b1", "b2", "a1", "a2")
_NEAR_UNIT_LSB = 8
#: An arithmetic-noise floor above this (dBFS, rms) competes with the hiss the
#: filter is there to remove (engineering judgement).
NOISE_FLOOR_LIMIT_DBFS = -70.0


def quantise_sos(sos: np.ndarray, fmt: NumberFormat):
    """Round sos rows to a number format.

    Returns
    -------
    sos_q : ndarray (n, 6)
        The values the format holds (a0 = 1 kept exact: it is implied, never stored).
    integers : ndarray of int64 (n, 5) or None
        For fixed point, round(c · 2^n) of b0 b1 b2 a1 a2 (round half to even).
    overflow : list of (section index, coefficient name, value)
        Coefficients outside the format's range; non-empty means the format cannot hold them.
    """
    sos = np.asarray(sos, dtype=float)
    five = sos[:, [0, 1, 2, 4, 5]]
    if fmt.key == "double":
        return sos.copy(), None, []
    if not fmt.fixed:
        q = sos.astype(np.float32).astype(float)
        q[:, 3] = 1.0
        return q, None, []
    scale = 2.0 ** fmt.frac_bits
    ints = np.rint(five * scale)
    half = 2 ** (fmt.word_bits - 1)
    bad = (ints < -half) | (ints > half - 1)
    overflow = [(int(i), COEFFICIENT_NAMES[j], float(five[i, j])) for i, j in zip(*np.nonzero(bad))]
    ints = np.clip(ints, -half, half - 1).astype(np.int64)
    q = np.empty_like(sos)
    q[:, [0, 1, 2, 4, 5]] = ints / scale
    q[:, 3] = 1.0
    return q, ints, overflow


def pole_radius(row) -> float:
    """Largest pole magnitude of one sos row: roots of z² + a1 z + a2."""
    return float(np.max(np.abs(np.roots([1.0, row[4], row[5]])))) if row[5] != 0 else abs(float(row[4]))


def rounding_noise_gain(sos_q: np.ndarray) -> float:
    """Power gain from the rounding points of a direct-form-I cascade to its output.

    Notes
    -----
    Rounding y[n] of section k adds e_k[n] to it, so Y_k = (B_k/A_k) X_k + E_k/A_k:
    e_k reaches the output through 1/A_k(z) and every later section. Under the
    usual model of rounding noise as white and uniform, variance LSB²/12, and
    independent between sections (A. V. Oppenheim, R. W. Schafer, Discrete-Time
    Signal Processing, chapter on finite-register effects; from memory), the output
    noise power is (LSB²/12) · sum_k sum_n h_k[n]², with h_k the impulse response
    of (1/A_k) · prod_{j>k} H_j. Returned: sum_k sum_n h_k[n]² (inf if unstable).
    """
    from scipy.signal import sosfilt

    sos_q = np.asarray(sos_q, dtype=float)
    total = 0.0
    for k in range(len(sos_q)):
        rows = sos_q[k:].copy()
        rows[0, :3] = [1.0, 0.0, 0.0]
        r = max(pole_radius(row) for row in rows)
        if r >= 1.0:
            return math.inf
        # Long enough for the slowest pole to decay by e^-40.
        n = int(min(max(4096.0, 40.0 / max(1.0 - r, 1e-12)), 2 ** 21))
        imp = np.zeros(n)
        imp[0] = 1.0
        total += float(np.sum(sosfilt(rows, imp) ** 2))
    return total


def _section_equivalent(row, sec: Section, rate_hz: float, method: str) -> dict:
    """f0, Q and passband gain of a digital section, read back through the design's own s <-> z map.

    Bilinear prewarped at the section's nominal f0: s = (w0/K)(z - 1)/(z + 1), K = tan(pi f0/rate);
    matched (impulse-invariant poles): s = rate · ln z. The analog poles p1, p2 then give
    w0² = p1 p2 and w0/Q = -(p1 + p2) (a first-order section: w0 = -p). Passband gain at DC
    (low-pass) or Nyquist (high-pass). ``q`` (and for a first-order section ``f0_hz``) is None
    when the rounded poles are unstable.
    """
    w0 = 2 * math.pi * sec.f0_hz

    def to_s(z):
        z = complex(z)
        if method == "matched":
            return rate_hz * np.log(z) if z != 0 else complex(-math.inf)
        return (w0 / math.tan(math.pi * sec.f0_hz / rate_hz)) * (z - 1) / (z + 1) if z != -1 else complex(math.inf)

    zz = 1.0 if sec.kind == "lowpass" else -1.0
    num, den = row[0] + row[1] * zz + row[2], 1.0 + row[4] * zz + row[5]
    gain = abs(num / den) if den != 0 else (0.0 if num == 0 else math.inf)
    with np.errstate(all="ignore"):
        if sec.q is None or row[5] == 0:
            p = to_s(-row[4]).real
            f0, q = (-p / (2 * math.pi) if p < 0 else None), None
        else:
            p1, p2 = (to_s(z) for z in np.roots([1.0, row[4], row[5]]))
            prod, tot = (p1 * p2).real, -(p1 + p2).real
            f0 = math.sqrt(abs(prod)) / (2 * math.pi)
            q = math.sqrt(prod) / tot if prod > 0 and tot > 0 else None
    return {"f0_hz": None if f0 is None or not math.isfinite(f0) else float(f0), "q": q,
            "h0_db": 20 * math.log10(gain) if 0 < gain < math.inf else None}


@dataclass(frozen=True)
class FormatResult:
    """One number format applied to a design's sections.

    ``max_deviation_db`` is |H_q| - |H_double| in dB at the frequency of the band
    20 Hz .. min(20 kHz, 0.45 rate) where it is largest (signed): the effect of
    coefficient rounding. The rounding of the arithmetic adds noise on top; for
    fixed point ``noise_gain_db`` is its power gain to the output
    (:func:`rounding_noise_gain`) and ``noise_floor_dbfs`` the resulting output
    noise, rms in dBFS as 20·log10(rms) re full scale 1.0 (a full-scale sine reads
    -3.01 dBFS), with one rounding of LSB 2^-(W-1) per section. The white-noise
    model is an estimate: at low f0/rate successive rounding errors correlate
    and the real floor lies a few dB higher (about +3 dB measured for a 300 Hz
    section at 48 kHz in Q2.14).
    """

    format: NumberFormat
    fits: bool
    sos: np.ndarray | None = field(repr=False, compare=False)
    integers: np.ndarray | None = field(repr=False, compare=False)
    overflow: tuple = ()
    pole_radius: tuple = ()
    max_deviation_db: float | None = None
    max_deviation_hz: float | None = None
    warnings: tuple = ()
    sections: tuple = ()
    noise_gain_db: float | None = None
    noise_floor_dbfs: float | None = None

    @property
    def safe(self) -> bool:
        return self.fits and not self.warnings

    def to_dict(self) -> dict:
        fmt = self.format
        d = {"label": fmt.label, "word_bits": fmt.word_bits, "frac_bits": fmt.frac_bits,
             "range": None if not fmt.fixed else list(fmt.range), "fits": self.fits, "safe": self.safe,
             "pole_radius": max(self.pole_radius) if self.pole_radius else None,
             "max_deviation_db": self.max_deviation_db, "max_deviation_hz": self.max_deviation_hz,
             "noise_gain_db": self.noise_gain_db, "noise_floor_dbfs": self.noise_floor_dbfs,
             "warnings": list(self.warnings), "sections": []}
        for i, sec in enumerate(self.sections):
            row = {"pole_radius": self.pole_radius[i], "achieved": sec}
            if self.sos is not None:
                row["b"] = [float(x) for x in self.sos[i, :3]]
                row["a"] = [1.0, float(self.sos[i, 4]), float(self.sos[i, 5])]
            if self.integers is not None:
                row["b_int"] = [int(x) for x in self.integers[i, :3]]
                row["a_int"] = [int(x) for x in self.integers[i, 3:]]
            d["sections"].append(row)
        return d


@dataclass(frozen=True)
class Coefficients:
    """A design's digital sections in every number format, with what each format does to them."""

    design: Design
    results: tuple
    max_deviation_limit_db: float

    def result(self, key: str) -> FormatResult:
        for r in self.results:
            if r.format.key == key:
                return r
        raise KeyError(key)

    @property
    def recommended(self) -> str | None:
        """The shortest safe word, fixed point before floating point at equal length."""
        order = sorted(self.results, key=lambda r: (r.format.word_bits, not r.format.fixed))
        return next((r.format.key for r in order if r.safe), None)

    def response(self, key: str, f_hz) -> np.ndarray:
        r = self.result(key)
        if r.sos is None:
            raise BadParameter(f"format={key!r} cannot hold these coefficients")
        return sos_response(r.sos, f_hz, self.design.rate_hz)

    def to_dict(self) -> dict:
        d = self.design
        lo, hi = d.deviation_band_hz()
        ref = self.result("double")
        stages = []
        for i, (sec, row) in enumerate(zip(d.sections, d.sos), 1):
            stages.append({"index": i, "kind": sec.kind, "b": [float(x) for x in row[:3]],
                           "a": [1.0, float(row[4]), float(row[5])],
                           "target": {"f0_hz": sec.f0_hz, "q": sec.q, "h0_db": sec.gain_db},
                           "achieved": ref.sections[i - 1], "pole_radius": ref.pole_radius[i - 1]})
        single = len(d.sections) == 1
        return {
            "as": "coefficients",
            "headroom": headroom(d.sos, d.rate_hz),
            "rate_hz": d.rate_hz,
            "method": d.method,
            "target": {"f0_hz": d.f0_hz, "q": d.q, "h0_db": d.passband_gain_db, "order": d.order,
                       "alignment": d.alignment, "highpass_hz": d.highpass_hz},
            "series": None,
            "stages": stages,
            "achieved": {"f0_hz": ref.sections[0]["f0_hz"] if single else _digital_f0(d, d.sos),
                         "q": ref.sections[0]["q"] if single else None,
                         "h0_db": float(sum(s["h0_db"] for s in ref.sections if s["h0_db"] is not None))},
            "deviation_band_hz": [lo, hi],
            "max_deviation_limit_db": self.max_deviation_limit_db,
            "arithmetic": ARITHMETIC,
            "formats": {r.format.key: r.to_dict() for r in self.results},
            "recommended": self.recommended,
        }


#: The fixed-point arithmetic the integer coefficients are meant for (and the header states).
ARITHMETIC = ("direct form I per section; samples in Q1.(W-1) of the same word length W as the coefficients; "
              "acc = b0*x[n] + b1*x[n-1] + b2*x[n-2] - a1*y[n-1] - a2*y[n-2] summed exactly in a wide "
              "accumulator (at least 2W+3 bits); y[n] = saturate((acc + 2^(F-1)) >> F) with F the coefficients' "
              "fractional bits (round half up, arithmetic shift), saturated to the W-bit sample range")


def headroom(sos, rate_hz: float) -> dict:
    """The largest gain from the input to any section's output, over 0 .. rate/2.

    A fixed-point cascade saturates at full scale after every section, so a
    section output that peaks above the input (a resonant section, a gain above
    0 dB) needs that much headroom at the input: keep the input's peak below
    -peak_gain_db dBFS (common practice, no source). This is the gain for
    steady sines; a transient can overshoot a little more (bounded by the sum of
    |h[n]|, not computed here). Returned: {"peak_gain_db",
    "peak_hz", "after_section"} (section counted from 1), the worst case.
    """
    f = np.linspace(0.0, rate_hz / 2, 8193)
    z1 = np.exp(-2j * math.pi * f / rate_hz)
    h = np.ones_like(z1)
    best = (-math.inf, 0.0, 1)
    for i, (b0, b1, b2, a0, a1, a2) in enumerate(np.asarray(sos, dtype=float), 1):
        h = h * (b0 + z1 * (b1 + z1 * b2)) / (a0 + z1 * (a1 + z1 * a2))
        g = _db(h)
        k = int(np.argmax(g))
        if g[k] > best[0]:
            best = (float(g[k]), float(f[k]), i)
    return {"peak_gain_db": best[0], "peak_hz": best[1], "after_section": best[2]}


def _digital_f0(d: Design, sos) -> float | None:
    """Overall f0 of a cascade read as in :meth:`Realisation.overall_f0_hz`: the level the design has at f0."""
    f0 = d.f0_hz
    hi = min(f0 * 10, d.rate_hz / 2 * (1 - 1e-9))
    ref = _db(sos_response(d.sos, f0, d.rate_hz)) - d.passband_gain_db
    return _crossing_hz(lambda f: _db(sos_response(sos, f, d.rate_hz)) - d.passband_gain_db, float(ref), f0 / 10, hi)


def quantise(design: Design, *, max_deviation_db: float = 0.1, formats=FORMATS) -> Coefficients:
    """The design's sections in each number format, with pole radius, deviation and warnings.

    Parameters
    ----------
    design : Design
        Digitised at its ``rate_hz`` by its ``method``; every section (rumble
        high-pass included) is carried.
    max_deviation_db : float
        A format whose response deviates from the double-precision one by more
        than this (in dB, over the deviation band) is flagged unsafe.
    formats : sequence of NumberFormat

    Notes
    -----
    Plain Q1.x words hold |c| < 1 only, but a biquad's a1 = -2 r cos(theta) and a
    low-pass b1 = 2 b0 reach 2 in magnitude (a1 -> -2 as f0/rate -> 0), so Q1.15
    and Q1.31 fit only designs near f0 ~ rate/4; Q2.14 and Q2.30 hold |c| < 2.

    A format is flagged unsafe when (a) a coefficient does not fit, (b) a pole
    lies on or outside the unit circle after rounding (unstable), (c) for fixed
    point, a2 = r² lies within 8 LSB of 1 (poles so near the circle that the
    arithmetic's rounding can sustain limit cycles or push them out: engineering
    judgement, common practice, no source), (d) the response deviates from
    the double-precision one by more than ``max_deviation_db``, or (e) for fixed
    point, the arithmetic's rounding noise at the output (see
    :func:`rounding_noise_gain`) exceeds ``NOISE_FLOOR_LIMIT_DBFS``. Low f0/rate
    puts the poles near z = 1, where rounding moves them the most and 1/A(z)
    amplifies the rounding noise the most.
    """
    if not (isinstance(max_deviation_db, (int, float)) and max_deviation_db > 0):
        raise BadParameter(f"max-deviation-db={max_deviation_db!r}: must be a positive number of dB")
    sos = design.sos
    lo, hi = design.deviation_band_hz()
    f = np.geomspace(lo, hi, 4000)
    ref_db = _db(sos_response(sos, f, design.rate_hz))
    ratio = min(s.f0_hz for s in design.sections) / design.rate_hz
    results = []
    for fmt in formats:
        q, ints, overflow = quantise_sos(sos, fmt)
        if overflow:
            lo_r, hi_r = fmt.range
            i, name, v = overflow[0]
            wider = {"q1_15": "Q2.14", "q1_31": "Q2.30"}.get(fmt.key, "a wider word")
            msg = (f"{name} of section {i + 1} = {v:+.6f} lies outside {fmt.label}'s range {lo_r:g} .. "
                   f"{hi_r:.10g}" + (f" ({len(overflow)} coefficients in all)" if len(overflow) > 1 else "")
                   + (f"; a biquad's b1 and a1 reach 2 in magnitude: use {wider}" if fmt.frac_bits else ""))
            results.append(FormatResult(fmt, False, None, None, tuple(overflow), (), None, None, (msg,), ()))
            continue
        radii = tuple(pole_radius(row) for row in q)
        with np.errstate(invalid="ignore"):
            dev = _db(sos_response(q, f, design.rate_hz)) - ref_db
        warn = []
        if np.all(np.isfinite(dev)):
            k = int(np.argmax(np.abs(dev)))
            dev_db, dev_hz = float(dev[k]), float(f[k])
        else:
            dev_db = dev_hz = None
            warn.append("the rounded filter passes nothing or has no bound somewhere in the band (a numerator "
                        f"rounded to zero or a pole on the unit circle; f0/rate = {ratio:.2g})")
        rmax = max(radii)
        if rmax >= 1.0:
            warn.append(f"unstable: a pole at radius {rmax:.6f} >= 1 after rounding (f0/rate = {ratio:.2g})")
        elif fmt.fixed:
            a2max = max(abs(row[5]) for row in q)
            if 1.0 - a2max < _NEAR_UNIT_LSB * 2.0 ** -fmt.frac_bits:
                warn.append(f"poles within {_NEAR_UNIT_LSB} LSB of the unit circle (radius {rmax:.6f}, "
                            f"f0/rate = {ratio:.2g}): rounding in the arithmetic can sustain limit cycles")
        if dev_db is not None and not abs(dev_db) <= max_deviation_db:
            warn.append(f"response deviates {dev_db:+.3f} dB at {dev_hz:,.0f} Hz from double precision "
                        f"(limit {max_deviation_db:g} dB; f0/rate = {ratio:.2g})")
        gain_db = floor_dbfs = None
        if fmt.fixed:
            g = rounding_noise_gain(q)
            if math.isfinite(g):
                lsb = 2.0 ** -(fmt.word_bits - 1)
                gain_db = 10.0 * math.log10(g)
                floor_dbfs = 10.0 * math.log10(lsb * lsb / 12.0 * g)
                if floor_dbfs > NOISE_FLOOR_LIMIT_DBFS:
                    warn.append(f"the arithmetic's rounding noise is amplified {gain_db:.1f} dB to "
                                f"{floor_dbfs:.1f} dBFS rms (limit {NOISE_FLOOR_LIMIT_DBFS:g} dBFS; "
                                f"f0/rate = {ratio:.2g}): use a 32-bit word")
        secs = tuple(_section_equivalent(row, s, design.rate_hz, design.method) for row, s in zip(q, design.sections))
        results.append(FormatResult(fmt, True, q, ints, (), radii, dev_db, dev_hz, tuple(warn), secs, gain_db,
                                    floor_dbfs))
    return Coefficients(design, tuple(results), float(max_deviation_db))
