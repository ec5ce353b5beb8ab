"""Realise a design at the bench: standard parts for an analog circuit, or DSP coefficients.

Three targets, named as the trade names them::

    design ──► series-rlc     passive R–L–C ladder section per second-order section
           ──► sallen-key     unity-gain Sallen–Key active section per second-order section
           ──► coefficients   the digital sections in double, single and fixed-point words

Analog targets realise the low-pass sections of a design, one stage per section,
and assume the stages are buffered from each other (each stage driven from a
near-zero impedance and looking into a near-infinite one, as an op-amp follower
between stages gives). The source impedance therefore belongs to the first
stage and the load to the last. A first-order section becomes an RC section. A
rumble high-pass, if the design has one, is not realised by the analog targets
(it is listed as omitted); the coefficients target carries every section.

Part values are IEC 60063 preferred numbers. The values are not snapped one by
one to the nearest preferred number: the whole combination is chosen that
minimises the combined logarithmic error

.. math:: e = \\ln^2(f_0/f_{0,t}) + \\ln^2(Q/Q_t) + w \\ln^2(Z/Z_\\mathrm{nom})
          \\;[+\\, w \\ln^2(R_1/R_2)],\\quad w = 10^{-5}

over a window of neighbouring preferred values around an ideal design at a
practical impedance level Z_nom. The small weight w (engineering judgement)
keeps the parts practical: straying a factor 2 from Z_nom costs as much as a
0.2 % error in f0, and a Sallen–Key stage pays the same for unequal resistors.

All functions are pure: they take numbers and return numbers, arrays and small
frozen dataclasses; nothing here prints or touches a file.
"""

from __future__ import annotations

import functools
import math
import re
from dataclasses import dataclass, field

import numpy as np

from audition.design import Design, Section, sos_response
from audition.errors import BadParameter

# ---------------------------------------------------------------------------
# IEC 60063 preferred numbers
# ---------------------------------------------------------------------------

#: IEC 60063:2015 preferred-number series, one decade, as mantissas in [1, 10).
#: E6 and E12 are every second value of E12 and E24; E96 is round(10^(i/96)) to
#: three figures; E24 keeps its historical values (2.7 ... 4.7 and 8.2).
E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
       3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
E96 = tuple(v / 100.0 for v in (
    100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130, 133, 137, 140, 143,
    147, 150, 154, 158, 162, 165, 169, 174, 178, 182, 187, 191, 196, 200, 205, 210,
    215, 221, 226, 232, 237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
    316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412, 422, 432, 442, 453,
    464, 475, 487, 499, 511, 523, 536, 549, 562, 576, 590, 604, 619, 634, 649, 665,
    681, 698, 715, 732, 750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976))
SERIES = {"E6": E6, "E12": E12, "E24": E24, "E96": E96}

TARGETS = ("series-rlc", "sallen-key", "coefficients")
CAUTION = ("Caution: mains-powered gear and any voltage above a few volts need the usual electrical safety; "
           "defer to local codes and licensed practice.")
#: Default impedance levels (engineering judgement): 600 ohm, the classic line
#: impedance, for sqrt(L/C) of a passive section; 10 kohm for an op-amp section's
#: resistors (low enough for low noise, high enough for an easy load).
DEFAULT_IMPEDANCE_OHM = {"series-rlc": 600.0, "sallen-key": 10000.0}
#: The impedance levels accepted (engineering judgement): below 1 ohm the wiring and
#: the parts' own resistance take over, above 10 Mohm stray capacitance and leakage.
IMPEDANCE_RANGE_OHM = (1.0, 1e7)
#: The lowest section f0 an analog target accepts: below it the parts run to
#: kilohenries and farads (engineering judgement).
ANALOG_MIN_F0_HZ = 1.0
#: Tolerance classes summarised side by side (the usual classes of resistors and capacitors).
TOLERANCE_CLASSES_PCT = (1.0, 2.0, 5.0, 10.0)
#: The audio band over which the real response is compared with the target.
ANALOG_BAND_HZ = (20.0, 20000.0)
_TIE_WEIGHT = 1e-5
_DECADES = range(-15, 10)  # 1 fF .. 9.1 GF: every value a part can have in practice and more


def check_series(name: str) -> str:
    """The canonical name of a preferred-number series ("e24" -> "E24")."""
    key = str(name).upper()
    if key not in SERIES:
        raise BadParameter(f"series={name!r}: allowed are {', '.join(SERIES)} (IEC 60063 preferred numbers)")
    return key


@functools.lru_cache(maxsize=None)
def ladder(series: str) -> np.ndarray:
    """Every value of a series over many decades, ascending, as exact decimals (4.7e-09, not 4.7000000000000004e-09)."""
    mant = SERIES[check_series(series)]
    out = np.array([float(f"{m:g}e{k}") for k in _DECADES for m in mant])
    out.setflags(write=False)
    return out


def nearest_preferred(value: float, series: str) -> float:
    """The value of ``series`` nearest to ``value`` on a logarithmic scale."""
    lad = ladder(series)
    i = int(np.argmin(np.abs(np.log(lad / value))))
    return float(lad[i])


def _window(series: str, lo: float, hi: float, what: str = "a part") -> np.ndarray:
    lad = ladder(series)
    out = lad[(lad >= lo * (1 - 1e-12)) & (lad <= hi * (1 + 1e-12))]
    if out.size == 0:
        raise BadParameter(f"no {series} value for {what} between {lo:.3g} and {hi:.3g} (SI units): the ideal part "
                           f"lies outside {lad[0]:g} .. {lad[-1]:g}; choose another --impedance-ohm")
    return out


def _around(series: str, values: np.ndarray, n: int = 3) -> np.ndarray:
    """The n preferred values below and n above each of ``values``: shape values.shape + (2n,)."""
    lad = ladder(series)
    v = np.where(np.isfinite(values) & (values > 0), values, lad[0])
    i = np.searchsorted(lad, v)
    idx = np.clip(i[..., None] + np.arange(-n, n), 0, lad.size - 1)
    return lad[idx]


# ---------------------------------------------------------------------------
# Circuit figures (vectorised over arrays of part values)
# ---------------------------------------------------------------------------


def series_rlc(r_ohm, l_henry, c_farad, *, source_ohm=0.0, load_ohm=None):
    """(f0_hz, q, h0) of a series RLC low-pass with output across C, driven and loaded.

    Parameters
    ----------
    r_ohm, l_henry, c_farad : float or array
        The series resistor, the series inductor and the shunt capacitor.
    source_ohm : float
        Source (output) impedance of whatever drives the section, resistive; it
        adds to R.
    load_ohm : float or None
        Resistive load across C (the next input); ``None`` for an open output.

    Notes
    -----
    Nodal analysis at the output node V with Rt = Rs + R and the load RL across C:
    (Vin - V) / (Rt + sL) = V (sC + 1/RL), so

    .. math:: H(s) = \\frac{1}{LC\\,s^2 + (R_t C + L/R_L)\\,s + 1 + R_t/R_L}

    giving, with k = 1 + Rt/RL,

    .. math:: H_0 = 1/k,\\quad \\omega_0 = \\sqrt{k/(LC)},\\quad
              Q = \\frac{\\sqrt{k\\,LC}}{R_t C + L/R_L}

    Unloaded (RL -> infinity): omega0 = 1/sqrt(LC), Q = (1/Rt) sqrt(L/C), H0 = 1
    (circuit theory). A load lowers H0 and, through L/RL, damps the section.
    """
    r, l, c = (np.asarray(x, dtype=float) for x in (r_ohm, l_henry, c_farad))
    rt = r + source_ohm
    if load_ohm is None:
        k, damp = 1.0, rt * c
    else:
        k, damp = 1.0 + rt / load_ohm, rt * c + l / load_ohm
    w0 = np.sqrt(k / (l * c))
    return w0 / (2 * math.pi), w0 * l * c / damp, 1.0 / k + 0.0 * w0


def rc_lowpass(r_ohm, c_farad, *, source_ohm=0.0, load_ohm=None):
    """(f0_hz, h0) of an RC low-pass (R in series, output across C), driven and loaded.

    Notes
    -----
    H(s) = 1 / (1 + Rt (sC + 1/RL)) = (1/k) / (1 + s C (Rt || RL)), k = 1 + Rt/RL, so
    H0 = 1/k and omega0 = 1 / (C (Rt || RL)) with Rt = Rs + R (circuit theory).
    """
    r, c = (np.asarray(x, dtype=float) for x in (r_ohm, c_farad))
    rt = r + source_ohm
    k = 1.0 if load_ohm is None else 1.0 + rt / load_ohm
    return k / (rt * c) / (2 * math.pi), 1.0 / k + 0.0 * rt


def sallen_key(r1_ohm, r2_ohm, c1_farad, c2_farad, *, source_ohm=0.0):
    """(f0_hz, q) of a unity-gain Sallen–Key low-pass.

    The circuit: input -> R1 -> node A -> R2 -> node B = non-inverting input of
    an op-amp wired as a follower (output = B); C1 from A to the output (the
    feedback capacitor), C2 from B to ground.

    Notes
    -----
    Nodal analysis with an ideal op-amp (V_out = V_B):
    at B, (V_B - V_A)/R2 + sC2 V_B = 0, so V_A = V_B (1 + sR2C2); at A,
    (V_A - V_in)/R1 + (V_A - V_B)/R2 + sC1 (V_A - V_out) = 0, which gives

    .. math:: H(s) = \\frac{1}{R_1 R_2 C_1 C_2 s^2 + C_2 (R_1 + R_2) s + 1}

    .. math:: f_0 = \\frac{1}{2\\pi\\sqrt{R_1 R_2 C_1 C_2}},\\quad
              Q = \\frac{\\sqrt{R_1 R_2 C_1 C_2}}{C_2 (R_1 + R_2)},\\quad H_0 = 1

    A source impedance adds to R1. With R1 = R2 the ratio C1/C2 = 4 Q².

    References
    ----------
    R. P. Sallen, E. L. Key, "A practical method of designing RC active filters",
    IRE Trans. Circuit Theory CT-2 (1955) 74-85 (from memory); J. Karki, "Analysis
    of the Sallen-Key architecture", Texas Instruments SLOA024 (from memory).
    """
    r1, r2, c1, c2 = (np.asarray(x, dtype=float) for x in (r1_ohm, r2_ohm, c1_farad, c2_farad))
    r1 = r1 + source_ohm
    rrcc = np.sqrt(r1 * r2 * c1 * c2)
    return 1.0 / (2 * math.pi * rrcc), rrcc / (c2 * (r1 + r2))


def lowpass_response(f_hz, f0_hz, q, h0):
    """Complex H(j 2 pi f) = h0 w0² / (s² + (w0/Q) s + w0²), or h0 w0 / (s + w0) for q None.

    ``f0_hz``, ``q`` and ``h0`` may be arrays (e.g. Monte Carlo trials, shape (n, 1))
    that broadcast against ``f_hz``.
    """
    s = 2j * math.pi * np.asarray(f_hz, dtype=float)
    w0 = 2 * math.pi * np.asarray(f0_hz, dtype=float)
    h0 = np.asarray(h0, dtype=float)
    if q is None:
        return h0 * w0 / (s + w0)
    return h0 * w0 * w0 / (s * s + (w0 / np.asarray(q, dtype=float)) * s + w0 * w0)


def _stage_figures(topology, parts, source_ohm, load_ohm):
    """(f0, q or None, h0) of one stage from its parts (arrays allowed)."""
    if topology == "series-rlc":
        return series_rlc(parts["r_ohm"], parts["l_henry"], parts["c_farad"], source_ohm=source_ohm,
                          load_ohm=load_ohm)
    if topology == "sallen-key":
        f0, q = sallen_key(parts["r1_ohm"], parts["r2_ohm"], parts["c1_farad"], parts["c2_farad"],
                           source_ohm=source_ohm)
        return f0, q, np.ones_like(f0)
    f0, h0 = rc_lowpass(parts["r_ohm"], parts["c_farad"], source_ohm=source_ohm, load_ohm=load_ohm)
    return f0, None, h0


# ---------------------------------------------------------------------------
# Stages and realisations
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Stage:
    """One realised stage: its topology, its preferred-value parts and what they give.

    ``topology`` is "series-rlc", "rc" (passive first order), "sallen-key" or
    "buffered-rc" (first order followed by an op-amp follower). ``parts`` maps
    keys that carry the unit ("r_ohm", "l_henry", "c_farad", "r1_ohm", ...) to SI
    values; ``ideal`` the same keys before rounding to preferred values;
    ``nearest`` the same keys rounded one by one (for comparison only).
    """

    topology: str
    target: Section
    parts: dict
    ideal: dict
    nearest: dict
    source_ohm: float = 0.0
    load_ohm: float | None = None

    def figures(self, parts: dict | None = None):
        """(f0_hz, q or None, h0) of the stage with its parts (or with ``parts`` given)."""
        return _stage_figures(self.topology, self.parts if parts is None else parts, self.source_ohm, self.load_ohm)

    @property
    def f0_hz(self) -> float:
        return float(self.figures()[0])

    @property
    def q(self) -> float | None:
        q = self.figures()[1]
        return None if q is None else float(q)

    @property
    def h0(self) -> float:
        return float(self.figures()[2])

    def response(self, f_hz) -> np.ndarray:
        f0, q, h0 = self.figures()
        return lowpass_response(f_hz, f0, q, h0)

    @property
    def series_r_key(self) -> str:
        """The part the source impedance adds to: "r1_ohm" of a Sallen–Key stage, else "r_ohm"."""
        return "r1_ohm" if "r1_ohm" in self.parts else "r_ohm"

    def figures_with(self, *, source: bool = True, load: bool = True):
        """(f0_hz, q or None, h0) of the same parts with the source and/or the load taken away.

        Set beside :meth:`figures` it shows what each does: the source adds to
        the series R (lower Q in a series RLC stage, lower f0 and another Q in a
        Sallen–Key stage); a load across C lowers H0 to RL/(RL + Rt), raises f0
        by sqrt(k), k = 1 + Rt/RL, and changes Q (see :func:`series_rlc`).
        """
        return _stage_figures(self.topology, self.parts, self.source_ohm if source else 0.0,
                              self.load_ohm if load else None)

    def errors(self, parts: dict | None = None) -> dict:
        """f0 and Q error in percent and H0 error in dB against the target section."""
        f0, q, h0 = self.figures(parts)
        t = self.target
        return {
            "f0_pct": (float(f0) / t.f0_hz - 1.0) * 100.0,
            "q_pct": None if q is None else (float(q) / t.q - 1.0) * 100.0,
            "h0_db": 20.0 * math.log10(float(h0)) - t.gain_db,
        }


@dataclass(frozen=True)
class Realisation:
    """An analog realisation of the low-pass sections of a design.

    Attributes
    ----------
    topology : {"series-rlc", "sallen-key"}
    design : Design
        What was asked for.
    stages : tuple of Stage
        One per low-pass section, in the design's order (least peaking first).
    series : dict
        Preferred-number series per kind of part, e.g. {"resistor": "E24", ...}.
    impedance_ohm : float
        Nominal impedance level: sqrt(L/C) of a series RLC stage, the geometric
        mean of R1 and R2 of a Sallen–Key stage, R of an RC stage.
    source_ohm, load_ohm : float, float or None
    omitted : tuple of Section
        Sections of the design this target does not realise (a rumble high-pass).
    """

    topology: str
    design: Design
    stages: tuple
    series: dict
    impedance_ohm: float
    source_ohm: float = 0.0
    load_ohm: float | None = None
    omitted: tuple = ()

    @property
    def target_sections(self) -> tuple:
        return tuple(s.target for s in self.stages)

    def target_response(self, f_hz) -> np.ndarray:
        """The analog prototype of the realised (low-pass) sections."""
        h = np.ones(np.shape(f_hz), dtype=complex)
        for s in self.target_sections:
            h = h * s.analog_response(f_hz)
        return h

    def response(self, f_hz) -> np.ndarray:
        """The real circuit with its preferred-value parts, stages buffered from each other."""
        h = np.ones(np.shape(f_hz), dtype=complex)
        for st in self.stages:
            h = h * st.response(f_hz)
        return h

    @property
    def target_h0_db(self) -> float:
        return float(sum(s.gain_db for s in self.target_sections))

    @property
    def h0_db(self) -> float:
        return float(sum(20.0 * math.log10(st.h0) for st in self.stages))

    def max_deviation(self, band_hz=ANALOG_BAND_HZ) -> tuple[float, float]:
        """(dB, Hz): the largest |real| - |target| magnitude difference over the band (signed)."""
        f = np.geomspace(band_hz[0], band_hz[1], 2000)
        dev = _db(self.response(f)) - _db(self.target_response(f))
        i = int(np.argmax(np.abs(dev)))
        return float(dev[i]), float(f[i])

    def overall_f0_hz(self) -> tuple[float, float | None]:
        """(target, achieved) overall f0 in Hz.

        One stage: its f0. A cascade: the highest frequency at which the response,
        relative to its own H0, has fallen to the level the target has at the
        design f0 (-3.01 dB for Butterworth and Bessel, -6.02 dB for
        Linkwitz-Riley), for the target and for the real circuit alike.
        """
        if len(self.stages) == 1:
            return self.stages[0].target.f0_hz, self.stages[0].f0_hz
        f0 = self.design.f0_hz
        level = float(_db(self.target_response(f0))) - self.target_h0_db
        t = _crossing_hz(lambda f: _db(self.target_response(f)) - self.target_h0_db, level, f0 / 10, f0 * 10)
        a = _crossing_hz(lambda f: _db(self.response(f)) - self.h0_db, level, f0 / 10, f0 * 10)
        return (f0 if t is None else t), a

    def to_dict(self) -> dict:
        """A JSON-ready report: target, stages with parts and figures, overall figures."""
        d = self.design
        t_f0, a_f0 = self.overall_f0_hz()
        single = len(self.stages) == 1
        dev_db, dev_hz = self.max_deviation()
        stages = []
        for i, st in enumerate(self.stages, 1):
            f0, q, h0 = st.figures()
            nf0, nq, _ = st.figures(st.nearest)
            stages.append({
                "index": i,
                "topology": st.topology,
                "order": st.target.order,
                **{k: float(v) for k, v in st.parts.items()},
                "source_ohm": st.source_ohm,
                "load_ohm": st.load_ohm,
                "target": {"f0_hz": st.target.f0_hz, "q": st.target.q, "h0_db": st.target.gain_db},
                "achieved": _figures_dict(f0, q, h0),
                "error": st.errors(),
                "r_total_ohm": float(st.parts[st.series_r_key]) + st.source_ohm,
                "without_load": _figures_dict(*st.figures_with(load=False)),
                "without_source": _figures_dict(*st.figures_with(source=False)),
                "without_source_and_load": _figures_dict(*st.figures_with(source=False, load=False)),
                "ideal": {k: float(v) for k, v in st.ideal.items()},
                "nearest_of_each": {"parts": {k: float(v) for k, v in st.nearest.items()},
                                    "error": st.errors(st.nearest)},
            })
        target_f0 = d.f0_hz if not single else t_f0
        return {
            "as": self.topology,
            "target": {"f0_hz": target_f0, "q": self.stages[0].target.q if single else d.q,
                       "h0_db": self.target_h0_db, "order": sum(s.order for s in self.target_sections),
                       "alignment": d.alignment},
            "series": dict(self.series),
            "impedance_ohm": self.impedance_ohm,
            "source_ohm": self.source_ohm,
            "load_ohm": self.load_ohm,
            "stages": stages,
            "achieved": {"f0_hz": a_f0, "q": self.stages[0].q if single else None, "h0_db": self.h0_db,
                         "max_deviation_db": dev_db, "max_deviation_hz": dev_hz,
                         "deviation_band_hz": list(ANALOG_BAND_HZ)},
            "error": {"f0_pct": None if a_f0 is None else (a_f0 / t_f0 - 1.0) * 100.0,
                      "q_pct": stages[0]["error"]["q_pct"] if single else None,
                      "h0_db": self.h0_db - self.target_h0_db},
            "omitted": [{"kind": s.kind, "f0_hz": s.f0_hz, "q": s.q} for s in self.omitted],
            "notes": self.notes(),
            "caution": CAUTION,
        }

    def notes(self) -> list[str]:
        """Plain statements of what the figures assume, and practical remarks on the parts."""
        out = []
        want = self.target_h0_db
        if abs(want) > 1e-9:
            can = ("a unity-gain Sallen–Key stage gives 0 dB" if self.topology == "sallen-key"
                   else "a passive stage gives at most 0 dB")
            out.append(f"the design asks H0 {want:+.2f} dB but {can}: add a gain stage of {want - self.h0_db:+.2f} dB "
                       "or leave --gain-db out")
        if len(self.stages) > 1:
            out.append("stages are assumed buffered from each other (e.g. an op-amp follower between them): "
                       "the source drives the first stage only and the load hangs on the last")
        if self.topology == "sallen-key":
            out.append("ideal op-amp assumed (gain-bandwidth well above f0·Q·100); the op-amp output drives the "
                       "load, so the load does not change the response")
        for s in self.omitted:
            out.append(f"the rumble {s.kind} at {s.f0_hz:g} Hz is not realised by this target: build it "
                       "separately or realise it as coefficients")
        for i, st in enumerate(self.stages, 1):
            for k, v in st.parts.items():
                if k.endswith("_henry") and v > 0.1:
                    out.append(f"stage {i}: L = {v:.3g} H is large (size, hum pick-up, core distortion): "
                               "a lower --impedance-ohm or an active stage may serve better")
                if k.endswith("_farad") and v < 100e-12:
                    out.append(f"stage {i}: {k.split('_')[0].upper()} = {v:.3g} F is small enough for stray "
                               "capacitance to matter: raise the frequency-setting C or lower the impedance")
                if k.endswith("_ohm") and self.topology == "sallen-key" and not 100.0 <= v <= 1e6:
                    out.append(f"stage {i}: {k.split('_')[0].upper()} = {v:.3g} ohm is outside 100 ohm .. 1 Mohm, "
                               "awkward for an op-amp stage")
        return out


def _figures_dict(f0, q, h0) -> dict:
    return {"f0_hz": float(f0), "q": None if q is None else float(q), "h0_db": 20.0 * math.log10(float(h0))}


def _cost(f0, q, f0_t, q_t, z, z_nom):
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.log(f0 / f0_t) ** 2 + _TIE_WEIGHT * np.log(z / z_nom) ** 2
        if q_t is not None:
            c = c + np.log(q / q_t) ** 2
    return np.where(np.isfinite(c), c, np.inf)


def _best(cost, arrays: dict) -> dict:
    i = int(np.argmin(cost))
    if not np.isfinite(cost.flat[i]):
        return {}
    return {k: float(np.broadcast_to(v, cost.shape).flat[i]) for k, v in arrays.items()}


def _rt_for_q(z, q, load_ohm):
    """Total series resistance Rt giving Q for a series RLC of sqrt(L/C) = z into load RL.

    Notes
    -----
    From Q = sqrt(k)/(Rt/z + z/RL) with k = 1 + Rt/RL (see :func:`series_rlc`), with
    u = Rt/z and g = z/RL: Q²u² + (2Q² - 1) g u + Q² g² - 1 = 0, whose larger root is
    u = [-(2Q² - 1) g + sqrt(4Q² + (1 - 4Q²) g²)] / (2Q²); unloaded (g = 0) u = 1/Q.
    NaN where no real root exists.
    """
    z = np.asarray(z, dtype=float)
    if load_ohm is None:
        return z / q
    g = z / load_ohm
    disc = 4 * q * q + (1 - 4 * q * q) * g * g
    with np.errstate(invalid="ignore"):
        u = (-(2 * q * q - 1) * g + np.sqrt(disc)) / (2 * q * q)
    return np.where(disc >= 0, u * z, np.nan)


def _realise_rc(sec: Section, *, r_series, c_series, impedance_ohm, source_ohm, load_ohm, topology) -> Stage:
    w0 = 2 * math.pi * sec.f0_hz

    def c_for(r):
        rt = r + source_ohm
        rp = rt if load_ohm is None else rt * load_ohm / (rt + load_ohm)
        return 1.0 / (w0 * rp)

    r_ideal = impedance_ohm
    rs = _window(r_series, impedance_ohm / 2, impedance_ohm * 2, "R")
    cs = _around(c_series, c_for(rs))
    rr = rs[:, None]
    f0, _ = rc_lowpass(rr, cs, source_ohm=source_ohm, load_ohm=load_ohm)
    best = _best(_cost(f0, None, sec.f0_hz, None, rr, impedance_ohm), {"r_ohm": rr, "c_farad": cs})
    ideal = {"r_ohm": r_ideal, "c_farad": c_for(r_ideal)}
    nearest = {"r_ohm": nearest_preferred(ideal["r_ohm"], r_series),
               "c_farad": nearest_preferred(ideal["c_farad"], c_series)}
    return Stage(topology, sec, best, ideal, nearest, source_ohm, load_ohm)


def _realise_rlc(sec: Section, *, r_series, c_series, l_series, impedance_ohm, source_ohm, load_ohm) -> Stage:
    w0 = 2 * math.pi * sec.f0_hz
    q = sec.q
    z0 = impedance_ohm
    rt0 = float(_rt_for_q(z0, q, load_ohm))
    if not (math.isfinite(rt0) and rt0 > source_ohm):
        raise BadParameter(_rlc_infeasible(sec, z0, source_ohm, load_ohm))
    k0 = 1.0 if load_ohm is None else 1.0 + rt0 / load_ohm
    # sqrt(LC) = sqrt(k)/w0 keeps f0 with the load; sqrt(L/C) = z0 sets the level.
    l0, c0 = z0 * math.sqrt(k0) / w0, math.sqrt(k0) / (w0 * z0)
    ideal = {"r_ohm": rt0 - source_ohm, "l_henry": l0, "c_farad": c0}
    ls = _window(l_series, l0 / 2, l0 * 2, "L")[:, None, None]
    cs = _window(c_series, c0 / 2, c0 * 2, "C")[None, :, None]
    z = np.sqrt(ls / cs)
    r_need = _rt_for_q(z, q, load_ohm) - source_ohm
    rs = _around(r_series, r_need[..., 0])
    f0, qq, _ = series_rlc(rs, ls, cs, source_ohm=source_ohm, load_ohm=load_ohm)
    cost = _cost(f0, qq, sec.f0_hz, q, z, z0)
    cost = np.where((r_need > 0) & np.isfinite(r_need), cost, np.inf)
    best = _best(cost, {"r_ohm": rs, "l_henry": ls, "c_farad": cs})
    if not best:
        raise BadParameter(_rlc_infeasible(sec, z0, source_ohm, load_ohm))
    nearest = {"r_ohm": nearest_preferred(ideal["r_ohm"], r_series),
               "l_henry": nearest_preferred(l0, l_series), "c_farad": nearest_preferred(c0, c_series)}
    return Stage("series-rlc", sec, best, ideal, nearest, source_ohm, load_ohm)


def _rlc_infeasible(sec, z0, source_ohm, load_ohm) -> str:
    return (f"series RLC stage f0={sec.f0_hz:g} Hz, Q={sec.q:.4g} at impedance-ohm={z0!r}: the source "
            f"(source-ohm={source_ohm!r}) and load (load-ohm={load_ohm!r}) alone damp it below that Q; "
            "lower --impedance-ohm, raise --load-ohm or lower --source-ohm")


def _realise_sk(sec: Section, *, r_series, c_series, impedance_ohm, source_ohm) -> Stage:
    w0 = 2 * math.pi * sec.f0_hz
    q = sec.q
    rn = impedance_ohm
    # Equal-resistor design: R1 = R2 = R, C1/C2 = 4Q² (see sallen_key).
    c1_0, c2_0 = 2 * q / (w0 * rn), 1.0 / (2 * q * w0 * rn)
    ideal = {"r1_ohm": rn - source_ohm, "r2_ohm": rn, "c1_farad": c1_0, "c2_farad": c2_0}
    if ideal["r1_ohm"] <= 0:
        raise BadParameter(f"source-ohm={source_ohm!r}: the source impedance exceeds the Sallen-Key input "
                           f"resistor at impedance-ohm={rn!r}; raise --impedance-ohm above the source impedance")
    c1 = _window(c_series, c1_0 / 3, c1_0 * 3, "C1")[:, None]
    c2 = _window(c_series, c2_0 / 3, c2_0 * 3, "C2")[None, :]
    prod = 1.0 / (w0 * w0 * c1 * c2)  # R1t R2
    tot = 1.0 / (w0 * q * c2)  # R1t + R2
    disc = tot * tot - 4 * prod
    root = np.sqrt(np.maximum(disc, 0.0))
    # No real pair: R1 = R2 = sqrt(R1 R2) comes nearest the wanted Q.
    r1t = np.where(disc >= 0, (tot + root) / 2, np.sqrt(prod))
    r2i = np.where(disc >= 0, (tot - root) / 2, np.sqrt(prod))
    r1i = r1t - source_ohm
    r1 = _around(r_series, r1i)[..., :, None]
    r2 = _around(r_series, r2i)[..., None, :]
    c1b, c2b = c1[..., None, None], c2[..., None, None]
    f0, qq = sallen_key(r1, r2, c1b, c2b, source_ohm=source_ohm)
    cost = _cost(f0, qq, sec.f0_hz, q, np.sqrt(r1 * r2), rn) + _TIE_WEIGHT * np.log(r1 / r2) ** 2
    cost = np.where((r1i > 0)[..., None, None], cost, np.inf)
    best = _best(cost, {"r1_ohm": r1, "r2_ohm": r2, "c1_farad": c1b, "c2_farad": c2b})
    if not best:
        raise BadParameter(f"no Sallen-Key combination for f0={sec.f0_hz:g} Hz, Q={q:.4g} at "
                           f"impedance-ohm={rn!r}, source-ohm={source_ohm!r}")
    nearest = {k: nearest_preferred(v, r_series if k.endswith("_ohm") else c_series) for k, v in ideal.items()}
    return Stage("sallen-key", sec, best, ideal, nearest, source_ohm, None)


def _check_impedances(impedance_ohm, source_ohm, load_ohm):
    if not (isinstance(impedance_ohm, (int, float)) and math.isfinite(impedance_ohm) and impedance_ohm > 0):
        raise BadParameter(f"impedance-ohm={impedance_ohm!r}: must be a positive number of ohms")
    lo, hi = IMPEDANCE_RANGE_OHM
    if not lo <= impedance_ohm <= hi:
        raise BadParameter(f"impedance-ohm={impedance_ohm!r}: must lie within {lo:g} .. {hi:g} ohm (below, wiring and "
                           "the parts' own resistance take over; above, stray capacitance and leakage)")
    if not (isinstance(source_ohm, (int, float)) and math.isfinite(source_ohm) and source_ohm >= 0):
        raise BadParameter(f"source-ohm={source_ohm!r}: must be 0 or a positive number of ohms")
    if load_ohm is not None and not (isinstance(load_ohm, (int, float)) and load_ohm > 0 and not math.isnan(load_ohm)):
        raise BadParameter(f"load-ohm={load_ohm!r}: must be a positive number of ohms "
                           "(leave it out for an open output)")
    return float(impedance_ohm), float(source_ohm), None if load_ohm in (None, math.inf) else float(load_ohm)


def _split(design: Design):
    lows = tuple(s for s in design.sections if s.kind == "lowpass")
    if not lows:
        raise BadParameter("the design has no low-pass section to realise as a circuit")
    for s in lows:
        if s.f0_hz < ANALOG_MIN_F0_HZ:
            raise BadParameter(f"f0={s.f0_hz!r} Hz: an analog target needs f0 >= {ANALOG_MIN_F0_HZ:g} Hz (below it "
                               "the parts run to kilohenries and farads)")
    return lows, tuple(s for s in design.sections if s.kind != "lowpass")


def realise_series_rlc(design: Design, *, series: str = "E24", cap_series: str | None = None,
                       inductor_series: str = "E12", impedance_ohm: float = 600.0, source_ohm: float = 0.0,
                       load_ohm: float | None = None) -> Realisation:
    """Passive series RLC stages (R and L in series, output across C), one per low-pass section.

    Parameters
    ----------
    design : Design
    series, cap_series, inductor_series : {"E6", "E12", "E24", "E96"}
        Preferred-number series of the resistors, capacitors (default: ``series``)
        and inductors (default E12: inductors seldom come finer).
    impedance_ohm : float
        Characteristic impedance sqrt(L/C) of each second-order stage, and R of a
        first-order (RC) stage.
    source_ohm : float
        Source impedance driving the first stage; it adds to that stage's R.
    load_ohm : float or None
        Load across the last stage's C; ``None`` (or inf) for an open output.

    Returns
    -------
    Realisation

    Notes
    -----
    The ideal parts at impedance z0 with load: Rt from :func:`_rt_for_q`,
    k = 1 + Rt/RL, L = z0 sqrt(k)/w0, C = sqrt(k)/(w0 z0), R = Rt - Rs. The search
    takes every preferred L and C within a factor 2 of those and, for each pair,
    the three preferred R below and above the R that gives the target Q with that
    pair, and keeps the combination of least combined error (module docstring).
    H0 = RL/(RL + Rt) cannot be trimmed by the parts: its error is reported.

    Raises
    ------
    BadParameter
        For a bad series or impedance, or a source and load that alone damp a
        section below its Q.
    """
    series = check_series(series)
    cap_series = check_series(cap_series or series)
    inductor_series = check_series(inductor_series)
    impedance_ohm, source_ohm, load_ohm = _check_impedances(impedance_ohm, source_ohm, load_ohm)
    lows, omitted = _split(design)
    stages = []
    for i, sec in enumerate(lows):
        rs = source_ohm if i == 0 else 0.0
        rl = load_ohm if i == len(lows) - 1 else None
        if sec.q is None:
            stages.append(_realise_rc(sec, r_series=series, c_series=cap_series, impedance_ohm=impedance_ohm,
                                      source_ohm=rs, load_ohm=rl, topology="rc"))
        else:
            stages.append(_realise_rlc(sec, r_series=series, c_series=cap_series, l_series=inductor_series,
                                       impedance_ohm=impedance_ohm, source_ohm=rs, load_ohm=rl))
    return Realisation("series-rlc", design, tuple(stages),
                       {"resistor": series, "capacitor": cap_series, "inductor": inductor_series},
                       impedance_ohm, source_ohm, load_ohm, omitted)


def realise_sallen_key(design: Design, *, series: str = "E24", cap_series: str | None = None,
                       impedance_ohm: float = 10000.0, source_ohm: float = 0.0,
                       load_ohm: float | None = None) -> Realisation:
    """Unity-gain Sallen–Key stages, one per second-order low-pass section.

    A first-order section becomes an RC followed by an op-amp follower
    ("buffered-rc"). See :func:`sallen_key` for the circuit and its equations.

    Parameters
    ----------
    design : Design
    series, cap_series : {"E6", "E12", "E24", "E96"}
        Series of the resistors and of the capacitors (default: ``series``).
    impedance_ohm : float
        Nominal resistor value: sqrt(R1 R2) of a second-order stage, R of a first-order one.
    source_ohm : float
        Source impedance driving the first stage; it adds to R1 (or R).
    load_ohm : float or None
        Recorded only: the op-amp output drives it, so it changes nothing (ideal op-amp).

    Notes
    -----
    Search: every preferred C1 and C2 within a factor 3 of the equal-resistor
    design (C1 = 2Q/(w0 R), C2 = 1/(2Q w0 R)); for each pair the exact R1, R2 are
    the roots of x² - Sx + P with P = 1/(w0² C1 C2) and S = 1/(w0 Q C2) (real when
    C1/C2 >= 4Q²), and the three preferred values below and above each are tried.
    """
    series = check_series(series)
    cap_series = check_series(cap_series or series)
    impedance_ohm, source_ohm, load_ohm = _check_impedances(impedance_ohm, source_ohm, load_ohm)
    lows, omitted = _split(design)
    stages = []
    for i, sec in enumerate(lows):
        rs = source_ohm if i == 0 else 0.0
        if sec.q is None:
            stages.append(_realise_rc(sec, r_series=series, c_series=cap_series, impedance_ohm=impedance_ohm,
                                      source_ohm=rs, load_ohm=None, topology="buffered-rc"))
        else:
            stages.append(_realise_sk(sec, r_series=series, c_series=cap_series, impedance_ohm=impedance_ohm,
                                      source_ohm=rs))
    return Realisation("sallen-key", design, tuple(stages), {"resistor": series, "capacitor": cap_series},
                       impedance_ohm, source_ohm, load_ohm, omitted)


def realise(design: Design, target: str, **options) -> Realisation:
    """Dispatch to :func:`realise_series_rlc` or :func:`realise_sallen_key` by target name."""
    if target == "series-rlc":
        return realise_series_rlc(design, **options)
    if target == "sallen-key":
        return realise_sallen_key(design, **options)
    raise BadParameter(f"as={target!r}: the analog targets are series-rlc and sallen-key")


# ---------------------------------------------------------------------------
# Tolerance: Monte Carlo over the parts
# ---------------------------------------------------------------------------


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


# ---------------------------------------------------------------------------
# DSP coefficients and their quantisation
# ---------------------------------------------------------------------------


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


def c_identifier(name: str) -> str:
    """A C identifier from a file stem: letters, digits and underscores, not starting with a digit."""
    ident = re.sub(r"[^0-9A-Za-z_]", "_", name).strip("_") or "filter"
    return ("f_" + ident) if ident[0].isdigit() else ident


def _c_int(v: int, bits: int) -> str:
    # -2^(W-1) written as a literal is the negation of an out-of-range positive constant in C.
    return f"({-(2 ** (bits - 1)) + 1} - 1)" if v == -(2 ** (bits - 1)) else str(int(v))


def c_header(coeffs: Coefficients, name: str, *, version: str = "") -> str:
    """A C header (our own layout) with the sections in every format that holds them.

    Each format is an array ``<name>_sos_<format>[<NAME>_SECTIONS][5]`` of rows
    {b0, b1, b2, a1, a2} with a0 = 1 implied; fixed-point arrays are integers with
    a ``<NAME>_<FORMAT>_FRAC_BITS`` macro, and the arithmetic they assume is stated
    in the opening comment. A format that cannot hold the coefficients is left
    out with a comment saying why; an unsafe one is written with its warnings.
    """
    d = coeffs.design
    ident = c_identifier(name)
    up = ident.upper()
    n = len(d.sos)
    what = (f"low-pass f0 {d.f0_hz:g} Hz, order {d.order}"
            + (f", {d.alignment}" if d.alignment else (f", Q {d.q:.6g}" if d.q else ""))
            + (f", high-pass {d.highpass_hz:g} Hz" if d.highpass_hz else "")
            + f", H0 {d.passband_gain_db:+.2f} dB")
    lo, hi = d.deviation_band_hz()
    hr = headroom(d.sos, d.rate_hz)
    lines = [
        f"/* {ident}.h: {what}; {n} section(s) at {d.rate_hz:g} Hz, {d.method} method.",
        f" * Written by audition{(' ' + version) if version else ''} (realize --as coefficients).",
        " *",
        f" * Layout: {ident}_sos_<format>[{up}_SECTIONS][5], one row per section, cascaded in order:",
        " *   {b0, b1, b2, a1, a2},  H(z) = (b0 + b1 z^-1 + b2 z^-2) / (1 + a1 z^-1 + a2 z^-2),  a0 = 1 implied.",
        " *   Note the sign: a1 and a2 are SUBTRACTED in the recursion.",
        " * Fixed point Qm.n: coefficient = integer / 2^n (n = <FORMAT>_FRAC_BITS), rounded half to even.",
        " *   Arithmetic assumed: direct form I; samples Q1.(W-1) in the same word length W;",
        " *   acc = b0*x[n] + b1*x[n-1] + b2*x[n-2] - a1*y[n-1] - a2*y[n-2]  (exact, >= 2W+3 bit accumulator)",
        " *   y[n] = saturate((acc + (1 << (n-1))) >> n)  (round half up, arithmetic shift, W-bit saturation)",
        f" * Deviation: |H| of the rounded coefficients minus |H| in double, dB, worst point in {lo:g} .. {hi:g} Hz;",
        " * Noise floor: the arithmetic's rounding noise at the output, rms dBFS (20 log10, full-scale sine",
        " * = -3.01 dBFS), modelled as white, LSB^2/12 per rounding.",
        f" * Headroom: the gain up to section {hr['after_section']} peaks at {hr['peak_gain_db']:+.2f} dB "
        f"({hr['peak_hz']:.0f} Hz, sine); "
        + (f"keep the input's peak below {-hr['peak_gain_db']:.2f} dB re full scale (peak) or it saturates."
           if hr["peak_gain_db"] > 0.005 else "no section output rises above the input."),
        " */",
        f"#ifndef {up}_H",
        f"#define {up}_H",
        "",
        "#include <stdint.h>",
        "",
        f"#define {up}_RATE_HZ {d.rate_hz:.17g}",
        f"#define {up}_SECTIONS {n}",
    ]
    ctype = {("double", None): "double", ("single", None): "float"}
    for r in coeffs.results:
        fmt = r.format
        lines.append("")
        if not r.fits:
            lines.append(f"/* {fmt.label}: left out, it cannot hold these coefficients: {r.warnings[0]} */")
            continue
        status = "safe" if r.safe else "UNSAFE: " + "; ".join(r.warnings)
        noise = "" if r.noise_floor_dbfs is None else f", noise floor {r.noise_floor_dbfs:.1f} dBFS"
        dev = ("unbounded" if r.max_deviation_db is None
               else f"{r.max_deviation_db:+.4f} dB at {r.max_deviation_hz:.0f} Hz")
        lines.append(f"/* {fmt.label}: max pole radius {max(r.pole_radius):.9f}, max deviation {dev}{noise}; "
                     f"{status} */")
        if fmt.fixed:
            lines.append(f"#define {up}_{fmt.key.upper()}_FRAC_BITS {fmt.frac_bits}")
            typ = f"int{fmt.word_bits}_t"
            rows = [", ".join(_c_int(v, fmt.word_bits) for v in row) for row in r.integers]
        else:
            typ = ctype[(fmt.key, None)]
            five = r.sos[:, [0, 1, 2, 4, 5]]
            if fmt.key == "single":
                rows = [", ".join(f"{float(np.float32(v)):.9e}f" for v in row) for row in five]
            else:
                rows = [", ".join(f"{v:.17e}" for v in row) for row in five]
        lines.append(f"static const {typ} {ident}_sos_{fmt.key}[{up}_SECTIONS][5] = {{")
        lines += [f"    {{{row}}}," for row in rows]
        lines.append("};")
    lines += ["", f"#endif /* {up}_H */", ""]
    return "\n".join(lines)


# ---------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------


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
