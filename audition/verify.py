"""What a render did, measured from the input and output files.

Input and output are read together, block by block, and cut into the same
Welch segments (:class:`audition.survey.segments.Segmenter`). A segment lying wholly
inside a noise span is noise reference, one touching no span is programme;
segments that are digital silence in the input count as neither. The measured
noise reduction per weighting is the fall of the noise reference's weighted
level; the measured treble loss and SNR gain use the programme estimates
(programme segments minus noise, band-averaged and floored at zero as in
:func:`audition.survey.programme.programme_estimate`) of input and output. With a
separate noise clip the clip itself is run through the same sections (from
rest, without dither) and every non-silent segment of the file is programme.
"""

from __future__ import annotations

import numpy as np


class _PairedWelch:
    """Welch sums of one file's noise and programme segments, classified by the input (module notes)."""

    def __init__(self, seg, spans, rate_hz):
        self.seg = seg
        from audition.survey.segments import span_frames

        self.spans = span_frames(spans or (), rate_hz)
        n = len(seg.freqs_hz)
        self.noise = np.zeros(n)
        self.prog = np.zeros(n)
        self.n_noise = 0
        self.n_prog = 0

    def classify(self, first, count, p_in):
        from audition.survey.levels import SILENT_POWER
        from audition.survey.segments import classify_segments

        where = classify_segments(first, count, self.seg, self.spans)  # 1 inside a span, 2 partly, 0 outside
        live = p_in.sum(axis=1) * self.seg.df_hz > SILENT_POWER
        return (where == 1) & live, (where == 0) & live


def measure_render(in_path, out_path, design, survey, noise, *,
                   threads: bool = True, progress=None):
    """Measure what a render did, from the input and output files (module notes).

    ``noise`` is the job's :class:`audition.pipeline.NoiseReference` (spans or clip, treble
    floor, listening level). With ``threads`` (default) two threads read the files ahead; without, all in this thread.
    ``progress(frames_done, frames_total)``, optional, is called after each block.

    Returns
    -------
    dict
        :meth:`audition.measure.Measured.to_dict`, with the treble loss and the hiss heard in the
        planner's terms (:func:`_heard_measured`).

    Raises
    ------
    BadInputFile
        The output is not the same length or channel count as the input, or the
        noise reference holds no whole segment.
    """
    from audition import measure
    from audition.errors import BadInputFile
    from audition.io import reader
    from audition.survey.programme import programme_estimate
    from audition.survey.segments import Segmenter

    rate, ch = survey.rate_hz, survey.channels
    seg_in, seg_out = Segmenter(rate, ch, survey.nperseg), Segmenter(rate, ch, survey.nperseg)
    use_clip = bool(noise.clip)
    acc_in = _PairedWelch(seg_in, () if use_clip else survey.spans, rate)
    acc_out = _PairedWelch(seg_out, () if use_clip else survey.spans, rate)
    oinf = reader.info(out_path)
    if oinf.channels != ch or oinf.frames != survey.frames:
        raise BadInputFile(f"{out_path}: {oinf.frames} frames of {oinf.channels} channel(s); the input has "
                           f"{survey.frames} of {ch}, so the render cannot be measured against it")
    for xb, yb in zip(reader.counted(reader.blocks(in_path, ahead=threads), survey.frames, progress),
                      reader.blocks(out_path, ahead=threads)):
        if len(xb) != len(yb):
            raise BadInputFile(f"{out_path}: its blocks do not line up with the input's; cannot measure the render")
        got_in = [(i0, p.copy()) for i0, p in seg_in.periodograms(xb)]
        got_out = [p.copy() for _, p in seg_out.periodograms(yb)]
        if not got_in:
            continue
        p_in, p_out = np.concatenate([p for _, p in got_in]), np.concatenate(got_out)
        is_noise, is_prog = acc_in.classify(got_in[0][0], len(p_in), p_in)
        if use_clip:
            is_noise = np.zeros_like(is_noise)
        for acc, p in ((acc_in, p_in), (acc_out, p_out)):
            acc.noise += p[is_noise].sum(axis=0)
            acc.prog += p[is_prog].sum(axis=0)
            acc.n_noise += int(is_noise.sum())
            acc.n_prog += int(is_prog.sum())
    if use_clip:
        noise_in, noise_out = _clip_psds(noise.clip, design, rate, ch, survey.nperseg)
    else:
        if acc_in.n_noise == 0:
            raise BadInputFile(f"{in_path}: the noise reference holds no whole analysis segment to measure on")
        noise_in, noise_out = acc_in.noise / acc_in.n_noise, acc_out.noise / acc_out.n_noise
    if acc_in.n_prog == 0:
        raise BadInputFile(f"{in_path}: no programme outside the noise reference to measure on")
    # The same programme estimate as the survey's (band-averaged before the floor), so a floor bias in
    # hiss-dominated bins of the input cannot pass for treble the render took away.
    prog_in = programme_estimate(survey.freqs_hz, acc_in.prog / acc_in.n_prog, noise_in)
    prog_out = programme_estimate(survey.freqs_hz, acc_out.prog / acc_out.n_prog, noise_out)
    m = measure.measure(survey.freqs_hz, noise_in, noise_out, prog_in, prog_out,
                        treble_from_hz=noise.treble_from_hz).to_dict()
    return _heard_measured(m, survey, noise, prog_in, prog_out, noise_in, noise_out)


def _heard_measured(m: dict, survey, noise, prog_in, prog_out, noise_in, noise_out) -> dict:
    """The measured figures in the planner's terms: the largest cut where the programme is heard, from the
    input's and output's programme estimates band by band, and the hiss heard with the measured band gains
    (programme and hiss, output over input) applied to the input's frames. The share-of-treble-power figure
    of :func:`audition.measure.measure` is kept as ``treble_power_share_lost_db``."""
    from audition.plan.audible import audible_bands, hiss_heard, treble_loss
    from audition.survey.bands import band_levels

    b = survey.hearing_bands
    _, bp = band_levels(survey.freqs_hz, np.stack([prog_in, prog_out, noise_in, noise_out]), 3)
    with np.errstate(divide="ignore", invalid="ignore"):
        g_p = np.where(bp[0] > 0, bp[1] / bp[0], 1.0)
        g_n = np.where(bp[2] > 0, bp[3] / bp[2], 1.0)
    aud = audible_bands(b, noise.listening_level_db, noise.margin_db, noise.treble_from_hz)
    loss, at = treble_loss(g_p, aud, b.centres_hz)
    m["treble_power_share_lost_db"] = m.pop("treble_loss_db")
    m["treble_loss_db"] = float(loss)
    m["treble_loss_hz"] = None if not np.isfinite(at) or loss <= 0 else float(at)
    h = hiss_heard(b, g_p, g_n, noise.listening_level_db)
    m["hiss_heard"] = {"before_sone": h.before_sone, "after_sone": h.after_sone, "reduction_pct": h.reduction_pct}
    return m


def _clip_psds(clip_path, design, rate, channels, nperseg):
    """Welch PSDs of a noise clip before and after the design's sections (from rest, no dither)."""
    from audition.io import reader
    from audition.streamfilter import StreamingFilter
    from audition.survey.welch import WelchPSD

    before, after = WelchPSD(rate, channels, nperseg), WelchPSD(rate, channels, nperseg)
    filt = StreamingFilter(design.sos, channels)
    for x in reader.blocks(clip_path):
        before.feed(x)
        after.feed(filt(x))
    return before.psd, after.psd


# ---------------------------------------------------------------------------
# The job
# ---------------------------------------------------------------------------
