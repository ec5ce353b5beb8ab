"""Standard parts: IEC 60063 preferred numbers, and the choice of parts for each stage.

Part values are IEC 60063 preferred numbers. The values are not snapped one by
one to the nearest preferred number: the whole combination is chosen that
minimises the combined logarithmic error

.. math:: e = \\ln^2(f_0/f_{0,t}) + \\ln^2(Q/Q_t) + w \\ln^2(Z/Z_\\mathrm{nom})
          \\;[+\\, w \\ln^2(R_1/R_2)],\\quad w = 10^{-5}

over a window of neighbouring preferred values around an ideal design at a
practical impedance level Z_nom. The small weight w (engineering judgement)
keeps the parts practical: straying a factor 2 from Z_nom costs as much as a
0.2 % error in f0, and a Sallen–Key stage pays the same for unequal resistors.

:func:`realise_series_rlc` and :func:`realise_sallen_key` (or :func:`realise`
by target name) run that search for every low-pass section of a design and
return a :class:`~audition.realize.stages.Realisation`; the circuits and their
figures live in :mod:`audition.realize.stages`.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from audition.design import Design, Section
from audition.errors import BadParameter
from audition.realize.stages import Realisation, Stage, rc_lowpass, sallen_key, series_rlc

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
# Choosing the parts of each stage
# ---------------------------------------------------------------------------


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
