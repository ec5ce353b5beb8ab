"""The batch picture: what every clip gained and lost, predicted against measured, and its true peak."""

from __future__ import annotations

import math
import os

from audition.plots import pyplot, save_figure

#: Clips named on the trade-off panel at most (the report has every row).
MAX_LABELS = 6
#: A measured SNR gain this far from its prediction (dB) gets the clip named.
MISS_DB = 1.0
#: Failures listed under the panels at most.
MAX_FAILURES = 8


def _num(v) -> float | None:
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) else None


def short_names(paths) -> list[str]:
    """Each path below the folder all of them share (two files of one name in different folders stay apart)."""
    paths = [os.path.abspath(p) for p in paths]
    if not paths:
        return []
    base = os.path.commonpath(paths) if len(paths) > 1 else os.path.dirname(paths[0])
    return [os.path.relpath(p, base) for p in paths]


def figure_points(rows, weighting: str) -> list[dict]:
    """Per clip with figures: name, status, measured and predicted (treble loss, SNR gain) in dB.

    The name is the output's path below the folder all the outputs share (two
    clips of the same file name in different folders stay apart).
    """
    kept = [r for r in rows if r["status"] in ("done", "skipped")]
    pts = []
    for r, name in zip(kept, short_names(r["output"] for r in kept)):
        m = (_num(r.get("measured_treble_loss_db")), _num(r.get(f"measured_snr_gain_db_{weighting}")))
        p = (_num(r.get("predicted_treble_loss_db")), _num(r.get(f"predicted_snr_gain_db_{weighting}")))
        if None in m:
            continue
        pts.append({"name": name, "status": r["status"], "measured": m, "predicted": None if None in p else p})
    return pts


def labelled(pts) -> list[int]:
    """Which points to name: the lowest gain, the largest loss, then the clips whose gain missed its prediction.

    A miss is ``MISS_DB`` or more, largest first; at most ``MAX_LABELS`` names in all.
    """
    if not pts:
        return []
    order = [min(range(len(pts)), key=lambda i: pts[i]["measured"][1]),
             max(range(len(pts)), key=lambda i: pts[i]["measured"][0])]

    def miss_db(i):
        return abs(pts[i]["measured"][1] - pts[i]["predicted"][1])

    miss = sorted((i for i in range(len(pts)) if pts[i]["predicted"] is not None and miss_db(i) >= MISS_DB),
                  key=lambda i: -miss_db(i))
    out: list[int] = []
    for i in order + miss:
        if i not in out:
            out.append(i)
    return out[:MAX_LABELS]


def batch_figure(result, weighting: str = "itu468", title: str = "", budget_db: float | None = None):
    """Two panels and a footnote: gain against loss per clip; the outputs' true peaks; counts and failures.

    ``budget_db``: the treble-loss budget the clips were planned to (``--auto``), drawn as a line.
    """
    plt = pyplot()
    from matplotlib.ticker import MaxNLocator

    rows = result.rows
    kept = [r for r in rows if r["status"] in ("done", "skipped")]  # rendered by this run or an earlier one
    fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(13, 6.2), width_ratios=(1.6, 1))
    pts = figure_points(rows, weighting)
    if pts:
        for status, colour, name in (("done", "C0", "rendered"), ("skipped", "C2", "already done (its sidecar)")):
            sel = [p for p in pts if p["status"] == status]
            if not sel:
                continue
            for p in sel:
                if p["predicted"] is not None:
                    ax1.plot([p["predicted"][0], p["measured"][0]], [p["predicted"][1], p["measured"][1]], "-",
                             color="0.75", lw=0.8, zorder=1)
            pred = [p["predicted"] for p in sel if p["predicted"] is not None]
            if pred:
                ax1.plot([x for x, _ in pred], [y for _, y in pred], "o", mfc="none", mec=colour, ms=6, zorder=2,
                         label=f"{name}: predicted from the survey")
            ax1.plot([p["measured"][0] for p in sel], [p["measured"][1] for p in sel], "o", color=colour, ms=5,
                     zorder=3, label=f"{name}: measured on the output")
        for k, i in enumerate(labelled(pts)):
            x, y = pts[i]["measured"]
            ax1.annotate(pts[i]["name"], (x, y), xytext=(6, 5 if k % 2 == 0 else -13), textcoords="offset points",
                         fontsize=8, bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.8))
        ax1.axhline(0.0, color="0.6", lw=0.8)
        if budget_db is not None:
            ax1.axvline(budget_db, color="C1", ls="--", lw=1)
            ax1.annotate(f"budget {budget_db:g} dB", (budget_db, 0.03), xycoords=("data", "axes fraction"),
                         xytext=(4, 0), textcoords="offset points", color="C1", fontsize=9)
        # from zero loss, so the distances between clips (and between prediction and measurement) read true
        xs = [v for p in pts for v in (p["measured"][0], (p["predicted"] or p["measured"])[0])] + [budget_db or 0.0]
        ax1.set_xlim(min(0.0, min(xs)), max(xs) * 1.15 + 0.05)
        ax1.legend(loc="lower left", fontsize=8)
    else:
        why = ("no SNR or treble figures: the clips were rendered without a survey (--no-figures)" if kept
               else "no clip was rendered")
        ax1.text(0.5, 0.5, why, ha="center", va="center", transform=ax1.transAxes, fontsize=9, wrap=True)
    ax1.set_xlabel("treble loss (dB of programme above the treble edge)")
    ax1.set_ylabel(f"SNR gain, {weighting} weighted (dB)")
    ax1.set_title(f"per clip: what the filter gained and cost ({len(pts)} of {len(rows)} clips with figures)",
                  fontsize=10)
    ax1.grid(True, alpha=0.3)

    peaks = [(_num(r.get("true_peak_dbtp")), r.get("clipped_samples") or 0) for r in kept]
    peaks = [(tp, c) for tp, c in peaks if tp is not None]
    if peaks:
        tps = [tp for tp, _ in peaks]
        lo, hi = min(tps + [-6.0]), max(tps + [0.5])
        bins = max(5, min(40, int(math.ceil((hi - lo) / 0.5))))
        ax2.hist(tps, bins=bins, range=(math.floor(lo), math.ceil(hi)), color="C0", alpha=0.8)
        ax2.axvline(0.0, color="C3", lw=1.2)
        ax2.annotate("0 dBTP", (0.0, 0.95), xycoords=("data", "axes fraction"), xytext=(4, 0),
                     textcoords="offset points", color="C3", fontsize=9)
        clipped = sum(1 for _, c in peaks if c)
        ax2.set_title(f"true peak of the outputs; {clipped} clip(s) with clipped samples", fontsize=10)
    else:
        ax2.text(0.5, 0.5, "no rendered clips", ha="center", va="center", transform=ax2.transAxes, fontsize=9)
        ax2.set_title("true peak of the outputs", fontsize=10)
    ax2.set_xlabel("true peak (dBTP, ITU-R BS.1770-4)")
    ax2.set_ylabel("clips")
    ax2.yaxis.set_major_locator(MaxNLocator(integer=True))
    ax2.grid(True, alpha=0.3)

    s = result.summary
    c = s["counts"]
    notes = [f"{s['files']} clip(s): {c['done']} rendered, {c['skipped']} already done, {c['failed']} failed"
             + (f", {c['not_run']} not run" if c["not_run"] else "")
             + f"; {s['rendered_audio_seconds'] / 60.0:,.1f} min of audio rendered in {s['wall_seconds']:.1f} s"]
    names = short_names(r["input"] for r in rows)
    failed = [(name, r) for name, r in zip(names, rows) if r["status"] == "failed"]
    for name, r in failed[:MAX_FAILURES]:
        reason = r["reason"] if len(r["reason"]) <= 110 else r["reason"][:107] + "..."
        notes.append(f"failed: {name}: {reason}")
    if len(failed) > MAX_FAILURES:
        notes.append(f"and {len(failed) - MAX_FAILURES} more failed (see the report)")
    fig.suptitle(title or "batch summary", fontsize=11)
    fig.text(0.01, 0.01, "\n".join(notes), fontsize=8, va="bottom", ha="left", family="monospace")
    fig.tight_layout(rect=(0, 0.03 + 0.022 * len(notes), 1, 1))
    return fig


def plot_batch(result, path, weighting: str = "itu468", title: str = "", budget_db: float | None = None) -> None:
    save_figure(batch_figure(result, weighting, title, budget_db), path)
