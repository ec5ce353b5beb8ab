"""The plan picture: the trade-off between treble loss and hiss heard, where the hiss is heard, the choice over the spectra."""

from __future__ import annotations

import numpy as np

from audition.plots import place_line_labels, pyplot, save_figure
from audition.plan import alternative_kind
from audition.plots.survey import draw_survey


def draw_tradeoff(ax, pl):
    """Treble loss (largest cut where the programme is heard) against the share of the heard hiss taken away."""
    fl = [c.treble_loss_db for c in pl.front]
    fr = [c.reduction_pct for c in pl.front]
    ax.plot(fl, fr, "o-", color="C0", lw=1.5, ms=5, label="best filter for each budget")
    ax.axvline(pl.budget_db, color="C1", ls="--", lw=1)
    ax.annotate(f"budget {pl.budget_db:g} dB", (pl.budget_db, 0.97), xycoords=("data", "axes fraction"),
                xytext=(4, -10), textcoords="offset points", color="C1", fontsize=9)
    for alt in pl.alternatives:
        ax.plot([alt.treble_loss_db], [alt.reduction_pct], "s", color="C2", ms=7,
                label=f"{alternative_kind(alt, pl.choice)}: {alt.label}")
    best = pl.choice or pl.best_compromise
    if best is not None:
        what = "choice" if pl.choice is not None else "best compromise (not chosen)"
        ax.plot([best.treble_loss_db], [best.reduction_pct], "*", color="C3", ms=16, label=f"{what}: {best.label}")
    top = max([pl.budget_db * 2.5] + [x * 1.1 for x in fl])
    ax.set_xlim(0, top)
    ax.set_ylim(0, 100)
    ax.set_xlabel("treble loss: largest cut where the programme is heard (dB)")
    ax.set_ylabel("hiss heard taken away (%)")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="lower right", fontsize=8)


def draw_heard(ax, pl):
    """Per band, the share of the time the hiss is heard, without and with the filter."""
    from audition.plots import audio_ticks

    h0 = pl.hiss_before
    f = np.asarray(h0.bands_hz)
    ax.semilogx(f, 100 * np.asarray(h0.share_before), "o-", color="0.35", ms=4, label="no filter")
    best = pl.choice or pl.best_compromise
    if best is not None:
        ax.semilogx(f, 100 * np.asarray(best.hiss_heard.share_after), "o-", color="C3", ms=4,
                    label=f"with {best.label}")
    if pl.audible_hz:
        ax.axvspan(min(pl.audible_hz) / 1.12, max(pl.audible_hz) * 1.12, color="C2", alpha=0.08,
                   label="programme heard above the hiss: cuts here count against the budget")
    ax.set_ylim(0, 105)
    ax.set_xlim(100, max(f) * 1.3)
    audio_ticks(ax, 100, max(f) * 1.3)
    ax.set_xlabel("one-third-octave band (Hz)")
    ax.set_ylabel("time the hiss is heard (%)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(loc="upper left", fontsize=8)


def plan_figure(survey, pl, title: str = ""):
    plt = pyplot()
    fig = plt.figure(figsize=(15, 9.5))
    gs = fig.add_gridspec(2, 2, height_ratios=(1, 1.1))
    ax1, ax3 = fig.add_subplot(gs[0, 0]), fig.add_subplot(gs[0, 1])
    ax2 = fig.add_subplot(gs[1, :])
    draw_tradeoff(ax1, pl)
    ax1.set_title("trade-off at the listening level", fontsize=10)
    draw_heard(ax3, pl)
    ax3.set_title(f"where and how often the hiss is heard ({pl.listening_level_db:g} dB SPL for full scale)",
                  fontsize=10)
    best = pl.choice or pl.best_compromise
    draw_survey(ax2, survey, None if best is None else best.design, legend_loc=None)
    ax2.legend(loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=3, fontsize=8, frameon=False)
    ax2.set_title("spectra with the chosen filter" if pl.choice is not None else
                  "spectra (no filter chosen; the best compromise drawn)", fontsize=10)
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    place_line_labels(ax2)
    return fig


def plot_plan(survey, pl, path, title: str = "") -> None:
    save_figure(plan_figure(survey, pl, title), path)


def response_figure(design, treble_from_hz: float | None = None):
    """The chosen filter's magnitude on log frequency (digital solid, analog prototype dashed)."""
    plt = pyplot()
    nyq = design.rate_hz / 2.0
    f = np.geomspace(20.0, nyq * 0.999, 1500)
    mag_d = 20 * np.log10(np.maximum(np.abs(design.digital_response(f)), 1e-12))
    mag_a = 20 * np.log10(np.maximum(np.abs(design.analog_response(f)), 1e-12))
    fig, ax = plt.subplots(figsize=(9, 3.8))
    ax.semilogx(f, mag_a, "--", color="0.45", lw=1.2, label="analog prototype")
    ax.semilogx(f, mag_d, color="C0", lw=2, label=f"digital ({design.method}), as rendered")
    ax.axvline(design.f0_hz, color="C2", lw=1, ls=":")
    ax.annotate(f"f0 {design.f0_hz:,.0f} Hz", (design.f0_hz, 0.92), xycoords=("data", "axes fraction"),
                xytext=(4, 0), textcoords="offset points", color="C2", fontsize=9)
    if treble_from_hz:
        ax.axvspan(treble_from_hz, nyq, color="C1", alpha=0.07, label=f"treble band (from {treble_from_hz:,.0f} Hz)")
    ax.axhline(-3.01, color="0.7", lw=0.8)
    ax.annotate("-3.01 dB (half power)", (200.0, -3.01), xytext=(0, -11), textcoords="offset points", fontsize=8,
                color="0.4", bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.85))
    f3 = design.minus3db_hz()
    if f3:
        ax.plot([f3], [-3.01], "o", color="C3", ms=5, zorder=5, label=f"digital -3.01 dB point: {f3:,.0f} Hz")
    from audition.plan.choose import _design_label

    name = _design_label(design)
    hp = f", rumble high-pass {design.highpass_hz:,.0f} Hz" if design.highpass_hz else ""
    ax.set_title(f"the filter rendered: low-pass f0 {design.f0_hz:,.0f} Hz, {name}{hp}, "
                 f"{design.rate_hz:,.0f} Hz", fontsize=10)
    ax.set_ylim(max(-40.0, float(mag_d.min()) - 3), max(3.0, float(mag_d.max()) + 2))
    ax.set_xlim(20, nyq)
    from audition.plots import audio_ticks

    audio_ticks(ax, 20, nyq)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("gain (dB)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(loc="lower left", fontsize=8)
    fig.tight_layout()
    return fig


def report_figures(survey, pl, design, title: str = "", treble_from_hz: float | None = None) -> list[tuple[str, bytes]]:
    """PNG pictures for the job report: "spectra", "response" and (with a plan) "tradeoff"."""
    from audition.plots import figure_png
    from audition.plots.survey import survey_figure

    out = []
    if survey is not None:
        out.append(("spectra", figure_png(survey_figure(survey, design, title))))
    if design is not None:
        out.append(("response", figure_png(response_figure(design, treble_from_hz))))
    if pl is not None:
        plt = pyplot()
        fig, (ax, axh) = plt.subplots(1, 2, figsize=(14, 5))
        draw_tradeoff(ax, pl)
        ax.set_title("trade-off: treble loss against the hiss heard taken away", fontsize=10)
        draw_heard(axh, pl)
        axh.set_title("where and how often the hiss is heard", fontsize=10)
        fig.tight_layout()
        out.append(("tradeoff", figure_png(fig)))
    return out
