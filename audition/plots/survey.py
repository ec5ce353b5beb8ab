"""The survey picture: programme and hiss spectra, the crossover, and what a filter leaves."""

from __future__ import annotations

import numpy as np

from audition.plots import pyplot, save_figure


def _db(x):
    with np.errstate(divide="ignore"):
        return 10 * np.log10(np.maximum(x, 1e-30))


def draw_survey(ax, survey, design=None):
    """Draw on ``ax``: raw PSDs (thin) and band-averaged densities (bold), in dB re FS²/Hz."""
    from audition.spectrum import band_edges, band_levels

    f = survey.freqs_hz[1:]
    ax.semilogx(f, _db(survey.outside_psd[1:]), color="C0", lw=0.5, alpha=0.35)
    ax.semilogx(f, _db(survey.noise_psd[1:]), color="C3", lw=0.5, alpha=0.35)
    c, bp = band_levels(survey.freqs_hz, np.stack([survey.programme_psd, survey.noise_psd]), survey.fraction)
    lo, hi = band_edges(c, survey.fraction)
    width = hi - lo
    ax.semilogx(c, _db(bp[0] / width), "o-", color="C0", lw=2, ms=3,
                label=f"programme (estimate), 1/{survey.fraction} octave")
    ax.semilogx(c, _db(bp[1] / width), "o-", color="C3", lw=2, ms=3, label="hiss (noise reference)")
    if design is not None:
        h2 = np.abs(design.digital_response(survey.freqs_hz)) ** 2
        _, bf = band_levels(survey.freqs_hz, np.stack([survey.programme_psd * h2, survey.noise_psd * h2]),
                            survey.fraction)
        ax.semilogx(c, _db(bf[0] / width), "--", color="C0", lw=1.5, label="programme after the filter")
        ax.semilogx(c, _db(bf[1] / width), "--", color="C3", lw=1.5, label="hiss after the filter")
        ax.axvline(design.f0_hz, color="C2", lw=1, ls=":")
        ax.annotate(f"f0 {design.f0_hz:,.0f} Hz", (design.f0_hz, 0.02), xycoords=("data", "axes fraction"),
                    xytext=(4, 0), textcoords="offset points", color="C2", fontsize=9)
    if survey.crossover_hz:
        ax.axvline(survey.crossover_hz, color="k", lw=1.2, ls="-.")
        ax.annotate(f"crossover {survey.crossover_hz:,.0f} Hz", (survey.crossover_hz, 0.95),
                    xycoords=("data", "axes fraction"), xytext=(4, 0), textcoords="offset points", fontsize=9)
    valid = _db(np.concatenate([bp[0] / width, bp[1] / width]))
    valid = valid[valid > -290]
    if valid.size:
        ax.set_ylim(max(valid.min() - 15, valid.max() - 110), valid.max() + 10)
    ax.set_xlim(20, survey.rate_hz / 2)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("power density (dB re FS²/Hz)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(loc="lower left", fontsize=8)


def survey_figure(survey, design=None, title: str = ""):
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(9, 5.5))
    draw_survey(ax, survey, design)
    src = {"auto": "found automatically", "spans": "given spans", "clip": "noise clip"}[survey.noise_source]
    ax.set_title(f"{title}\nhiss {survey.noise_rms_dbfs:.1f} dBFS RMS (flat), noise reference {src}, "
                 f"confidence {survey.confidence.grade}", fontsize=10)
    fig.tight_layout()
    return fig


def plot_survey(survey, path, design=None, title: str = "") -> None:
    save_figure(survey_figure(survey, design, title), path)
