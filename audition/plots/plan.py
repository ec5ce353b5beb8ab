"""The plan picture: the trade-off between SNR gain and treble loss, and the choice over the spectra."""

from __future__ import annotations

import numpy as np

from audition.plots import pyplot, save_figure
from audition.plan import alternative_kind
from audition.plots.survey import draw_survey


def draw_tradeoff(ax, pl):
    w = pl.weighting
    ok = np.isfinite(pl.all_gain_db) & np.isfinite(pl.all_loss_db)
    ax.plot(pl.all_loss_db[ok & pl.all_allowed], pl.all_gain_db[ok & pl.all_allowed], ".", color="0.6", ms=3,
            label="candidates")
    ax.plot(pl.all_loss_db[ok & ~pl.all_allowed], pl.all_gain_db[ok & ~pl.all_allowed], "x", color="0.85", ms=3,
            label="left out: resonant peak above the limit")
    fl = [c.treble_loss_db for c in pl.front]
    fg = [c.snr_gain_db[w] for c in pl.front]
    ax.plot(fl, fg, "-", color="C0", lw=2, label="best gain for each loss (Pareto front)")
    ax.axvline(pl.budget_db, color="C1", ls="--", lw=1)
    ax.annotate(f"budget {pl.budget_db:g} dB", (pl.budget_db, 0.03), xycoords=("data", "axes fraction"),
                xytext=(4, 0), textcoords="offset points", color="C1", fontsize=9)
    for alt in pl.alternatives:
        ax.plot([alt.treble_loss_db], [alt.snr_gain_db[w]], "s", color="C2", ms=7)
        ax.annotate(f"{alternative_kind(alt, pl.choice)}: {alt.label}", (alt.treble_loss_db, alt.snr_gain_db[w]),
                    xytext=(8, -16), textcoords="offset points", fontsize=8, color="C2",
                    bbox=dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.85))
    if pl.choice is not None:
        c = pl.choice
        ax.plot([c.treble_loss_db], [c.snr_gain_db[w]], "*", color="C3", ms=16, label=f"choice: {c.label}")
    top = max(pl.budget_db * 4, 3.0)
    ax.set_xlim(0, top)
    sel = ok & (pl.all_loss_db <= top)
    if sel.any():
        ax.set_ylim(min(0.0, float(pl.all_gain_db[sel].min())), float(pl.all_gain_db[sel].max()) * 1.1 + 0.5)
    ax.set_xlabel("treble loss (dB of programme above the treble edge)")
    ax.set_ylabel(f"SNR gain, {w} weighted (dB)")
    ax.grid(True, alpha=0.3)
    ax.legend(loc="lower right", fontsize=8)


def plan_figure(survey, pl, title: str = ""):
    plt = pyplot()
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(14, 6.4), width_ratios=(1, 1.3))
    draw_tradeoff(ax1, pl)
    ax1.set_title("trade-off", fontsize=10)
    draw_survey(ax2, survey, None if pl.choice is None else pl.choice.design, legend_loc=None)
    # below the axes, as in the survey picture: inside, it would hide the hiss or the labels
    ax2.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=3, fontsize=8, frameon=False)
    ax2.set_title("spectra with the chosen filter", fontsize=10)
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
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
    name = (f"order {design.order} {design.alignment}" if design.alignment
            else f"order {design.order}" + (f", Q {design.q:.3f}" if design.q else ""))
    hp = f", rumble high-pass {design.highpass_hz:,.0f} Hz" if design.highpass_hz else ""
    ax.set_title(f"the filter rendered: low-pass f0 {design.f0_hz:,.0f} Hz, {name}{hp}, "
                 f"{design.rate_hz:,.0f} Hz", fontsize=10)
    ax.set_ylim(max(-40.0, float(mag_d.min()) - 3), max(3.0, float(mag_d.max()) + 2))
    ax.set_xlim(20, nyq)
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
    out.append(("response", figure_png(response_figure(design, treble_from_hz))))
    if pl is not None:
        plt = pyplot()
        fig, ax = plt.subplots(figsize=(9, 5))
        draw_tradeoff(ax, pl)
        ax.set_title(f"{title}: SNR gain against treble loss, every candidate", fontsize=10)
        fig.tight_layout()
        out.append(("tradeoff", figure_png(fig)))
    return out
