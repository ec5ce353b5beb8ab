"""The plan picture: the trade-off between SNR gain and treble loss, and the choice over the spectra."""

from __future__ import annotations

import numpy as np

from audition.plots import pyplot, save_figure
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
        ax.annotate(f"{alt.design.f0_hz:,.0f} Hz", (alt.treble_loss_db, alt.snr_gain_db[w]), xytext=(6, -12),
                    textcoords="offset points", fontsize=8, color="C2")
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
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(14, 5.5), width_ratios=(1, 1.3))
    draw_tradeoff(ax1, pl)
    ax1.set_title("trade-off", fontsize=10)
    draw_survey(ax2, survey, None if pl.choice is None else pl.choice.design)
    ax2.set_title("spectra with the chosen filter", fontsize=10)
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    return fig


def plot_plan(survey, pl, path, title: str = "") -> None:
    save_figure(plan_figure(survey, pl, title), path)
