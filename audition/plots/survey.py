"""The survey picture: programme and hiss spectra, the crossover, and what a filter leaves."""

from __future__ import annotations

import numpy as np

from audition.plots import mark_line, place_line_labels, pyplot, save_figure

PROGRAMME, HISS, FILTER, CROSSOVER = "C0", "C3", "C2", "0.15"


def _db(x):
    with np.errstate(divide="ignore"):
        return 10 * np.log10(np.maximum(x, 1e-30))


def _raw_db(x):
    """dB of a per-bin PSD with its zero bins (programme floored at zero) left as gaps."""
    with np.errstate(divide="ignore"):
        return np.where(x > 0, 10 * np.log10(np.where(x > 0, x, 1.0)), np.nan)


def filter_label(design) -> str:
    """A short name of a design for a legend, e.g. "f0 8,000 Hz, Q 0.71" or "4th-order bessel, f0 7,000 Hz"."""
    if design.order == 2 and design.alignment is None and design.q is not None:
        name = f"f0 {design.f0_hz:,.0f} Hz, Q {design.q:.2f}"
    elif design.alignment:
        name = f"order {design.order} {design.alignment}, f0 {design.f0_hz:,.0f} Hz"
    else:
        name = f"{len(design.sections)} section(s), f0 {design.f0_hz:,.0f} Hz"
    return name + (f", high-pass {design.highpass_hz:,.0f} Hz" if design.highpass_hz else "")


def draw_survey(ax, survey, design=None, legend_loc: str | None = "best"):
    """Draw on ``ax``: per-bin PSDs (thin) and 1/b-octave band densities (bold), dB re FS²/Hz, log frequency.

    The band lines are each band's power divided by its width, so they sit on the
    per-bin curves they smooth. The part of the axis above the crossover (the
    programme under the hiss) is shaded; with a design, the filtered band
    densities are drawn dashed and f0 is marked. The labels of the f0 and
    crossover lines are drawn by :func:`audition.plots.place_line_labels` once
    the figure's layout is final.
    """
    from audition.survey.bands import band_edges, band_levels

    b = survey.fraction
    f = survey.freqs_hz[1:]
    ax.semilogx(f, _raw_db(survey.programme_psd[1:]), color=PROGRAMME, lw=0.5, alpha=0.3,
                label=f"programme, per bin ({survey.df_hz:.1f} Hz)")
    ax.semilogx(f, _raw_db(survey.noise_psd[1:]), color=HISS, lw=0.5, alpha=0.3, label="hiss, per bin")
    c, bp = band_levels(survey.freqs_hz, np.stack([survey.programme_psd, survey.noise_psd]), b)
    lo, hi = band_edges(c, b)
    width = hi - lo
    # bands with no programme left after the subtraction are gaps, not cliffs
    ax.semilogx(c, _raw_db(bp[0] / width), "o-", color=PROGRAMME, lw=2.2, ms=3.5,
                label=f"programme (hiss subtracted), 1/{b} octave")
    ax.semilogx(c, _db(bp[1] / width), "o-", color=HISS, lw=2.2, ms=3.5, label=f"hiss (noise reference), 1/{b} octave")
    if design is not None:
        h2 = np.abs(design.digital_response(survey.freqs_hz)) ** 2
        _, bf = band_levels(survey.freqs_hz, np.stack([survey.programme_psd * h2, survey.noise_psd * h2]), b)
        ax.semilogx(c, _raw_db(bf[0] / width), "--", color=PROGRAMME, lw=1.6, label="programme after the filter")
        ax.semilogx(c, _db(bf[1] / width), "--", color=HISS, lw=1.6, label="hiss after the filter")
        ax.axvline(design.f0_hz, color=FILTER, lw=1.2, ls=":")
        mark_line(ax, design.f0_hz, f"f0 {design.f0_hz:,.0f} Hz", FILTER)
    nyq = survey.rate_hz / 2
    if survey.crossover_hz:
        ax.axvspan(survey.crossover_hz, nyq, color="0.5", alpha=0.08, lw=0)
        ax.axvline(survey.crossover_hz, color=CROSSOVER, lw=1.2, ls="-.")
        mark_line(ax, survey.crossover_hz, f"crossover {survey.crossover_hz:,.0f} Hz: programme under the hiss above",
                  CROSSOVER)
    valid = _db(np.concatenate([bp[0] / width, bp[1] / width]))
    valid = valid[valid > -290]
    if valid.size:
        ax.set_ylim(max(valid.min() - 15, valid.max() - 110), valid.max() + 14)
    ax.set_xlim(20, nyq)
    from audition.plots import audio_ticks

    audio_ticks(ax, 20, nyq)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("power density (dB re FS²/Hz)")
    ax.grid(True, which="both", alpha=0.3)
    if legend_loc:
        ax.legend(loc=legend_loc, fontsize=8, framealpha=0.9)


def survey_figure(survey, design=None, title: str = "", prediction: dict | None = None):
    """The survey as one figure: spectra with the legend below them and the key figures in the title.

    ``prediction`` is the ``"prediction"`` part of the survey's JSON report (optional).
    """
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(10, 6.6))
    draw_survey(ax, survey, design, legend_loc=None)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=3, fontsize=8, frameon=False)
    src = {"auto": "found automatically", "spans": "given spans", "clip": "noise clip"}[survey.noise_source]
    lines = [title,
             f"hiss {survey.noise_rms_dbfs:.1f} dBFS RMS (flat; 20·log10 rms), noise reference {src}, "
             f"confidence {survey.confidence.grade}"]
    if design is not None and prediction:
        g = prediction["snr_gain_db"]

        def fmt(v):
            return "—" if v is None else f"{v:+.1f}"

        at = prediction.get("treble_loss_hz")
        h = prediction.get("hiss_heard") or {}
        lines.append(f"filter {filter_label(design)}: treble loss {prediction['treble_loss_db']:.2f} dB"
                     + (f" (largest cut where the programme is heard, {at / 1000:.1f} kHz band)" if at else "")
                     + (f"; hiss heard {h['before_sone']:.2f} -> {h['after_sone']:.2f} sone" if h else ""))
        lines.append(f"SNR gain (RMS): unweighted {fmt(g['flat'])}, A-weighted {fmt(g['a'])}, "
                     f"ITU-R 468-weighted {fmt(g['itu468'])} dB")
    elif design is not None:
        lines.append(f"filter {filter_label(design)}")
    ax.set_title("\n".join(x for x in lines if x), fontsize=10)
    fig.tight_layout()
    place_line_labels(ax)
    return fig


def plot_survey(survey, path, design=None, title: str = "", prediction: dict | None = None) -> None:
    save_figure(survey_figure(survey, design, title, prediction), path)
