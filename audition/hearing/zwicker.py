"""Loudness of stationary sounds from one-third-octave band levels: ISO 532-1:2017, section 5.

The Zwicker procedure (the method of DIN 45631 and of ISO 532:1975 method B, as revised in
ISO 532-1:2017 for stationary sounds) in a visible pipeline of public steps::

    28 band levels ──► core_loudness ──► specific_loudness ──► (total, N'(z))
    (dB SPL)          (20 critical bands)  (upper masking slopes, 0.1-Bark grid)

Everything is vectorised over columns: a (28, n) array of band levels, one spectrum per
column, is computed with a fixed number of array operations whatever n is (the loops run
over the 20 critical bands, never over columns).

Two details of the standard's program are left out on purpose, because the hearing model takes
differences of loudness values and wants them smooth: it rounds the total it reports (to
0.001 sone up to 16 sone, to 0.01 sone above), and it adds 0.0001 Bark to every band edge so
that its stepped loop catches the 0.1-Bark points that fall on an edge, which integrates over
0.0001 Bark more of the lowest band (about 0.0005 sone for the standard's test signal 1).
Here the grid points are assigned exactly (a band owns its upper edge, as in the program) and
the integral runs over 0 ... 24 Bark.
"""

from __future__ import annotations

import numpy as np

from audition.errors import BadParameter

__all__ = [
    "BARK_GRID",
    "FIELDS",
    "THIRD_OCTAVE_HZ",
    "core_loudness",
    "loudness",
    "specific_loudness",
]

#: The 28 nominal one-third-octave centre frequencies of ISO 532-1, 25 Hz ... 12.5 kHz (Hz).
THIRD_OCTAVE_HZ = np.array([
    25.0, 31.5, 40.0, 50.0, 63.0, 80.0, 100.0, 125.0, 160.0, 200.0, 250.0, 315.0, 400.0, 500.0,
    630.0, 800.0, 1000.0, 1250.0, 1600.0, 2000.0, 2500.0, 3150.0, 4000.0, 5000.0, 6300.0,
    8000.0, 10000.0, 12500.0,
])
THIRD_OCTAVE_HZ.flags.writeable = False

#: The critical-band rates (Bark) of the specific loudness: 0.1, 0.2, ..., 24.0 (240 points).
BARK_GRID = np.arange(1, 241) / 10.0
BARK_GRID.flags.writeable = False

#: The sound fields the method knows.
FIELDS = ("free", "diffuse")

# ---------------------------------------------------------------------------------------------
# Values of ISO 532-1:2017 tables, transcribed; the comparison with mosqito in the tests checks
# the copied values. Names are those of the standard's program (Zwicker's BASIC program of
# DIN 45631, carried into ISO 532-1:2017 Annex A).
# ---------------------------------------------------------------------------------------------

# RAP: upper limits (dB) of the eight level ranges of the low-frequency weighting.
_RAP = np.array([45.0, 55.0, 65.0, 71.0, 80.0, 90.0, 100.0, 120.0])

# DLL[range, band]: reduction (dB) of the levels of the bands 25 ... 250 Hz within each range,
# from the equal-loudness contours.
_DLL = np.array([
    [-32, -24, -16, -10, -5, 0, -7, -3, 0, -2, 0],
    [-29, -22, -15, -10, -4, 0, -7, -2, 0, -2, 0],
    [-27, -19, -14, -9, -4, 0, -6, -2, 0, -2, 0],
    [-25, -17, -12, -9, -3, 0, -5, -2, 0, -2, 0],
    [-23, -16, -11, -7, -3, 0, -4, -1, 0, -1, 0],
    [-20, -14, -10, -6, -3, 0, -4, -1, 0, -1, 0],
    [-18, -12, -9, -6, -2, 0, -3, -1, 0, -1, 0],
    [-15, -10, -8, -4, -2, 0, -3, -1, 0, -1, 0],
], dtype=np.float64)

# LTQ: critical-band level (dB) at the threshold in quiet, without the ear's transmission.
_LTQ = np.array([30, 18, 12, 8, 7, 6, 5, 4, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3, 3], dtype=np.float64)

# A0: transmission of the free field to the hearing system (dB), per critical band.
_A0 = np.array([0, 0, 0, 0, 0, 0, 0, 0, 0, 0, -0.5, -1.6, -3.2, -5.4, -5.6, -4, -1.5, 2, 5, 12])

# DDF: level difference diffuse minus free field (dB), per critical band.
_DDF = np.array([0, 0, 0.5, 0.9, 1.2, 1.6, 2.3, 2.8, 3, 2, 0, -1.4, -2, -1.9, -1, 0.5, 3, 4, 4.3, 4])

# DCB: adaptation of one-third-octave levels to critical-band levels (dB).
_DCB = np.array([-0.25, -0.6, -0.8, -0.8, -0.5, 0, 0.5, 1.1, 1.5, 1.7, 1.8, 1.8, 1.7, 1.6, 1.4, 1.2,
                 0.8, 0.5, 0, -0.5])

# ZUP: upper limits (Bark) of the 20 approximated critical bands and of the closing band.
_ZUP = np.array([0.9, 1.8, 2.8, 3.5, 4.4, 5.4, 6.6, 7.9, 9.2, 10.6, 12.3, 13.8, 15.2, 16.7, 18.1,
                 19.3, 20.6, 21.8, 22.7, 23.6, 24.0])

# RNS: specific-loudness limits (sone/Bark) of the ranges of the upper-slope steepness.
_RNS = np.array([21.5, 18, 15.1, 11.5, 9, 6.1, 4.4, 3.1, 2.13, 1.36, 0.82, 0.42, 0.30, 0.22,
                 0.15, 0.10, 0.035, 0])

# USL[range, ig]: steepness (sone/Bark per Bark) of the upper slopes, per range of RNS and
# per critical band ig (the bands past the eighth share the eighth column).
_USL = np.array([
    [13, 8.2, 6.3, 5.5, 5.5, 5.5, 5.5, 5.5],
    [9, 7.5, 6, 5.1, 4.5, 4.5, 4.5, 4.5],
    [7.8, 6.7, 5.6, 4.9, 4.4, 3.9, 3.9, 3.9],
    [6.2, 5.4, 4.6, 4.0, 3.5, 3.2, 3.2, 3.2],
    [4.5, 3.8, 3.6, 3.2, 2.9, 2.7, 2.7, 2.7],
    [3.7, 3.0, 2.8, 2.35, 2.2, 2.2, 2.2, 2.2],
    [2.9, 2.3, 2.1, 1.9, 1.8, 1.7, 1.7, 1.7],
    [2.4, 1.7, 1.5, 1.35, 1.3, 1.3, 1.3, 1.3],
    [1.95, 1.45, 1.3, 1.15, 1.1, 1.1, 1.1, 1.1],
    [1.5, 1.2, 0.94, 0.86, 0.82, 0.82, 0.82, 0.82],
    [0.72, 0.67, 0.64, 0.63, 0.62, 0.62, 0.62, 0.62],
    [0.59, 0.53, 0.51, 0.50, 0.42, 0.42, 0.42, 0.42],
    [0.40, 0.33, 0.26, 0.24, 0.24, 0.22, 0.22, 0.22],
    [0.27, 0.21, 0.20, 0.18, 0.17, 0.17, 0.17, 0.17],
    [0.16, 0.15, 0.14, 0.12, 0.11, 0.11, 0.11, 0.11],
    [0.12, 0.11, 0.10, 0.08, 0.08, 0.08, 0.08, 0.08],
    [0.09, 0.08, 0.07, 0.06, 0.06, 0.06, 0.06, 0.05],
    [0.06, 0.05, 0.03, 0.02, 0.02, 0.02, 0.02, 0.02],
])

for _table in (_RAP, _DLL, _LTQ, _A0, _DDF, _DCB, _ZUP, _RNS, _USL):
    _table.flags.writeable = False

# The constants of the core-loudness formula (ISO 532-1:2017, A.3; Zwicker's program).
_S = 0.25        # threshold factor s
_N0 = 0.0635     # specific loudness scale (sone/Bark), chosen so that 1 kHz at 40 dB is 1 sone
_CORE_SCALE = _N0 * 10.0 ** (0.025 * _LTQ)                             # 0.0635 10^(0.025 LTQ)
_DB_TO_LN_POWER = np.log(10.0) / 10.0                                 # 10^(L/10) = exp(L ln10/10)

# The highest band level accepted (dB SPL); the standard's tables end at 120 dB.
_MAX_DB_SPL = 200.0

# The first 11 bands (25 ... 250 Hz) are weighted, then summed into the first three critical
# bands: 25-80 Hz, 100-160 Hz, 200-250 Hz.
_N_LOW = 11
_LOW_GROUPS = ((0, 6), (6, 9), (9, 11))

# The low-frequency range limits RAP_j - DLL_ji, (ranges, bands); the last range is the
# catch-all (the program stops its search at the eighth range). They rise from range to range
# in every band, so the first range whose limit a level does not exceed is found by counting
# the limits it exceeds.
_RANGE_LIMIT = _RAP[:, None] - _DLL
assert np.all(np.diff(_RANGE_LIMIT, axis=0) > 0)


def _levels(levels_db_spl, name: str = "levels_db_spl") -> np.ndarray:
    """The band levels as a float (28, n) array; refuse a wrong shape, NaN or +inf."""
    levels = np.asarray(levels_db_spl, dtype=np.float64)
    if levels.ndim not in (1, 2) or levels.shape[0] != THIRD_OCTAVE_HZ.size:
        raise BadParameter(
            f"{name} must have shape (28,) or (28, n), one level per one-third-octave band "
            f"25 Hz ... 12.5 kHz (got shape {levels.shape!r})")
    if np.isnan(levels).any() or np.isposinf(levels).any():
        raise BadParameter(f"{name} must be finite dB SPL or -inf for silence (got NaN or +inf)")
    if levels.size and levels.max() > _MAX_DB_SPL:
        raise BadParameter(
            f"{name} must be at most {_MAX_DB_SPL:g} dB SPL (got {levels.max():g}): beyond the loudest "
            "undistorted sound in air, and far beyond the 120 dB the method is specified for")
    return levels.reshape(levels.shape[0], -1)


def _field(field: str) -> str:
    if field not in FIELDS:
        raise BadParameter(f"field must be one of {FIELDS!r} (got {field!r})")
    return field


def core_loudness(levels_db_spl, field: str = "free") -> np.ndarray:
    """Core loudness of the 20 approximated critical bands (ISO 532-1:2017, 5.2 and A.3).

    Parameters
    ----------
    levels_db_spl : array_like, shape (28,) or (28, n)
        One-third-octave band levels in dB SPL (re 20 µPa) at the centres
        :data:`THIRD_OCTAVE_HZ`; ``-inf`` for an empty band. One spectrum per column.
    field : {"free", "diffuse"}
        The sound field the levels were measured in (frontal free field or diffuse field).

    Returns
    -------
    numpy.ndarray, shape (21, n)
        Core loudness :math:`N'_{c,i}` in sone/Bark of the 20 critical bands (the upper
        limits are ``ZUP``), followed by a zero row for the closing band 23.6-24 Bark.

    Raises
    ------
    BadParameter
        On a wrong shape, NaN or +inf, or an unknown field.

    Notes
    -----
    The steps of the standard, band index :math:`i`, level range :math:`j`:

    1. Low-frequency weighting of the bands 25 ... 250 Hz by the equal-loudness contours. The
       range is the first :math:`j` with :math:`L_i \\le RAP_j - DLL_{j,i}` (the last range if
       none), and :math:`X_i = L_i + DLL_{j,i}`.
    2. The first three critical bands are the power sums of the weighted bands 25-80 Hz,
       100-160 Hz and 200-250 Hz: :math:`L_{CB,k} = 10\\lg \\sum 10^{X_i/10}`; the others are
       the bands 315 Hz ... 12.5 kHz as they are.
    3. Transmission to the inner ear: :math:`L_E = L_{CB} - a_0` (:math:`+ \\Delta_{DF}` in a
       diffuse field).
    4. Above the threshold :math:`L_{TQ}`, with :math:`L_E' = L_E - \\Delta_{CB}`:

       .. math::

           N'_c = 0.0635 \\cdot 10^{0.025 L_{TQ}}
                  \\left[\\left(1 - s + s\\cdot 10^{(L_E' - L_{TQ})/10}\\right)^{0.25} - 1\\right],
           \\qquad s = 0.25,

       and 0 at or below the threshold or where the bracket is negative.
    5. Correction of the lowest critical band for the threshold's slope within it:
       :math:`N'_{c,1} \\leftarrow N'_{c,1} \\min(1, 0.4 + 0.32\\,N'^{\\,0.2}_{c,1})`.

    Above 120 dB in the bands 25 ... 250 Hz the standard's weighting table ends; the
    program (and this function) then keeps the last range's weights.

    References
    ----------
    .. [1] ISO 532-1:2017, Acoustics - Methods for calculating loudness - Part 1: Zwicker
           method, 5.2 and Annex A.3.
    .. [2] E. Zwicker, H. Fastl, U. Widmann, K. Kurakata, S. Kuwano, S. Namba, "Program for
           calculating loudness according to DIN 45631 (ISO 532B)", J. Acoust. Soc. Jpn. (E)
           12(1) (1991) 39-42.
    """
    return _core_loudness(_levels(levels_db_spl), _field(field) == "diffuse")


def _core_loudness(levels, diffuse):
    """core_loudness on a checked (28, n) float array."""
    low = levels[:_N_LOW]                                            # (11, n)
    # ISO 532-1 A.3 (step 1): j = first range with L_i <= RAP_j - DLL_ji, else the last one
    j = np.zeros(low.shape, dtype=np.intp)
    for limit in _RANGE_LIMIT[:-1]:
        j += low > limit[:, None]
    # ISO 532-1 A.3 (step 1): X_i = L_i + DLL_ji
    x = low + _DLL[j, np.arange(_N_LOW)[:, None]]
    power = np.exp(x * _DB_TO_LN_POWER)                              # 10^(X_i/10)
    # ISO 532-1 A.3 (step 2): L_CB,k = 10 lg(sum of 10^(X_i/10)) over the bands of critical band k
    sums = np.stack([power[a:b].sum(axis=0) for a, b in _LOW_GROUPS])
    with np.errstate(divide="ignore"):
        lcb = 10.0 * np.log10(sums)
    le = np.concatenate([lcb, levels[_N_LOW:]], axis=0)               # (20, n)
    # ISO 532-1 A.3 (step 3): L_E = L_CB - a0 (+ DDF in a diffuse field)
    le = le - _A0[:, None]
    if diffuse:
        le = le + _DDF[:, None]
    above = le > _LTQ[:, None]
    # ISO 532-1 A.3 (step 4): L_E' = L_E - DCB; N'c = 0.0635 10^(0.025 LTQ) [(1 - s + s 10^((L_E' - LTQ)/10))^0.25 - 1]
    le = le - _DCB[:, None]
    with np.errstate(over="ignore"):
        ratio = np.exp((le - _LTQ[:, None]) * _DB_TO_LN_POWER)      # 10^((L_E' - LTQ)/10)
    # the exponent 0.25 as two square roots: the same value, several times faster than pow
    core = _CORE_SCALE[:, None] * (np.sqrt(np.sqrt(1.0 - _S + _S * ratio)) - 1.0)
    core = np.where(above & (core > 0.0), core, 0.0)
    # ISO 532-1 A.3 (step 5): N'c,1 <- N'c,1 min(1, 0.4 + 0.32 N'c,1^0.2)
    core[0] *= np.minimum(1.0, 0.4 + 0.32 * core[0] ** 0.2)
    return np.concatenate([core, np.zeros((1, core.shape[1]))], axis=0)


# ---------------------------------------------------------------------------------------------
# The upper slopes. The standard walks up the critical-band rate segment by segment: while the
# pattern lies above the core loudness of the band it is in, it falls with the steepness
# USL[j, ig] of the range j of RNS that its current value lies in, and of the band ig it is in;
# it stops falling at the band's core loudness. Within one band ig is fixed, so the fall is the
# flow of dN'/dz = -USL(N') and can be written through the distance still to fall:
#
#     E(N') = integral from 0 to N' of dn / USL(n),   dE/dz = -1 while falling,
#
# piecewise linear in N' with knots at RNS. A fall over dz from N'_a is N' = E^-1(E(N'_a) - dz),
# and its area is Q(E_a) - Q(E_a - dz) with Q(e) = integral of E^-1. This is the standard's
# segment walk in closed form, a few array operations per band for every column at once.
# ---------------------------------------------------------------------------------------------

# Knots in N' ascending (0 ... 21.5) plus a top knot above any specific loudness that band
# levels up to _MAX_DB_SPL can give (about 7e3 sone/Bark at 200 dB), so that the top range
# (N' > 21.5, slope USL[0]) extends without clamping.
_N_TOP = 1e4
_KNOT_N = np.concatenate([_RNS[::-1], [_N_TOP]])                     # (19,)
_SEG_SLOPE = np.ascontiguousarray(_USL[::-1, :].T)                    # (8, 18): segment m is range j = 17 - m
_KNOT_E = np.zeros((_USL.shape[1], _KNOT_N.size))                    # (8, 19): E at the knots, per column ig
_KNOT_E[:, 1:] = np.cumsum(np.diff(_KNOT_N) / _SEG_SLOPE, axis=1)
_KNOT_Q = np.zeros_like(_KNOT_E)                                      # (8, 19): Q at the knots
_KNOT_Q[:, 1:] = np.cumsum(np.diff(_KNOT_E, axis=1) * (_KNOT_N[:-1] + _KNOT_N[1:]) / 2.0, axis=1)

# The eight columns side by side on one axis, each preceded by a flat zero (a fall past N' = 0
# stays at 0), so that one interpolation serves every band. Column 7, which serves the thirteen
# bands above 7.9 Bark, sits at offset 0 so that its values keep every digit; the others are
# shifted by multiples of _E_SPAN (a power of two, above the longest column), which costs them
# about 1e-12 of absolute precision.
_E_SPAN = 2048.0
_E_OFFSET = _E_SPAN * (_USL.shape[1] - 1 - np.arange(_USL.shape[1]))   # 7 * span ... 0
_ALL_E = np.concatenate([np.concatenate([[_E_OFFSET[ig] - 100.0], _E_OFFSET[ig] + _KNOT_E[ig]])
                         for ig in np.argsort(_E_OFFSET)])
_ALL_N = np.tile(np.concatenate([[0.0], _KNOT_N]), _USL.shape[1])
assert np.all(np.diff(_ALL_E) > 0) and _KNOT_E[:, -1].max() + 100.0 < _E_SPAN
# Q at each knot of the shared axis, and the slope dN'/dE of the piece that starts there (the
# flat zero pieces have slope 0 and Q 0; the piece from one column's top knot to the next
# column's zero is never reached)
_ALL_Q = np.concatenate([np.concatenate([[0.0], _KNOT_Q[ig]]) for ig in np.argsort(_E_OFFSET)])
_ALL_SLOPE = np.concatenate([np.concatenate([[0.0], _SEG_SLOPE[ig], [0.0]]) for ig in np.argsort(_E_OFFSET)])
_ALL_INDEX = np.arange(_ALL_E.size, dtype=np.float64)
_LAST_PIECE = _ALL_E.size - 2

# Per band i: its lower edge and width (Bark) and its slope column ig = min(i - 1, 7) (band 0
# never falls: nothing lies below it). From the ninth band on every band has ig = 7, so a fall
# crosses their edges without a change of column.
_Z_LOW = np.concatenate([[0.0], _ZUP[:-1]])
_WIDTH = _ZUP - _Z_LOW
_IG = np.clip(np.arange(_ZUP.size) - 1, 0, _USL.shape[1] - 1)
_SHARED = int(np.argmax(_IG == _USL.shape[1] - 1))                    # 8

# Per grid point z_k = 0.1 k: the band that owns it (a band owns (lower, upper]: the standard
# gives a band's upper edge to it) and its distance above the band's lower edge.
_GRID_BAND = np.searchsorted(np.rint(_ZUP * 10).astype(int), np.arange(1, BARK_GRID.size + 1))
_GRID_DZ = BARK_GRID - _Z_LOW[_GRID_BAND]
_GRID_ROWS = [slice(int(np.searchsorted(_GRID_BAND, i)), int(np.searchsorted(_GRID_BAND, i, side="right")))
              for i in range(_ZUP.size)]


def _fall_distance(n, ig):
    """E(N'): the critical-band distance a slope of column ig takes to fall from N' to 0."""
    return np.interp(n, _KNOT_N, _KNOT_E[ig])


def _change_column(e, ig_from, ig_to):
    """E_to(E_from^-1(e)): the same specific loudness, measured in another column's distance.

    Both are piecewise linear in N' with knots at RNS, so the composite is piecewise linear in
    e with knots at the knots of ig_from: one interpolation, exact.
    """
    return np.interp(e, _KNOT_E[ig_from], _KNOT_E[ig_to])


def _fall_area(e):
    """Q(e) = integral of E^-1 from 0 to e, e on the shared axis (piecewise quadratic)."""
    g = np.minimum(np.interp(e, _ALL_E, _ALL_INDEX).astype(np.intp), _LAST_PIECE)   # e's piece
    d = e - _ALL_E[g]
    # Q(e) = Q(e_g) + N'_g d + (dN'/dE)_g d^2 / 2 on piece g
    return _ALL_Q[g] + d * (_ALL_N[g] + 0.5 * _ALL_SLOPE[g] * d)


def _walk(core):
    """E of each band's core loudness, and E of the pattern at each band's lower edge.

    Returns e_core (21, n) and e_in (22, n), each band in its own column ig; row 21 of e_in is
    the pattern leaving the last band. A band is left at max(E(N'c,i), E_in,i - w_i): the fall
    stopped by the band's core loudness, or the core loudness itself where nothing falls.
    """
    bands, n_cols = core.shape
    e_core = np.empty_like(core)
    for i in range(_SHARED):
        e_core[i] = _fall_distance(core[i], _IG[i])
    # (bands, n) arrays go through np.interp transposed: neighbouring bands have close values,
    # which its search exploits
    e_core[_SHARED:] = _fall_distance(core[_SHARED:].T.copy(), _IG[_SHARED]).T
    e_in = np.empty((bands + 1, n_cols))
    e_in[0] = e_in[1] = e_core[0]                      # band 0 is flat; _IG[0] == _IG[1]
    for i in range(1, bands):
        e_out = np.maximum(e_core[i], e_in[i] - _WIDTH[i])
        if i + 1 < bands and _IG[i + 1] != _IG[i]:
            e_out = _change_column(e_out, _IG[i], _IG[i + 1])
        e_in[i + 1] = e_out
    return e_core, e_in


def _total(core, e_core, e_in):
    """ISO 532-1 5.3: N = integral of N'(z) dz over 0 ... 24 Bark, exact, band by band."""
    bands = core.shape[0]
    # length of the fall in each band: l = clip(E_in - E(N'c), 0, w); then a plateau at N'c
    fall = np.clip(e_in[1:bands] - e_core[1:], 0.0, _WIDTH[1:, None])
    total = core[0] * _WIDTH[0] + np.sum(core[1:] * (_WIDTH[1:, None] - fall), axis=0)
    # area of the fall: Q(E_in) - Q(E_in - l), all bands at once on the shared axis, transposed
    # (n, bands) as in _walk
    top = (e_in[1:bands] + _E_OFFSET[_IG[1:], None]).T.copy()
    return total + np.sum(_fall_area(top) - _fall_area(top - fall.T), axis=1)


def _pattern(e_core, e_in, grid_index=None):
    """N'(z_k) = E^-1(max(E(N'c,i), E_in,i - dz_k)) at the grid points grid_index, (k, n).

    E on the shared axis first, then one interpolation, done on the transposed array so that
    the points of one column are adjacent in memory: consecutive points lie close on the axis,
    which np.interp's search exploits. grid_index None means all 240 points, built band by
    band in place (the same values, fewer passes over memory).
    """
    if grid_index is None:
        e = np.empty((BARK_GRID.size, e_core.shape[1]))
        for i, rows in enumerate(_GRID_ROWS):
            part = e[rows]
            np.subtract(e_in[i] + _E_OFFSET[_IG[i]], _GRID_DZ[rows, None], out=part)
            np.maximum(part, e_core[i] + _E_OFFSET[_IG[i]], out=part)
    else:
        band = _GRID_BAND[grid_index]
        offset = _E_OFFSET[_IG[band]][:, None]
        e = np.take(e_in, band, axis=0)
        e += offset - _GRID_DZ[grid_index][:, None]
        np.maximum(e, np.take(e_core, band, axis=0) + offset, out=e)
    return np.interp(e.T.copy(), _ALL_E, _ALL_N).T


def specific_loudness(core) -> tuple[np.ndarray, np.ndarray]:
    r"""Total and specific loudness from the core loudness, with the upper masking slopes.

    Parameters
    ----------
    core : array_like, shape (21, n)
        Core loudness in sone/Bark as returned by :func:`core_loudness`.

    Returns
    -------
    total_sone : numpy.ndarray, shape (n,)
        Total loudness N in sone.
    specific_sone_per_bark : numpy.ndarray, shape (240, n)
        Specific loudness N'(z) at the critical-band rates :data:`BARK_GRID` (0.1 ... 24
        Bark), sone/Bark; a transposed view (Fortran order), each column's pattern contiguous.

    Raises
    ------
    BadParameter
        If `core` is not of shape (21, n).

    Notes
    -----
    ISO 532-1:2017 A.3: the specific loudness pattern is the core loudness of each band,
    except where the upper slope of the loudness of lower bands lies above it. A slope falls
    with the steepness :math:`USL_{j,ig}` (sone/Bark per Bark) of the range
    :math:`RNS_j < N' \le RNS_{j-1}` it is in and of the band :math:`ig` it crosses, and
    stops at the core loudness of the band. The standard walks this segment by segment; here
    the walk is written in closed form. With the distance still to fall

    .. math::

        E(N') = \int_0^{N'} \frac{dn}{USL(n)}

    (piecewise linear, knots at RNS; a fall has :math:`dE/dz = -1`) the pattern in band
    :math:`i` at distance :math:`\Delta z` above its lower edge is

    .. math::

        N'(z) = E^{-1}\Big(\max\big(E(N'_{c,i}),\ E_{\mathrm{in},i} - \Delta z\big)\Big),

    with :math:`E_{\mathrm{in},i}` the value of E of the pattern at the band's lower edge.
    The band's share of the total is
    :math:`Q(E_{\mathrm{in}}) - Q(E_{\mathrm{in}} - \ell) + N'_{c,i}\,(w - \ell)`, with
    :math:`\ell = \min(w, \max(0, E_{\mathrm{in}} - E(N'_{c,i})))` the length of the fall,
    :math:`w` the band's width and :math:`Q(e) = \int_0^e E^{-1}`. The total is
    :math:`N = \int_0^{24} N'(z)\,dz` (ISO 532-1:2017, 5.3), exact from these pieces, not
    summed from the 0.1-Bark samples.

    References
    ----------
    .. [1] ISO 532-1:2017, Acoustics - Methods for calculating loudness - Part 1: Zwicker
           method, 5.3 and Annex A.3.
    """
    core = np.asarray(core, dtype=np.float64)
    if core.ndim != 2 or core.shape[0] != _ZUP.size:
        raise BadParameter(f"core must have shape (21, n) (got {np.shape(core)!r})")
    e_core, e_in = _walk(core)
    return _total(core, e_core, e_in), _pattern(e_core, e_in)


def loudness(levels_db_spl, field: str = "free"):
    """Loudness of a stationary sound from its one-third-octave band levels (ISO 532-1:2017).

    Parameters
    ----------
    levels_db_spl : array_like, shape (28,) or (28, n)
        One-third-octave band levels in dB SPL (re 20 µPa) at the nominal centres
        :data:`THIRD_OCTAVE_HZ` (25 Hz ... 12.5 kHz); ``-inf`` for an empty band. Each
        column is one spectrum.
    field : {"free", "diffuse"}
        Frontal free field (default) or diffuse field.

    Returns
    -------
    total_sone : float or numpy.ndarray, shape (n,)
        Total loudness in sone (a float for 1-D input).
    specific_sone_per_bark : numpy.ndarray, shape (240,) or (240, n)
        Specific loudness in sone/Bark at :data:`BARK_GRID`, 0.1 ... 24 Bark.

    Raises
    ------
    BadParameter
        On a wrong shape, NaN or +inf, or an unknown field.

    Notes
    -----
    :func:`core_loudness` followed by :func:`specific_loudness`,

    .. math::

        N = \\int_0^{24\\,\\mathrm{Bark}} N'(z)\\,dz .

    The sone is defined so that a 1 kHz tone of 40 dB SPL in a frontal free field has a
    loudness of 1 sone. The total is not rounded (the standard's program rounds what it
    prints).

    References
    ----------
    .. [1] ISO 532-1:2017, Acoustics - Methods for calculating loudness - Part 1: Zwicker
           method, section 5 (method for stationary sounds).

    Examples
    --------
    Two spectra at once: all the energy in the 1 kHz band, at 40 and at 50 dB SPL.

    >>> import numpy as np
    >>> levels = np.full((28, 2), -np.inf)
    >>> levels[THIRD_OCTAVE_HZ == 1000.0] = [40.0, 50.0]
    >>> total, specific = loudness(levels)
    >>> np.round(total, 3), specific.shape
    (array([0.927, 1.791]), (240, 2))

    A 1 kHz tone of 40 dB reads 1 sone once its levels in the neighbouring bands of a real
    one-third-octave filter bank are counted as well; one band alone gives a little less.
    """
    levels = np.asarray(levels_db_spl, dtype=np.float64)
    total, specific = specific_loudness(core_loudness(levels, field))
    if levels.ndim == 1:
        return float(total[0]), specific[:, 0]
    return total, specific
