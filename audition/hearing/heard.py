r"""The hiss heard over a programme: what the hiss adds to the loudness, band by band.

A hiss filter is judged by what is heard. The hiss is heard where it changes the loudness of
what is playing: in a pause it is heard whole, under loud programme the masking slopes of
ISO 532-1 hide it. Both sounds are described by their one-third-octave band levels (dB SPL) in
the 28 bands of :data:`~audition.hearing.zwicker.THIRD_OCTAVE_HZ`, one column per analysis
frame (or per frame and candidate filter).

Everything is one vectorised evaluation of the ISO 532-1 model on the columns of the
programme, of programme plus hiss, and of the programme 1 dB louder, side by side.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter
from audition.hearing.threshold import bark
from audition.hearing.zwicker import (
    BARK_GRID,
    THIRD_OCTAVE_HZ,
    _core_loudness,
    _field,
    _levels,
    _pattern,
    _total,
    _walk,
)

__all__ = ["BAND_BARK", "JND_DB", "Heard", "hiss_heard", "power_sum_db"]

#: The level change taken as just noticeable (dB). From memory: the just-noticeable level
#: difference of broadband noise is about 0.5-1 dB (Zwicker and Fastl, Psychoacoustics); the
#: upper end keeps the mask from flagging what only a trained ear in a quiet room would hear.
JND_DB = 1.0

#: Critical-band rate (Bark) of each band's nominal centre (Zwicker and Terhardt 1980).
BAND_BARK = bark(THIRD_OCTAVE_HZ)
BAND_BARK.flags.writeable = False

# Each band's point on the 0.1-Bark grid of the specific loudness: the nearest one.
_BAND_GRID = np.clip(np.rint(BAND_BARK * 10.0).astype(int) - 1, 0, BARK_GRID.size - 1)

_DB_TO_LN_POWER = np.log(10.0) / 10.0


def power_sum_db(a_db, b_db):
    r"""Level of the power sum of two uncorrelated sounds, :math:`a \oplus b`, in dB.

    Parameters
    ----------
    a_db, b_db : array_like
        Levels in dB (any common reference); ``-inf`` for silence. Broadcast together.

    Returns
    -------
    numpy.ndarray
        :math:`10 \lg(10^{a/10} + 10^{b/10})`, computed without overflow.

    Notes
    -----
    Powers of uncorrelated signals add (common practice; the definition of the decibel):
    :math:`a \oplus b = 10\lg(10^{a/10} + 10^{b/10})`.
    """
    # a (+) b = 10 lg(10^(a/10) + 10^(b/10)), through logaddexp on natural-log powers
    return np.logaddexp(np.asarray(a_db, dtype=np.float64) * _DB_TO_LN_POWER,
                        np.asarray(b_db, dtype=np.float64) * _DB_TO_LN_POWER) / _DB_TO_LN_POWER


@dataclass(frozen=True)
class Heard:
    """What the hiss adds to a programme, per column (frame, or frame x candidate filter).

    Attributes
    ----------
    heard_sone : float or numpy.ndarray, shape (n,)
        Loudness the hiss adds to the programme, sone, >= 0.
    programme_sone : float or numpy.ndarray, shape (n,)
        Loudness of the programme alone, sone.
    audible : numpy.ndarray of bool, shape (28,) or (28, n)
        True where the hiss is audible in the band (see :func:`hiss_heard`).
    rise_sone_per_bark : numpy.ndarray, shape (28,) or (28, n)
        Rise of the specific loudness at each band's critical-band rate caused by the hiss,
        sone/Bark.
    jnd_sone_per_bark : numpy.ndarray, shape (28,) or (28, n)
        The rise that counts as noticeable there, sone/Bark (0 where the programme is silent).
    """

    heard_sone: float | np.ndarray
    programme_sone: float | np.ndarray
    audible: np.ndarray
    rise_sone_per_bark: np.ndarray
    jnd_sone_per_bark: np.ndarray


def hiss_heard(programme_db_spl, hiss_db_spl, field: str = "free") -> Heard:
    r"""The hiss heard over a programme, from the loudness model of ISO 532-1:2017.

    Parameters
    ----------
    programme_db_spl : array_like, shape (28,) or (28, n)
        One-third-octave band levels of the programme (dB SPL, ``-inf`` for silence), one
        column per analysis frame.
    hiss_db_spl : array_like, shape (28,) or (28, n)
        Band levels of the hiss (dB SPL): one spectrum for every column, or one per column.
    field : {"free", "diffuse"}
        The sound field, as in :func:`~audition.hearing.zwicker.loudness`.

    Returns
    -------
    Heard
        Scalars and (28,) arrays when both inputs are 1-D, else (n,) and (28, n) arrays.

    Raises
    ------
    BadParameter
        On a wrong shape, column counts that do not match, NaN or +inf, levels above 200 dB,
        or an unknown field.

    Notes
    -----
    With :math:`N(\cdot)` and :math:`N'(\cdot, z)` the total and specific loudness of
    ISO 532-1:2017 (section 5), :math:`P` the programme's and :math:`H` the hiss's band levels,
    and :math:`P \oplus H = 10\lg(10^{P/10} + 10^{H/10})` band by band (powers of uncorrelated
    sounds add):

    .. math::

        N_{\mathrm{heard}} = \max\big(0,\ N(P \oplus H) - N(P)\big).

    In a pause (:math:`P \to -\infty`) this is :math:`N(H)`, the hiss's own loudness; under
    loud programme the core loudness grows slowly with level and the upper masking slopes of
    lower bands cover the hiss, so the difference is small.

    The hiss is audible in band :math:`b` (nominal centre :math:`f_b`, critical-band rate
    :math:`z_b` = Zwicker and Terhardt's :math:`z(f_b)`, taken at the nearest 0.1-Bark point)
    when it raises the specific loudness there by more than a just-noticeable change:

    .. math::

        \Delta N'_b = N'(P \oplus H, z_b) - N'(P, z_b) \;>\; J_b, \qquad
        J_b = \begin{cases}
              N'(P + 1\,\mathrm{dB}, z_b) - N'(P, z_b) & N'(P, z_b) > 0 \\
              0 & N'(P, z_b) = 0
              \end{cases}

    :math:`J_b` is the rise a 1 dB louder programme would cause there (the just-noticeable
    level difference of broadband noise is about 0.5-1 dB, Zwicker and Fastl, from memory);
    where the programme gives no specific loudness at :math:`z_b`, any rise, that is the hiss
    above the threshold in quiet and above what the masking slopes leave, is audible.

    The model's resolution is the critical band: the six bands 25-80 Hz form its first
    critical band, whose specific loudness is flat, so they are flagged together.

    References
    ----------
    .. [1] ISO 532-1:2017, Acoustics - Methods for calculating loudness - Part 1: Zwicker
           method, section 5 and Annex A.3.
    .. [2] E. Zwicker and H. Fastl, Psychoacoustics: Facts and Models, Springer (chapters on
           just-noticeable changes in level and on loudness).
    .. [3] E. Zwicker and E. Terhardt, J. Acoust. Soc. Am. 68(5) (1980) 1523-1525.
    """
    diffuse = _field(field) == "diffuse"
    programme = _levels(programme_db_spl, "programme_db_spl")
    hiss = _levels(hiss_db_spl, "hiss_db_spl")
    scalar = np.ndim(programme_db_spl) == 1 and np.ndim(hiss_db_spl) == 1
    n_p, n_h = programme.shape[1], hiss.shape[1]
    if n_p != n_h and 1 not in (n_p, n_h):
        raise BadParameter(
            f"programme_db_spl has {n_p} columns and hiss_db_spl {n_h}: they must match, or one "
            "of them be a single spectrum")
    programme, hiss = np.broadcast_arrays(programme, hiss)
    n = programme.shape[1]
    # one evaluation for P, P (+) H and P + 1 dB, side by side
    levels = np.concatenate([programme, power_sum_db(programme, hiss), programme + JND_DB], axis=1)
    core = _core_loudness(levels, diffuse)
    e_core, e_in = _walk(core)
    two = slice(0, 2 * n)
    total = _total(core[:, two], e_core[:, two], e_in[:, two])
    at_bands = _pattern(e_core, e_in, _BAND_GRID)                    # (28, 3n)
    n_programme, n_with_hiss, n_louder = at_bands[:, :n], at_bands[:, n:2 * n], at_bands[:, 2 * n:]
    # N_heard = max(0, N(P (+) H) - N(P))
    heard_sone = np.maximum(total[n:] - total[:n], 0.0)
    # dN'_b = N'(P (+) H, z_b) - N'(P, z_b)
    rise = n_with_hiss - n_programme
    # J_b = N'(P + 1 dB, z_b) - N'(P, z_b) where N'(P, z_b) > 0, else 0
    jnd = np.where(n_programme > 0.0, n_louder - n_programme, 0.0)
    audible = rise > jnd
    if scalar:
        return Heard(float(heard_sone[0]), float(total[0]), audible[:, 0], rise[:, 0], jnd[:, 0])
    return Heard(heard_sone, total[:n], audible, rise, jnd)
