"""What a filter does to what is heard: treble loss where the programme is audible, and the hiss heard.

The planner judges a filter by two figures, both computed from the survey's
one-third-octave bands (IEC 61260-1, base 10) frame by frame:

Treble loss
    The largest cut, in dB, that the filter makes to the programme in any band
    where the programme can be heard, with the band where it occurs. A band counts
    when the programme in its loud moments stands above the hiss by ``margin_db``
    (less 3 dB: programme that close under the hiss is still partly heard) and above
    the threshold of hearing at the listening level. "Loud moments" is
    the programme's level in the band that is reached in the loudest tenth of the
    analysis frames (its 90th percentile): a cymbal or a sibilant is heard when it
    sounds, even if the long-term average sinks under the hiss (our choice; the
    survey's long-term spectra are shown beside it). The cut in a band is the fall
    of the programme's power in it, -10·log10(Σ|H|²·S_p / Σ S_p) over the band, so a
    resonant lift never pays for what the slope removes elsewhere; only bands from
    ``treble_from_hz`` up count (a rumble high-pass is not treble loss).

Hiss heard
    Frame by frame, the loudness the hiss adds to the programme (ISO 532-1 with its
    masking slopes, :mod:`audition.hearing.heard`), before and after the filter, in
    sone, averaged over every frame that is not digital silence: hiss is heard in
    pauses and fades and hidden under loud passages. Per band, the share of frames
    in which the hiss is audible.

Levels become sound pressure through the listening level: the SPL at which a
full-scale sine would play (default 100 dB SPL, common practice for calibrated
monitoring, not a standard), so a band power p (full-scale²) plays at
10·log10(p) + 3.01 + listening_level dB SPL (a full-scale sine has mean square 1/2).

Nothing here reads files or prints.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter

DEFAULT_LISTENING_LEVEL_DB = 100.0
#: The programme's loud moments in a band: the level reached in the loudest tenth of the frames.
LOUD_PERCENTILE = 90.0
#: A full-scale sine's mean square is 1/2: its level is 3.01 dB above that of a full-scale mean square of 1/2.
FULL_SCALE_SINE_DB = 10.0 * math.log10(2.0)
#: A band whose programme comes within this many dB under the hiss still counts as heard: there it still
#: carries a third of the band's power or more, and the estimate of a single band is not sharper than
#: that (our choice; without it a steep filter could cut such a band by 15 dB at "no" treble loss).
PARTLY_HEARD_DB = 3.0
#: Grid points per band for the in-band cut (log-spaced midpoints).
POINTS_PER_BAND = 8
#: Frame groups the search evaluates the hiss heard on (the choice is then evaluated on every frame).
SEARCH_GROUPS = 24


def check_listening_level(level_db) -> float:
    if not (isinstance(level_db, (int, float)) and math.isfinite(level_db) and 40.0 <= level_db <= 130.0):
        raise BadParameter(f"listening-level={level_db!r} dB SPL: the level of a full-scale sine at the ear must "
                           "lie between 40 and 130 dB SPL (default 100)")
    return float(level_db)


def spl_db(power, listening_level_db: float) -> np.ndarray:
    """Band power (full-scale², mean square) to dB SPL at the listening level (module notes)."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.asarray(power, dtype=float)) + FULL_SCALE_SINE_DB + listening_level_db


@dataclass(frozen=True)
class Bands:
    """The frames of a survey in one-third-octave bands, and what the planner derives from them.

    Attributes
    ----------
    centres_hz, lo_hz, hi_hz : ndarray (B,)
        IEC 61260-1 base-10 bands wholly below Nyquist.
    frames : ndarray (T, B)
        Band power of each analysis frame that is not digital silence (programme and hiss), full-scale².
    noise : ndarray (B,)
        Band power of the hiss (the noise reference).
    programme_psd, noise_psd, freqs_hz : ndarray
        The survey's long-term spectra, for the shape of the programme and hiss inside each band.
    rate_hz : float
    """

    centres_hz: np.ndarray
    lo_hz: np.ndarray
    hi_hz: np.ndarray
    frames: np.ndarray
    noise: np.ndarray
    programme_psd: np.ndarray
    noise_psd: np.ndarray
    freqs_hz: np.ndarray
    rate_hz: float
    cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def programme_frames(self) -> np.ndarray:
        """Each frame's programme alone: its band power less the hiss's, floored at zero."""
        return self.programme_rows(0, len(self.frames))

    def programme_rows(self, start: int, stop: int) -> np.ndarray:
        """:attr:`programme_frames` of the frames ``start .. stop - 1`` only (a chunk of a long file)."""
        return np.maximum(self.frames[start:stop] - self.noise[None, :], 0.0)

    def loud_programme(self) -> np.ndarray:
        """The programme's band power in its loud moments (the 90th percentile over frames), (B,)."""
        if len(self.frames) == 0:
            return np.zeros(len(self.centres_hz))
        return np.percentile(self.programme_frames, LOUD_PERCENTILE, axis=0)

    def points(self) -> tuple[np.ndarray, np.ndarray]:
        """``POINTS_PER_BAND`` log-spaced midpoints per band, band after band, and the width each stands for, Hz."""
        k = (np.arange(POINTS_PER_BAND) + 0.5) / POINTS_PER_BAND
        ratio = self.hi_hz / self.lo_hz
        pts = self.lo_hz[:, None] * ratio[:, None] ** k[None, :]
        width = pts * np.log(ratio)[:, None] / POINTS_PER_BAND
        return pts.reshape(-1), width.reshape(-1)

    def grid(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Points inside each band and their weights: ``(freqs, w_programme, w_noise)``, band after band.

        The :meth:`points`; each point's weight is the long-term PSD there times the width it
        stands for, normalised to a sum of 1 within the band (flat when the band holds no power).
        """
        pts, width = self.points()
        out = []
        for psd in (self.programme_psd, self.noise_psd):
            w = (np.interp(pts, self.freqs_hz, np.maximum(psd, 0.0)) * width).reshape(-1, POINTS_PER_BAND)
            total = w.sum(axis=1, keepdims=True)
            w = np.where(total > 0, w / np.where(total > 0, total, 1.0), 1.0 / POINTS_PER_BAND)
            out.append(w.reshape(-1))
        return pts, out[0], out[1]


def audible_bands(bands: Bands, listening_level_db: float, margin_db: float = 0.0,
                  treble_from_hz: float = 0.0) -> np.ndarray:
    """Bands where the programme can be heard (module notes), from ``treble_from_hz`` up: bool (B,)."""
    from audition.hearing.threshold import threshold_db_spl

    loud = bands.loud_programme()
    above_hiss = loud > bands.noise * 10.0 ** ((margin_db - PARTLY_HEARD_DB) / 10.0)
    above_threshold = spl_db(loud, listening_level_db) > threshold_db_spl(bands.centres_hz)
    return above_hiss & above_threshold & (bands.centres_hz >= treble_from_hz)


def band_gains(power: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted in-band power gain: ``power`` (..., B·K) on the :meth:`Bands.grid` points -> (..., B).

    The grid holds K = ``POINTS_PER_BAND`` points per band, band after band, and the
    weights of each band sum to 1.
    """
    k = POINTS_PER_BAND
    p = np.asarray(power, dtype=float)
    shaped = p.reshape(p.shape[:-1] + (p.shape[-1] // k, k))
    return np.einsum("...bk,bk->...b", shaped, np.asarray(weights, dtype=float).reshape(-1, k))


def treble_loss(gains_programme: np.ndarray, audible: np.ndarray, centres_hz) -> tuple[np.ndarray, np.ndarray]:
    """Largest cut over the audible bands: ``(loss_db, at_hz)``, each of shape ``gains.shape[:-1]``.

    A cut is -10·log10(gain), counted from 0 (a lift is no cut); with no audible band the
    loss is 0 and its band NaN.
    """
    g = np.asarray(gains_programme, dtype=float)
    with np.errstate(divide="ignore"):
        cut = np.maximum(-10.0 * np.log10(np.maximum(g, 1e-300)), 0.0)
    cut = np.where(audible, cut, -1.0)
    i = np.argmax(cut, axis=-1)
    loss = np.take_along_axis(cut, i[..., None], axis=-1)[..., 0]
    at = np.asarray(centres_hz, dtype=float)[i]
    return np.maximum(loss, 0.0), np.where(loss >= 0, at, np.nan)


# ---------------------------------------------------------------------------
# The hiss heard
# ---------------------------------------------------------------------------


def _zwicker_columns(bands: Bands, power: np.ndarray) -> np.ndarray:
    """(…, B) band powers -> (28, n) band powers on ISO 532-1's 28 bands 25 Hz … 12.5 kHz (zero above Nyquist)."""
    from audition.hearing.zwicker import THIRD_OCTAVE_HZ

    idx = [int(np.argmin(np.abs(np.log(bands.centres_hz / f)))) for f in THIRD_OCTAVE_HZ]
    have = np.array([abs(math.log(bands.centres_hz[i] / f)) < 0.05 for i, f in zip(idx, THIRD_OCTAVE_HZ)])
    flat = power.reshape(-1, power.shape[-1])
    out = np.zeros((len(THIRD_OCTAVE_HZ), flat.shape[0]))
    out[have] = flat[:, np.asarray(idx)[have]].T
    return out


@dataclass(frozen=True)
class HissHeard:
    """The hiss heard over the programme, before and after one filter.

    Attributes
    ----------
    before_sone, after_sone : float
        Mean over the frames of the loudness the hiss adds (ISO 532-1 masking slopes).
    reduction_pct : float
        100·(1 - after/before); 0 when no hiss is heard before.
    share_before, share_after : ndarray (28,)
        Per ISO 532-1 band (25 Hz … 12.5 kHz), the share of the frames in which the hiss is audible.
    bands_hz : ndarray (28,)
    """

    before_sone: float
    after_sone: float
    reduction_pct: float
    share_before: np.ndarray
    share_after: np.ndarray
    bands_hz: np.ndarray

    def to_dict(self) -> dict:
        return {"before_sone": self.before_sone, "after_sone": self.after_sone, "reduction_pct": self.reduction_pct,
                "bands_hz": [float(f) for f in self.bands_hz],
                "audible_share_before": [float(x) for x in self.share_before],
                "audible_share_after": [float(x) for x in self.share_after]}


#: Columns evaluated at once by the loudness model: bounds its work arrays (240 Bark points a column) to a
#: few tens of MB whatever the length of the file.
HEARD_CHUNK = 4096


@dataclass(frozen=True)
class _HeardColumns:
    heard_sone: np.ndarray
    audible: np.ndarray


def _heard(bands: Bands, programme: np.ndarray, noise: np.ndarray, listening_level_db: float) -> _HeardColumns:
    """ISO 532-1 hiss heard for columns of programme (n, B) and hiss (n, B) band powers, in chunks."""
    from audition.hearing.heard import hiss_heard

    sone, audible = [], []
    for i in range(0, max(len(programme), 1), HEARD_CHUNK):
        p = spl_db(_zwicker_columns(bands, programme[i:i + HEARD_CHUNK]), listening_level_db)
        n = spl_db(_zwicker_columns(bands, noise[i:i + HEARD_CHUNK]), listening_level_db)
        res = hiss_heard(p, n)
        sone.append(np.atleast_1d(np.asarray(res.heard_sone, dtype=float)))
        audible.append(np.asarray(res.audible).reshape(len(p), -1))
    return _HeardColumns(np.concatenate(sone), np.concatenate(audible, axis=1))


def _heard_frames(bands: Bands, gain_programme: np.ndarray, gain_noise: np.ndarray,
                  listening_level_db: float) -> _HeardColumns:
    """:func:`_heard` on every frame, the programme and hiss each through its in-band gains (B,).

    The filtered frames are made chunk by chunk, so the working memory stays the same
    whatever the length of the file.
    """
    noise = bands.noise * gain_noise
    parts = []
    for i in range(0, max(len(bands.frames), 1), HEARD_CHUNK):
        prog = bands.programme_rows(i, i + HEARD_CHUNK) * gain_programme[None, :]
        parts.append(_heard(bands, prog, np.broadcast_to(noise, prog.shape), listening_level_db))
    return _HeardColumns(np.concatenate([r.heard_sone for r in parts]),
                         np.concatenate([r.audible for r in parts], axis=1))


def hiss_heard(bands: Bands, gain_programme: np.ndarray, gain_noise: np.ndarray,
               listening_level_db: float) -> HissHeard:
    """The hiss heard on every frame before and after a filter with in-band gains ``gain_*`` (B,)."""
    from audition.hearing.zwicker import THIRD_OCTAVE_HZ

    if len(bands.frames) == 0:
        z = np.zeros(len(THIRD_OCTAVE_HZ))
        return HissHeard(0.0, 0.0, 0.0, z, z, np.asarray(THIRD_OCTAVE_HZ, dtype=float))
    key = ("unfiltered", float(listening_level_db))
    if key not in bands.cache:  # the same for every filter judged on these frames
        ones = np.ones(len(bands.noise))
        res = _heard_frames(bands, ones, ones, listening_level_db)
        bands.cache[key] = (float(np.mean(res.heard_sone)), np.asarray(res.audible).mean(axis=1))
    before, share_before = bands.cache[key]
    res = _heard_frames(bands, np.asarray(gain_programme, dtype=float), np.asarray(gain_noise, dtype=float),
                        listening_level_db)
    after = float(np.mean(res.heard_sone))
    return HissHeard(before, after, _reduction(before, after), share_before, np.asarray(res.audible).mean(axis=1),
                     np.asarray(THIRD_OCTAVE_HZ, dtype=float))


def _reduction(before: float, after: float) -> float:
    return 100.0 * (1.0 - after / before) if before > 0 else 0.0


def frame_groups(bands: Bands, groups: int = SEARCH_GROUPS) -> tuple[np.ndarray, np.ndarray]:
    """The frames compressed for the search: ``(programme (G, B), weights (G,))``.

    Frames are ranked by how far the programme stands above the hiss in the bands
    from 1 kHz up (where hiss is heard), cut into ``groups`` runs of equal count, and
    each run's band powers averaged. The hiss heard depends on the programme's level
    against the hiss; frames of like level mask alike.
    """
    prog = bands.programme_frames
    if len(prog) <= groups:
        return prog, np.full(len(prog), 1.0 / max(len(prog), 1))
    upper = bands.centres_hz >= 1000.0
    with np.errstate(divide="ignore"):
        rank = np.log10(prog[:, upper].sum(axis=1) + 1e-30) - np.log10(bands.noise[upper].sum() + 1e-30)
    order = np.argsort(rank, kind="stable")
    parts = np.array_split(order, groups)
    return np.stack([prog[p].mean(axis=0) for p in parts]), np.array([len(p) for p in parts]) / len(prog)


def heard_after_columns(bands: Bands, groups: np.ndarray, weights: np.ndarray, gain_programme: np.ndarray,
                        gain_noise: np.ndarray, listening_level_db: float) -> np.ndarray:
    """Mean hiss heard (sone) after each of many filters, on the frame groups.

    ``gain_*`` are (C, B) in-band gains (one row per candidate; a row of ones is no
    filter). Returns (C,).
    """
    c, g = len(gain_programme), len(groups)
    if c == 0 or g == 0:
        return np.zeros(c)
    prog = (gain_programme[:, None, :] * groups[None, :, :]).reshape(c * g, -1)
    noise = np.broadcast_to((gain_noise[:, None, :] * bands.noise[None, None, :]), (c, g, len(bands.noise)))
    res = _heard(bands, prog, noise.reshape(c * g, -1), listening_level_db)
    return np.asarray(res.heard_sone).reshape(c, g) @ weights
