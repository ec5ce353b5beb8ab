"""The noise reference: from time spans, from a noise-only clip, or found in the quietest frames; its confidence.

Given as time spans (a segment belongs to a span when it lies wholly inside
it; :func:`noise_from_spans`), as a separate noise-only clip
(:func:`noise_from_clip`), or found automatically (:func:`find_quiet_frames`).
For the automatic search every segment is filed under its *balanced level* L
(:mod:`audition.survey.levels`). The floor L_f is the level below which the
quietest ``min_noise_seconds`` (0.5 s) of segments lie, an order statistic in
the spirit of minimum statistics (R. Martin, IEEE Trans. Speech Audio Process.
9(5), 2001) but per segment rather than per bin, so the result is a set of time
spans one can listen to. The noise segments are those with
L_f - 6 dB <= L <= L_f + ``threshold_db`` (1 dB, five standard deviations of
steady hiss; on the 0.25 dB grid of
:data:`~audition.survey.levels.LEVEL_STEP_DB`). Below L_f - 6 dB lie dropouts
and fades, not the floor; segments under -200 dBFS are digital silence; both
are left out of noise and programme alike. The search fails
(:class:`~audition.errors.BadInputFile`) when the quiet segments do not lie at
least ``min_separation_db`` (3 dB, broadband) below the median level of the
rest: then there is no floor to find (a steady signal, or hiss alone) and the
user must give a span. The confidence grade (:class:`NoiseConfidence`,
:func:`noise_confidence`) says how far the result can be trusted. These
thresholds are our own engineering choices (no source), checked against
synthesised clips whose hiss is known (tests/test_survey.py).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import numpy as np

from audition.errors import BadInputFile
from audition.survey.bands import band_edges, band_levels
from audition.survey.levels import LEVEL_STEP_DB, _SILENT_STEP, _LevelAccumulator
from audition.survey.segments import Segmenter, _as_2d

DEFAULT_THRESHOLD_DB = 1.0
DEFAULT_BELOW_DB = 6.0
DEFAULT_MIN_NOISE_SECONDS = 0.5
DEFAULT_MIN_SEPARATION_DB = 3.0
NOISE_SPAN_HINT = "give --noise-span START:END"
#: Below this RMS level (dBFS) a file holds no signal: under the dither of a 24-bit file (about -141 dBFS,
#: common practice, no source), so only digital silence or a constant (DC) offset, which the analysis removes.
NO_SIGNAL_DBFS = -140.0


def below_words(sep_db: float, other: str = "the programme") -> str:
    """``"only 3.2 dB below the programme"``, or ``"1.5 dB above the programme"`` for a negative separation."""
    if sep_db > 0.05:
        return f"only {sep_db:.1f} dB below {other}"
    if sep_db < -0.05:
        return f"{-sep_db:.1f} dB above {other}"
    return f"level with {other}"


@dataclass(frozen=True)
class NoiseConfidence:
    """How far the noise reference can be trusted.

    Attributes
    ----------
    grade : {"high", "medium", "low"}
        high: separation >= 20 dB, >= 0.75 s of noise, level spread <= 0.5 dB
        and shape spread <= 1.5 dB; medium: >= 10 dB, >= 0.5 s, <= 1 dB,
        <= 3 dB; low otherwise (our own thresholds, no source).
    separation_db : float or None
        Median level of the programme segments minus that of the noise segments, dB.
    noise_seconds : float
        Time covered by the noise segments (the clip's for a noise clip), s.
    noise_fraction : float or None
        noise_seconds over the file's length (None for a separate noise clip).
    level_spread_db : float
        Standard deviation of the noise segments' levels, dB (small for steady hiss).
    shape_spread_db : float or None
        RMS over octave bands (>= 16 bins wide) of the dB difference between
        the PSDs of the quieter and the louder half of the noise segments: how
        steady the noise spectrum is; None with too few segments to split.
    noise_segments, programme_segments, silent_segments, excluded_segments : int
        Welch segments in the noise reference, in the programme, of digital
        silence, and left out (straddling a span edge, or a dropout below the floor).
    """

    grade: str
    separation_db: float | None
    noise_seconds: float
    noise_fraction: float | None
    level_spread_db: float
    shape_spread_db: float | None
    noise_segments: int
    programme_segments: int
    silent_segments: int
    excluded_segments: int

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}

    def doubts(self) -> list[str]:
        """Why a "low" grade is low, in words (empty for "high" and "medium")."""
        if self.grade != "low":
            return []
        why = []
        if self.separation_db is not None and self.separation_db < 10:
            why.append(below_words(self.separation_db))
        if self.level_spread_db > 1.0:
            why.append(f"its level wanders by {self.level_spread_db:.1f} dB")
        if self.noise_seconds < 0.5:
            why.append(f"only {self.noise_seconds:.2f} s long")
        if self.shape_spread_db is not None and self.shape_spread_db > 3.0:
            why.append(f"its spectrum changes by {self.shape_spread_db:.1f} dB")
        return why or ["low confidence"]

    def describe(self) -> str:
        """One line for a report, e.g. "high: 31.2 dB below the programme, 0.9 s (9 % of the file), …"."""
        parts = [f"{self.grade}:"]
        if self.separation_db is not None:
            parts.append(f"{self.separation_db:.1f} dB below the programme,")
        frac = "" if self.noise_fraction is None else f" ({100 * self.noise_fraction:.1f} % of the file)"
        parts.append(f"{self.noise_seconds:.2f} s{frac}, level spread {self.level_spread_db:.2f} dB")
        if self.shape_spread_db is not None:
            parts[-1] += f", spectrum spread {self.shape_spread_db:.2f} dB"
        return " ".join(parts)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """[first, last] indices of the runs of True."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1) - 1))


def _covered_seconds(mask: np.ndarray, seg: Segmenter) -> tuple[float, tuple]:
    spans = []
    total = 0
    for i, j in _runs(mask):
        a, b = int(i) * seg.hop, int(j) * seg.hop + seg.nperseg
        spans.append((a / seg.rate_hz, b / seg.rate_hz))
        total += b - a
    return total / seg.rate_hz, tuple(spans)


def _shape_spread(acc: _LevelAccumulator, noise_keys: list, freqs: np.ndarray, df: float) -> float | None:
    """RMS dB difference between the PSDs of the quieter and louder halves of the noise segments."""
    keys = sorted(noise_keys, key=lambda k: k[1])
    total = sum(acc.counts[k] for k in keys)
    if total < 4 or len(keys) < 2:
        return None
    run, split = 0, None
    for i, k in enumerate(keys):
        run += acc.counts[k]
        if run >= total / 2:
            split = i + 1
            break
    if split is None or split >= len(keys):
        split = len(keys) - 1
    halves = []
    for part in (keys[:split], keys[split:]):
        n = sum(acc.counts[k] for k in part)
        halves.append(sum(acc.sums[k] for k in part) / n)
    c, bp = band_levels(freqs, np.stack(halves), 1)
    lo, hi = band_edges(c, 1)
    ok = ((hi - lo) >= 16 * df) & (bp[0] > 0) & (bp[1] > 0)
    if not ok.any():
        return None
    d = 10.0 * np.log10(bp[1][ok] / bp[0][ok])
    return float(np.sqrt(np.mean(d * d)))


def _grade(sep, noise_seconds, level_spread, shape_spread) -> str:
    sep = math.inf if sep is None else sep
    shape = 0.0 if shape_spread is None else shape_spread
    if sep >= 20.0 and noise_seconds >= 0.75 and level_spread <= 0.5 and shape <= 1.5:
        return "high"
    if sep >= 10.0 and noise_seconds >= 0.5 and level_spread <= 1.0 and shape <= 3.0:
        return "medium"
    return "low"


def _fmt_spans(spans) -> str:
    return ", ".join(f"{a:g}:{b:g}" for a, b in spans)


@dataclass(frozen=True)
class NoiseReference:
    """The noise reference of a survey and the programme segments set against it.

    Attributes
    ----------
    source : {"auto", "spans", "clip"}
    noise_psd, outside_psd : ndarray
        Welch PSDs (units²/Hz) of the noise segments and of the programme
        segments (programme plus noise).
    noise_segments, programme_segments : int
        Segments averaged into each.
    noise_levels, programme_levels : ndarray
        Broadband levels of those segments, float32 dBFS.
    noise_seconds : float
        Time covered by the noise segments (the clip's length for a noise clip), s.
    noise_fraction : float or None
        noise_seconds over the file's length (None for a separate noise clip).
    spans : tuple of (start_s, end_s)
        The noise reference's time spans in the file (empty for a noise clip).
    excluded_segments : int
        Segments left out (straddling a span edge, or a dropout below the floor).
    accumulator : _LevelAccumulator
        Where the noise segments' densities are filed, with ``noise_keys`` their
        (class, level step) keys: for the shape spread of :func:`noise_confidence`.
    noise_keys : list
    """

    source: str
    noise_psd: np.ndarray
    noise_segments: int
    outside_psd: np.ndarray
    programme_segments: int
    noise_levels: np.ndarray
    programme_levels: np.ndarray
    noise_seconds: float
    noise_fraction: float | None
    spans: tuple
    excluded_segments: int
    accumulator: _LevelAccumulator
    noise_keys: list


def noise_from_clip(noise_blocks: Iterable, seg: Segmenter, acc: _LevelAccumulator, levels: np.ndarray,
                    silent: np.ndarray, *, rate_hz: float, channels: int) -> NoiseReference:
    """The noise reference from a separate noise-only clip; the whole file is the programme.

    Parameters
    ----------
    noise_blocks : iterable of ndarray
        The clip's blocks, with the file's channel count; read once.
    seg, acc : Segmenter, _LevelAccumulator
        The file's segmenter and accumulator, after the whole file was fed.
    levels, silent : ndarray
        The file's per-segment broadband levels (dBFS) and digital-silence mask.
    rate_hz : float
        The file's rate, which the clip shares.
    channels : int

    Raises
    ------
    BadInputFile
        A clip shorter than one segment, or digital silence.
    """
    nseg = Segmenter(rate_hz, channels, seg.nperseg)
    nacc = _LevelAccumulator(seg.freqs_hz)
    for block in noise_blocks:
        for _, p in nseg.periodograms(_as_2d(block, channels, "noise clip block")):
            nacc.add(p)
    nlev, nbal, _, _ = nacc.finish()
    if nseg.segments == 0:
        raise BadInputFile(f"noise clip: {nseg.frames / rate_hz:.3f} s long; it must hold at least one "
                           f"analysis segment ({seg.nperseg / rate_hz:.3f} s)")
    noise_keys = [k for k in nacc.sums if k[1] != _SILENT_STEP]
    if not noise_keys:
        raise BadInputFile("noise clip: digital silence (every sample zero); it holds no noise to measure")
    noise_psd, n_noise = nacc.mean(lambda c, s: s != _SILENT_STEP)
    outside_psd, n_prog = acc.mean(lambda c, s: s != _SILENT_STEP)
    return NoiseReference(source="clip", noise_psd=noise_psd, noise_segments=n_noise, outside_psd=outside_psd,
                          programme_segments=n_prog, noise_levels=nlev[np.isfinite(nlev)],
                          programme_levels=levels[~silent], noise_seconds=nseg.frames / rate_hz,
                          noise_fraction=None, spans=(), excluded_segments=0, accumulator=nacc,
                          noise_keys=noise_keys)


def noise_from_spans(spans: tuple, seg: Segmenter, acc: _LevelAccumulator, levels: np.ndarray, classes: np.ndarray,
                     silent: np.ndarray, *, seconds: float, rate_hz: float, what: str = "") -> NoiseReference:
    """The noise reference from time spans: the segments wholly inside them; the programme lies outside all.

    Parameters
    ----------
    spans : tuple of (start_s, end_s)
        Checked and merged (:func:`~audition.survey.segments.check_spans`).
    seg, acc : Segmenter, _LevelAccumulator
        The file's, after the whole file was fed with the segments classified
        against the spans (:func:`~audition.survey.segments.classify_segments`).
    levels, classes, silent : ndarray
        Per segment: broadband level (dBFS), class (1 inside a span, 2 straddling
        an edge, 0 outside), digital-silence mask.
    seconds, rate_hz : float
        The file's length and rate.
    what : str
        Prefix for error messages (the file's name).

    Raises
    ------
    BadInputFile
        No whole non-silent segment inside the spans, or nothing outside them.
    """
    is_noise = (classes == 1) & ~silent
    is_prog = (classes == 0) & ~silent
    if not is_noise.any():
        raise BadInputFile(f"{what}the noise span(s) {_fmt_spans(spans)} hold no whole analysis segment "
                           f"({seg.nperseg / rate_hz:.3f} s) of non-silent audio; {NOISE_SPAN_HINT} "
                           "over a longer stretch of hiss")
    if not is_prog.any():
        raise BadInputFile(f"{what}nothing outside the noise span(s) {_fmt_spans(spans)} to survey as programme")
    noise_psd, n_noise = acc.mean(lambda c, s: c == 1 and s != _SILENT_STEP)
    outside_psd, n_prog = acc.mean(lambda c, s: c == 0 and s != _SILENT_STEP)
    noise_keys = [k for k in acc.sums if k[0] == 1 and k[1] != _SILENT_STEP]
    noise_seconds, _ = _covered_seconds(is_noise, seg)
    return NoiseReference(source="spans", noise_psd=noise_psd, noise_segments=n_noise, outside_psd=outside_psd,
                          programme_segments=n_prog, noise_levels=levels[is_noise], programme_levels=levels[is_prog],
                          noise_seconds=noise_seconds, noise_fraction=noise_seconds / seconds, spans=spans,
                          excluded_segments=int(((classes == 2) & ~silent).sum()), accumulator=acc,
                          noise_keys=noise_keys)


def find_quiet_frames(seg: Segmenter, acc: _LevelAccumulator, levels: np.ndarray, steps: np.ndarray,
                      silent: np.ndarray, *, seconds: float, rate_hz: float,
                      threshold_db: float = DEFAULT_THRESHOLD_DB,
                      min_noise_seconds: float = DEFAULT_MIN_NOISE_SECONDS,
                      min_separation_db: float = DEFAULT_MIN_SEPARATION_DB, what: str = "") -> NoiseReference:
    """The noise reference found automatically: the segments near the floor of the balanced level (module notes).

    Parameters
    ----------
    seg, acc : Segmenter, _LevelAccumulator
        The file's, after the whole file was fed.
    levels, steps, silent : ndarray
        Per segment: broadband level (dBFS), step of the balanced level
        (:data:`~audition.survey.levels.LEVEL_STEP_DB`), digital-silence mask.
    seconds, rate_hz : float
        The file's length and rate.
    threshold_db, min_noise_seconds, min_separation_db : float
        Noise segments lie within ``threshold_db`` above the floor, the floor is
        the level under which the quietest ``min_noise_seconds`` lie, and the
        noise must sit at least ``min_separation_db`` below the median level of
        the rest.
    what : str
        Prefix for error messages (the file's name).

    Raises
    ------
    BadInputFile
        No quiet frames: the file too short, no programme above the floor, the
        floor too close to the rest, or too little time near it
        ("no quiet frames found; give --noise-span START:END").
    """
    step = steps.astype(np.int64)
    live = np.sort(step[~silent])
    k = max(1, math.ceil(min_noise_seconds * rate_hz / seg.hop))
    if live.size <= k:
        raise BadInputFile(f"{what}too short ({seconds:.2f} s) to find quiet frames by itself; "
                           f"{NOISE_SPAN_HINT}")
    floor_step = int(live[k - 1])
    lo_step = floor_step - int(round(DEFAULT_BELOW_DB / LEVEL_STEP_DB))
    hi_step = floor_step + int(round(threshold_db / LEVEL_STEP_DB))
    is_noise = (step >= lo_step) & (step <= hi_step) & ~silent
    is_prog = (step > hi_step) & ~silent
    noise_lv, prog_lv = levels[is_noise], levels[is_prog]
    noise_seconds, out_spans = _covered_seconds(is_noise, seg)
    if not is_prog.any() and float(np.max(levels[~silent])) < NO_SIGNAL_DBFS:
        raise BadInputFile(f"{what}holds no signal: every frame is below {NO_SIGNAL_DBFS:g} dBFS once any constant "
                           f"(DC) offset is taken away (digital silence or DC alone); there is no hiss to survey")
    if not is_prog.any():
        raise BadInputFile(f"{what}no quiet frames found: the whole file lies within {threshold_db:g} dB of "
                           f"its quietest {min_noise_seconds:g} s (about {float(np.median(noise_lv)):.1f} dBFS), "
                           f"with no programme above a floor; {NOISE_SPAN_HINT}")
    sep = float(np.median(prog_lv) - np.median(noise_lv))
    if sep < min_separation_db:
        raise BadInputFile(f"{what}no quiet frames found: the quietest {min_noise_seconds:g} s lie "
                           f"{below_words(sep, 'the median level of the rest')} ({min_separation_db:g} dB "
                           "below needed); "
                           f"{NOISE_SPAN_HINT}")
    if noise_seconds < min_noise_seconds:
        raise BadInputFile(f"{what}no quiet frames found: only {noise_seconds:.2f} s sit near the floor "
                           f"({min_noise_seconds:g} s needed); {NOISE_SPAN_HINT}")
    noise_psd, n_noise = acc.mean(lambda c, s: s != _SILENT_STEP and lo_step <= s <= hi_step)
    outside_psd, n_prog = acc.mean(lambda c, s: s != _SILENT_STEP and s > hi_step)
    noise_keys = [kk for kk in acc.sums if kk[1] != _SILENT_STEP and lo_step <= kk[1] <= hi_step]
    return NoiseReference(source="auto", noise_psd=noise_psd, noise_segments=n_noise, outside_psd=outside_psd,
                          programme_segments=n_prog, noise_levels=noise_lv, programme_levels=prog_lv,
                          noise_seconds=noise_seconds, noise_fraction=noise_seconds / seconds, spans=out_spans,
                          excluded_segments=int(((step < lo_step) & ~silent).sum()), accumulator=acc,
                          noise_keys=noise_keys)


def noise_confidence(ref: NoiseReference, silent: np.ndarray, seg: Segmenter) -> NoiseConfidence:
    """How far the noise reference can be trusted (:class:`NoiseConfidence`).

    ``silent`` is the file's per-segment digital-silence mask and ``seg`` its segmenter.
    """
    prog_lv, noise_lv = ref.programme_levels, ref.noise_levels
    sep = float(np.median(prog_lv) - np.median(noise_lv)) if prog_lv.size and noise_lv.size else None
    level_spread = float(np.std(noise_lv.astype(np.float64))) if noise_lv.size else 0.0
    shape = _shape_spread(ref.accumulator, ref.noise_keys, seg.freqs_hz, seg.df_hz)
    return NoiseConfidence(grade=_grade(sep, ref.noise_seconds, level_spread, shape), separation_db=sep,
                           noise_seconds=ref.noise_seconds, noise_fraction=ref.noise_fraction,
                           level_spread_db=level_spread, shape_spread_db=shape,
                           noise_segments=int(ref.noise_segments), programme_segments=int(ref.programme_segments),
                           silent_segments=int(silent.sum()), excluded_segments=ref.excluded_segments)
