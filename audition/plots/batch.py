"""The batch picture: what every clip gained and lost, predicted against measured, and its true peak."""

from __future__ import annotations

import math
import os

from audition.plots import mark_line, place_line_labels, pyplot, save_figure

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


#: How weightings are named on the pictures.
WEIGHTING_NAMES = {"flat": "unweighted", "a": "A-weighted", "itu468": "ITU-R 468-weighted"}


def _gain(measure: str, weighting: str) -> dict:
    """What the filter gained, as the picture shows it: the row's column (after "measured_" or
    "predicted_"), the axis label, the key's heading and cell, and the key's footnote."""
    if measure == "heard":
        return {"column": "hiss_heard_reduction_pct", "axis": "hiss heard taken away (%, ISO 532-1)",
                "heading": "heard", "cell": lambda v: f"-{v:.0f} %",
                "footnote": "measured: loss in dB, hiss heard taken away in %"}
    return {"column": f"snr_gain_db_{weighting}",
            "axis": f"SNR gain, {WEIGHTING_NAMES.get(weighting, weighting)} (dB)",
            "heading": "gain", "cell": lambda v: f"{v:5.2f}", "footnote": "loss and gain measured, dB"}


def figure_points(rows, column: str) -> list[dict]:
    """Per clip with figures: name, status, measured and predicted (treble loss in dB, gain).

    The gain is the row's ``measured_COLUMN`` and ``predicted_COLUMN`` (see :func:`_gain`).
    The name is the output's path below the folder all the outputs share (two clips of the
    same file name in different folders stay apart).
    """
    kept = [r for r in rows if r["status"] in ("done", "skipped")]
    pts = []
    for r, name in zip(kept, short_names(r["output"] for r in kept)):
        m = (_num(r.get("measured_treble_loss_db")), _num(r.get(f"measured_{column}")))
        p = (_num(r.get("predicted_treble_loss_db")), _num(r.get(f"predicted_{column}")))
        if None in m:
            continue
        pts.append({"name": name, "status": r["status"], "measured": m, "predicted": None if None in p else p,
                    "f0_hz": _num(r.get("f0_hz"))})
    return pts


#: Clips numbered on the trade-off panel and listed in its key at most (the report has every row).
MAX_KEY = 20


def _f0_text(f0_hz) -> str:
    return "no f0" if f0_hz is None else (f"{f0_hz / 1000:.2f} kHz" if f0_hz >= 1000 else f"{f0_hz:.0f} Hz")


def key_lines(pts, rows, gain: dict) -> list[str]:
    """The key beside the trade-off panel: each numbered clip with its f0, loss and gain (as :func:`_gain`
    describes it); then the clips with no filter."""
    w = max([len(p["name"]) for p in pts[:MAX_KEY]] + [4])
    w = min(w, 28)
    lines = [f"{'#':>2}  {'clip':<{w}}  {'f0':>9}  {'loss':>5}  {gain['heading']:>5}"]
    for n, p in enumerate(pts[:MAX_KEY], 1):
        name = p["name"] if len(p["name"]) <= w else "…" + p["name"][-(w - 1):]
        lines.append(f"{n:>2}  {name:<{w}}  {_f0_text(p['f0_hz']):>9}  {p['measured'][0]:5.2f}  "
                     f"{gain['cell'](p['measured'][1]):>5}")
    if len(pts) > MAX_KEY:
        lines.append(f"    and {len(pts) - MAX_KEY} more (see the report)")
    nof = [r for r in rows if r["status"] in ("no filter", "no_filter")]
    if nof:
        names = short_names(r["input"] for r in rows)
        shown = [n for n, r in zip(names, rows) if r["status"] in ("no filter", "no_filter")]
        lines.append("")
        lines.append(f"no filter chosen ({len(nof)}):")
        lines += ["    " + n for n in shown[:8]] + (["    …"] if len(shown) > 8 else [])
    lines.append(gain["footnote"])
    return lines


def _number_points(ax, pts) -> None:
    """Each point's number beside it; a number that would cover another is moved up or down until it is clear."""
    renderer = ax.figure.canvas.get_renderer()
    placed = []
    for n, p in enumerate(pts[:MAX_KEY], 1):
        x, y = p["measured"]
        for dy in (4, -12, 14, -22, 24, -32, 34, -42):
            t = ax.annotate(str(n), (x, y), xytext=(5, dy), textcoords="offset points", fontsize=8, fontweight="bold",
                            bbox=dict(boxstyle="round,pad=0.1", fc="white", ec="none", alpha=0.85))
            bb = t.get_window_extent(renderer)
            if not any(bb.overlaps(o) for o in placed):
                break
            t.remove()
        placed.append(bb)


def batch_figure(result, weighting: str = "itu468", title: str = "", budget_db: float | None = None,
                 measure: str = "snr"):
    """Two panels, a key and a footnote: gain against loss per clip; the outputs' true peaks; counts and failures.

    The gain is the hiss heard taken away (``measure="heard"``, what the planner judges by
    default) or the SNR gain with ``weighting``. Every clip with figures is numbered on the
    trade-off panel and listed in the key beside it with its f0 (up to ``MAX_KEY``).
    ``budget_db``: the treble-loss budget the clips were planned to (``--auto``), drawn as a line.
    """
    plt = pyplot()
    from matplotlib.ticker import MaxNLocator

    rows = result.rows
    kept = [r for r in rows if r["status"] in ("done", "skipped")]  # rendered by this run or an earlier one
    gain = _gain(measure, weighting)
    pts = figure_points(rows, gain["column"])
    keys = key_lines(pts, rows, gain) if pts else []
    key_w = 0.0 if not keys else min(5.5, 0.075 * max(len(k) for k in keys) + 0.3)
    fig, (ax1, axk, ax2) = plt.subplots(1, 3, figsize=(13 + key_w, 6.2),
                                        width_ratios=(1.6, max(0.01, key_w / 5.0), 1))
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
        ax1.axhline(0.0, color="0.6", lw=0.8)
        if budget_db is not None:
            ax1.axvline(budget_db, color="C1", ls="--", lw=1)
        # from zero loss, so the distances between clips (and between prediction and measurement) read true
        xs = [v for p in pts for v in (p["measured"][0], (p["predicted"] or p["measured"])[0])] + [budget_db or 0.0]
        ys = [v for p in pts for v in (p["measured"][1], (p["predicted"] or p["measured"])[1])] + [0.0]
        ax1.set_xlim(min(0.0, min(xs)), max(xs) * 1.15 + 0.05)
        span = max(ys) - min(ys) or 1.0
        # room above the points for the budget label and below them for the legend
        ax1.set_ylim(min(ys) - 0.35 * span, max(ys) + 0.18 * span)
        ax1.legend(loc="lower left", fontsize=8)
    else:
        why = ("no hiss or treble figures: the clips were rendered without a survey (--no-figures)" if kept
               else "no clip was rendered")
        ax1.text(0.5, 0.5, why, ha="center", va="center", transform=ax1.transAxes, fontsize=9, wrap=True)
    ax1.set_xlabel("treble loss: largest cut where the programme is heard (dB)")
    ax1.set_ylabel(gain["axis"])
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
        mark_line(ax2, 0.0, "0 dBTP", "C3")
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
             + (f", {c['no_filter']} with no filter chosen" if c.get("no_filter") else "")
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
    # the key takes the middle column's place as text, so the figure keeps its two panels
    box = axk.get_position()
    fig.delaxes(axk)
    if keys:
        fig.text(box.x0 + 0.005, box.y1, "\n".join(keys), fontsize=8, va="top", ha="left", family="monospace")
    if pts:
        _number_points(ax1, pts)
        if budget_db is not None:
            mark_line(ax1, budget_db, f"budget {budget_db:g} dB", "C1")
        place_line_labels(ax1)
    if peaks:
        place_line_labels(ax2)
    return fig


def plot_batch(result, path, weighting: str = "itu468", title: str = "", budget_db: float | None = None,
               measure: str = "snr") -> None:
    save_figure(batch_figure(result, weighting, title, budget_db, measure), path)
