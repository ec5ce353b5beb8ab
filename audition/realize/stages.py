"""The circuits: series RLC, RC and Sallen–Key stages, their figures driven and loaded, and a realisation.

Analog targets realise the low-pass sections of a design, one stage per section,
and assume the stages are buffered from each other (each stage driven from a
near-zero impedance and looking into a near-infinite one, as an op-amp follower
between stages gives). The source impedance therefore belongs to the first
stage and the load to the last. A first-order section becomes an RC section.

The circuit functions (:func:`series_rlc`, :func:`rc_lowpass`, :func:`sallen_key`,
:func:`lowpass_response`) take part values, scalars or arrays, and return f0, Q and
H0; :class:`Stage` is one stage with its parts and :class:`Realisation` the whole
circuit with its report. Which parts a stage gets is chosen in
:mod:`audition.realize.parts`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.design import Design, Section
from audition.realize._numeric import _crossing_hz, _db

CAUTION = ("Caution: mains-powered gear and any voltage above a few volts need the usual electrical safety; "
           "defer to local codes and licensed practice.")
#: The audio band over which the real response is compared with the target.
ANALOG_BAND_HZ = (20.0, 20000.0)


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
