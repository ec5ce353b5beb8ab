"""One self-contained HTML page that a technician files with the transfer.

Pictures are embedded as base64 PNG (no network, no external files), figures are
plain tables, and the provenance comes straight from the render's sidecar.
"""

from __future__ import annotations

import base64
import html
import json
import os

STYLE = """
body { font-family: system-ui, sans-serif; max-width: 60rem; margin: 2rem auto; color: #222; line-height: 1.45; }
h1 { font-size: 1.5rem; } h2 { font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5rem 0; } td, th { padding: 0.2rem 0.8rem; border-bottom: 1px solid #eee;
text-align: right; } th { background: #f4f4f4; } td:first-child, th:first-child { text-align: left; }
img { max-width: 100%; border: 1px solid #ddd; } .note { color: #555; font-size: 0.9rem; }
.warn { background: #fff4e0; border-left: 4px solid #e0a030; padding: 0.4rem 0.8rem; }
code { font-size: 0.85rem; word-break: break-all; }
"""


def _band(f_hz) -> str:
    return "—" if not f_hz else f"{f_hz / 1000:.1f} kHz"


def _fmt(v, unit="") -> str:
    if v is None:
        return "—"
    if isinstance(v, float):
        return f"{v:,.2f}{unit}"
    return html.escape(str(v)) + unit


def table(header, rows) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def image(png: bytes, alt: str) -> str:
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def build(title: str, sections: list[tuple[str, str]]) -> str:
    """The page from (heading, html body) pairs."""
    parts = [f"<!doctype html><html lang='en'><head><meta charset='utf-8'><title>{html.escape(title)}</title>",
             f"<style>{STYLE}</style></head><body><h1>{html.escape(title)}</h1>"]
    for heading, body in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>{body}")
    parts.append("</body></html>")
    return "\n".join(parts)


def figures_table(predicted: dict | None, measured: dict | None) -> str:
    """Predicted against measured, like with like: SNR gain and noise reduction per weighting, treble loss."""
    pr, me = predicted or {}, measured or {}
    rows = []
    for key, what in (("snr_gain_db", "SNR gain"), ("noise_reduction_db", "noise reduction")):
        for name, label in WEIGHTING_LABELS.items():
            rows.append([f"{what}, {label} (dB)", _fmt(pr.get(key, {}).get(name)), _fmt(me.get(key, {}).get(name))])
    rows.insert(0, ["treble loss: largest cut where the programme is heard (dB)", _fmt(pr.get("treble_loss_db")),
                    _fmt(me.get("treble_loss_db"))])
    rows.insert(1, ["band of that cut", _band(pr.get("treble_loss_hz")), _band(me.get("treble_loss_hz"))])
    ph, mh = pr.get("hiss_heard") or {}, me.get("hiss_heard") or {}
    rows.insert(2, ["hiss heard, before → after (sone, ISO 532-1)",
                    f"{_fmt(ph.get('before_sone'))} → {_fmt(ph.get('after_sone'))}" if ph else "—",
                    f"{_fmt(mh.get('before_sone'))} → {_fmt(mh.get('after_sone'))}" if mh else "—"])
    return table(["figure", "predicted (from the input's spectra)", "measured (input against output)"], rows)


#: Weighting names as printed (RMS detection throughout, not the 468 quasi-peak meter).
WEIGHTING_LABELS = {"flat": "unweighted", "a": "A-weighted (IEC 61672-1)", "itu468": "ITU-R BS.468-4 weighted, RMS"}

#: Sidecar keys shown in their own sections rather than in the provenance table.
_SHOWN_ELSEWHERE = ("design", "plan", "measured", "predicted", "survey")


def provenance(sidecar: dict) -> str:
    rows = []
    for k, v in sidecar.items():
        if k in _SHOWN_ELSEWHERE:
            continue
        if isinstance(v, dict):
            for k2, v2 in v.items():
                rows.append([html.escape(f"{k}.{k2}"), _code(v2)])
        else:
            rows.append([html.escape(k), _code(v)])
    return table(["field", "value"], rows)


def _code(v) -> str:
    text = json.dumps(v) if isinstance(v, (dict, list)) or v is None or isinstance(v, bool) else str(v)
    return f"<code>{html.escape(text)}</code>"


def _filter_rows(design) -> str:
    if design is None:
        return "<p><b>No filter was applied and no output was written.</b></p>"
    fig = design.figures()
    rows = [["cutoff f0", f"{design.f0_hz:,.0f} Hz"],
            ["order", _fmt(design.order)],
            ["alignment / Q", html.escape(design.alignment) if design.alignment else _fmt(design.q)],
            ["digitising method", html.escape(design.method)],
            ["rumble high-pass", _fmt(design.highpass_hz, " Hz") if design.highpass_hz else "none"],
            ["half-power (-3.01 dB) point", "—" if fig.minus3db_hz is None else f"{fig.minus3db_hz:,.0f} Hz"],
            ["resonant peak", f"{fig.peak_gain_db:+.2f} dB at {fig.peak_hz:,.0f} Hz" if fig.peak_gain_db > 0.05
             else "none (no lift above the passband)"],
            ["step overshoot", _fmt(fig.overshoot_pct, " %")]]
    secs = [[f"section {i + 1}: {html.escape(s.kind)}", f"f0 {s.f0_hz:,.1f} Hz" + ("" if s.q is None else
             f", Q {s.q:.4f}")] for i, s in enumerate(design.sections)]
    return table(["", ""], rows + secs)


def render_page(job: dict, sidecar: dict, survey, plan, design) -> str:
    """The HTML page of one render job (see :func:`audition.pipeline.render_job`).

    Parameters
    ----------
    job : dict
        What the job returned (render summary, predicted, measured, plan, warnings).
    sidecar : dict
        The sidecar as written, for the provenance.
    survey : audition.survey.onepass.Survey or None
    plan : audition.plan.Plan or None
    design : audition.design.Design
        The filter that was rendered.
    """
    from audition.plots.plan import report_figures

    pictures = dict(report_figures(survey, plan, design, title=os.path.basename(job["input"]),
                                   treble_from_hz=(job.get("predicted") or {}).get("treble_from_hz")))
    sections = []
    if design is None:
        intro = (f"<p><b>{html.escape(job['input'])}</b>: <b>no filter</b>: "
                 f"{html.escape(job.get('no_filter_reason') or '')}. Nothing was rendered; the input was only "
                 "read.</p>")
    else:
        intro = (f"<p><b>{html.escape(job['input'])}</b> was filtered into <b>{html.escape(job['output'])}</b> "
                 f"({html.escape(job['format'])} {html.escape(job['subtype'])}, {job['rate']:g} Hz, "
                 f"{job['channels']} channel(s), {job['duration_seconds']:.2f} s). The input was only read; keep "
                 "the unprocessed transfer and this page with it.</p>")
    warnings = job.get("warnings") or []
    if warnings:
        intro += "".join(f"<p class='warn'>{html.escape(w)}</p>" for w in warnings)
    sections.append(("What was done", intro))
    if survey is not None:
        sv = job.get("survey") or survey.to_dict()
        spans = ", ".join(f"{a:.2f}–{b:.2f} s" for a, b in survey.spans[:12]) or "none (separate clip)"
        if len(survey.spans) > 12:
            spans += f" and {len(survey.spans) - 12} more"
        src = {"auto": "found automatically from the quietest frames", "spans": "the spans given",
               "clip": "a separate noise clip"}[survey.noise_source]
        conf = survey.confidence
        rows = [["noise reference", html.escape(src)], ["noise spans", html.escape(spans)],
                ["confidence", f"{html.escape(conf.grade)} (separation {_fmt(conf.separation_db, ' dB')}, "
                               f"{conf.noise_seconds:.2f} s of noise)"],
                ["hiss level, unweighted", _fmt(survey.noise_rms_dbfs, " dBFS")],
                ["programme level (estimate), unweighted", _fmt(survey.programme_rms_dbfs, " dBFS")],
                ["crossover (programme meets the hiss)", f"{sv['crossover_hz']:,.0f} Hz"
                 if sv.get("crossover_hz") else "none: the programme stays above the hiss"]]
        body = table(["", ""], rows)
        if "spectra" in pictures:
            body += image(pictures["spectra"], "programme and hiss spectra with the crossover and the filter")
        body += ("<p class='note'>Levels are dBFS as 20·log10(rms): a full-scale sine reads -3.01 dBFS. "
                 "Weightings are applied to the power spectrum (RMS detection), not with the 468 quasi-peak "
                 "meter.</p>")
        sections.append(("Survey: the hiss against the programme", body))
    body = ""
    if plan is not None:
        body += f"<p>{html.escape(plan.explanation)}</p>"
    body += _filter_rows(design)
    if "response" in pictures:
        body += image(pictures["response"], "magnitude response of the chosen filter")
    sections.append(("The filter" + (" chosen" if plan is not None else ""), body))
    if plan is not None:
        body = image(pictures["tradeoff"], "trade-off between treble loss and hiss heard") if "tradeoff" in pictures \
            else ""
        w = plan.weighting
        rows = []
        cands = ([("choice", plan.choice)] if plan.choice else []) + \
            ([("best compromise (not chosen)", plan.best_compromise)] if plan.best_compromise else []) + \
            [("alternative", a) for a in plan.alternatives]
        for label, cand in cands:
            snr = cand.snr_gain_db.get(w)
            rows.append([label, html.escape(cand.label), f"{cand.treble_loss_db:.2f}", _band(cand.treble_loss_hz),
                         f"{cand.reduction_pct:.0f} %", "—" if snr is None else f"{snr:.2f}"])
        body += table(["", "design", "treble loss (dB)", "in band", "hiss heard taken away",
                       f"SNR gain, {WEIGHTING_LABELS.get(w, w)} (dB)"], rows)
        body += (f"<p class='note'>{plan.searched:,} candidates searched; the treble-loss budget was "
                 f"{plan.budget_db:g} dB, listening at {plan.listening_level_db:g} dB SPL for a full-scale sine. "
                 "Treble loss is the largest cut the filter makes in a one-third-octave band where the programme "
                 "is heard (above the hiss and the threshold of hearing); a resonant lift does not pay for it. "
                 "The hiss heard is the ISO 532-1 loudness the hiss adds to the programme, averaged over every "
                 "frame.</p>")
        sections.append(("Trade-off", body))
    if job.get("predicted") or job.get("measured"):
        body = figures_table(job.get("predicted"), job.get("measured"))
        body += ("<p class='note'>Predicted from the input's surveyed spectra; measured on the same noise reference "
                 "and programme segments of the input and the rendered output (programme = outside the noise "
                 "reference, noise subtracted). The measured output includes its dither.</p>")
        sections.append(("Predicted and measured", body))
    if sidecar is not None:
        sections.append(("Provenance (from the sidecar " + os.path.basename(job.get("sidecar") or "") + ")",
                         provenance(sidecar)))
    return build(f"audition: hiss filter report for {os.path.basename(job['input'])}", sections)


def write(path, text: str) -> None:
    """Write the page (or any text) atomically: a temporary file in the target folder, then a rename."""
    from audition.io import sidecar

    sidecar.write_text(path, text, "report")
