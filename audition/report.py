"""One self-contained HTML page that a technician files with the transfer.

Pictures are embedded as base64 PNG (no network, no external files), figures are
plain tables, and the provenance comes straight from the render's sidecar.

Everything on the page is written for a person: numbers rounded to what they
mean (levels and peaks to 2 decimals), a dash where a figure does not exist,
text left-aligned and numbers right-aligned, and no raw JSON. Only fixity
values (SHA-256) and file paths may break anywhere to fit the width.
"""

from __future__ import annotations

import base64
import html
import json
import math
import os

from audition.errors import BadInputFile

STYLE = """
body { font-family: system-ui, sans-serif; max-width: 62rem; margin: 1.5rem auto; padding: 0 1rem; color: #1f2428;
  line-height: 1.45; overflow-wrap: normal; word-break: normal; hyphens: manual; }
h1 { font-size: 1.45rem; margin-bottom: 0.3rem; }
h2 { font-size: 1.12rem; margin-top: 2rem; border-bottom: 1px solid #c9cdd2; padding-bottom: 0.15rem; }
table { border-collapse: collapse; margin: 0.5rem 0; }
th, td { padding: 0.22rem 0.75rem; border-bottom: 1px solid #e6e8eb; text-align: left; vertical-align: top; }
thead th { background: #eef0f2; font-weight: 600; }
tbody th { font-weight: normal; color: #4b535b; white-space: nowrap; }
.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num { white-space: nowrap; }
table.wide { width: 100%; }
.fixity { font-family: ui-monospace, monospace; font-size: 0.85rem; overflow-wrap: anywhere; }
img { max-width: 100%; border: 1px solid #d4d7da; margin: 0.4rem 0; }
.note { color: #50585f; font-size: 0.9rem; }
.warn { background: #fbf3e4; border-left: 4px solid #c98a1b; padding: 0.4rem 0.8rem; }
"""

#: Shown instead of a figure that does not exist (no programme left, digital silence, not given).
MISSING = "—"


# ---------------------------------------------------------------------------
# Numbers and values, for people
# ---------------------------------------------------------------------------


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def number(v, decimals: int = 2, unit: str = "", signed: bool = False) -> str:
    """``v`` with thousands separators and ``decimals`` decimals, then the unit; a dash if it is no number.

    >>> number(-3.7900694947850915, 2, " dBFS")
    '-3.79 dBFS'
    >>> number(float("nan")), number(None)
    ('—', '—')
    """
    if not _finite(v):
        return MISSING
    text = f"{round(float(v), decimals) + 0.0:{'+' if signed else ''},.{decimals}f}"  # + 0.0: no "-0.00"
    return text + unit


def _band(f_hz) -> str:
    return number(f_hz / 1000, 1, " kHz") if _finite(f_hz) and f_hz > 0 else MISSING


def _fmt(v, unit="") -> str:
    """A figure: floats to 2 decimals, whole numbers as they are, text escaped; a dash for none."""
    if isinstance(v, float) or v is None:
        return number(v, 2, unit)
    return html.escape(str(v)) + unit


def plain(v) -> str:
    """Any sidecar value as short text for a person (escaped HTML): no JSON, no null, no nan.

    None is a dash, booleans yes/no, whole floats without decimals ("2,000"), other
    floats to 4 significant figures, lists joined with commas, mappings as
    "key value; key value".
    """
    if v is None:
        return MISSING
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, float):
        if not math.isfinite(v):
            return MISSING
        if v == round(v) and abs(v) < 1e15:
            return f"{int(round(v)):,}"
        return f"{v:,.4g}" if abs(v) >= 1e-3 else f"{v:.3g}"
    if isinstance(v, (list, tuple)):
        return ", ".join(plain(x) for x in v) if v else "none"
    if isinstance(v, dict):
        return "; ".join(f"{_words(k)} {plain(x)}" for k, x in v.items()) if v else "none"
    return html.escape(str(v))


def _words(key: str) -> str:
    """A snake_case key as words, its unit spelled as people write it: "f0_hz" -> "f0 (Hz)"."""
    units = {"hz": "Hz", "db": "dB", "dbfs": "dBFS", "dbtp": "dBTP", "pct": "%", "seconds": "s", "ms": "ms",
             "ohm": "Ω", "sone": "sone", "bytes": "bytes", "utc": "UTC", "lsb": "LSB"}
    parts = str(key).split("_")
    if len(parts) > 1 and parts[-1] in units:
        return html.escape(" ".join(parts[:-1])) + f" ({units[parts[-1]]})"
    return html.escape(" ".join(parts))


def fixity(text) -> str:
    """A hash or a path: monospace, allowed to break anywhere (it has no words to break)."""
    return MISSING if not text else f"<span class='fixity'>{html.escape(str(text))}</span>"


# ---------------------------------------------------------------------------
# Page pieces
# ---------------------------------------------------------------------------


def table(header, rows, numeric=()) -> str:
    """A table; ``header`` a list of column names or None (no header row); ``numeric`` the right-aligned columns.

    Cells are HTML already (escape text first).
    """
    numeric = set(numeric)

    def cls(i):
        return " class='num'" if i in numeric else ""

    head = ""
    if header is not None:
        head = "<thead><tr>" + "".join(f"<th{cls(i)}>{html.escape(h)}</th>" for i, h in enumerate(header)) + \
            "</tr></thead>"
    body = "".join("<tr>" + "".join(f"<td{cls(i)}>{c}</td>" for i, c in enumerate(row)) + "</tr>" for row in rows)
    return f"<table{' class=wide' if header is not None else ''}>{head}<tbody>{body}</tbody></table>"


def fields(rows) -> str:
    """A two-column table of (name, value) with no header row: the name as a row heading, the value as text."""
    body = "".join(f"<tr><th scope='row'>{html.escape(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f"<table><tbody>{body}</tbody></table>"


def image(png: bytes, alt: str) -> str:
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def build(title: str, sections: list[tuple[str, str]], lead: str = "") -> str:
    """The page from (heading, html body) pairs; ``lead`` (HTML) goes under the title, before the sections."""
    parts = [f"<!doctype html><html lang='en'><head><meta charset='utf-8'>"
             f"<meta name='viewport' content='width=device-width, initial-scale=1'><title>{html.escape(title)}</title>",
             f"<style>{STYLE}</style></head><body><h1>{html.escape(title)}</h1>{lead}"]
    for heading, body in sections:
        parts.append(f"<h2>{html.escape(heading)}</h2>{body}")
    parts.append("</body></html>")
    return "\n".join(parts)


#: Weighting names as printed (RMS detection throughout, not the 468 quasi-peak meter).
WEIGHTING_LABELS = {"flat": "unweighted", "a": "A-weighted (IEC 61672-1)", "itu468": "ITU-R 468-weighted, RMS"}


def figures_table(predicted: dict | None, measured: dict | None) -> str:
    """Predicted against measured, like with like: SNR gain and noise reduction per weighting, treble loss."""
    pr, me = predicted or {}, measured or {}
    ph, mh = pr.get("hiss_heard") or {}, me.get("hiss_heard") or {}

    def heard(h):
        return f"{number(h.get('before_sone'))} → {number(h.get('after_sone'))}" if h else MISSING

    rows = [["treble loss: largest cut where the programme is heard (dB)", number(pr.get("treble_loss_db")),
             number(me.get("treble_loss_db"))],
            ["band of that cut", _band(pr.get("treble_loss_hz")), _band(me.get("treble_loss_hz"))],
            ["hiss heard, before → after (sone, ISO 532-1)", heard(ph), heard(mh)]]
    for key, what in (("snr_gain_db", "SNR gain"), ("noise_reduction_db", "noise reduction")):
        for name, label in WEIGHTING_LABELS.items():
            rows.append([f"{what}, {label} (dB)", number((pr.get(key) or {}).get(name)),
                         number((me.get(key) or {}).get(name))])
    return table(["figure", "predicted (from the input's spectra)", "measured (input against output)"], rows,
                 numeric=(1, 2))


# ---------------------------------------------------------------------------
# Who and what: the record of the work
# ---------------------------------------------------------------------------

#: The who-and-what fields of the sidecar's "transfer" record, as printed, in order.
TRANSFER_FIELDS = (("carrier_id", "carrier ID"), ("operator", "operator"), ("playback_chain", "playback chain"),
                   ("note", "note"))


def _size(n) -> str:
    if not _finite(n):
        return MISSING
    n = int(n)
    for scale, unit in ((2 ** 30, "GiB"), (2 ** 20, "MiB"), (2 ** 10, "KiB")):
        if n >= scale:
            return f"{n / scale:,.2f} {unit} ({n:,} bytes)"
    return f"{n:,} bytes"


def record_rows(sidecar: dict | None, job: dict) -> list[tuple[str, str]]:
    """Who did what to which file: the transfer fields, the time, the software, and each file's fixity."""
    side = sidecar or {}
    rows = []
    transfer = side.get("transfer") or job.get("transfer") or {}
    for key, label in TRANSFER_FIELDS:
        rows.append((label, html.escape(transfer[key]) if transfer.get(key) else "not given"))
    if side.get("processed_utc"):
        rows.append(("processed (UTC)", html.escape(side["processed_utc"].replace("T", " ").rstrip("Z"))))
    if side.get("audition_version"):
        rows.append(("software", "audition " + html.escape(str(side["audition_version"]))))
    inp = side.get("input") if isinstance(side.get("input"), dict) else {}
    rows.append(("input file", fixity(inp.get("path") or job.get("input"))))
    if inp:
        rows.append(("input size", _size(inp.get("size_bytes"))))
        rows.append(("input SHA-256", fixity(inp.get("sha256"))))
    out = side.get("output") if isinstance(side.get("output"), dict) else {}
    if out or job.get("output"):
        rows.append(("output file", fixity(out.get("path") or job.get("output"))))
    if out.get("size_bytes") is not None:
        rows.append(("output size", _size(out.get("size_bytes"))))
    if out.get("sha256"):
        rows.append(("output SHA-256", fixity(out["sha256"])))
    if job.get("sidecar"):
        rows.append(("sidecar record", fixity(job["sidecar"])))
    return rows


def levels_rows(sidecar: dict | None, job: dict) -> list[tuple[str, str]]:
    """The output's sample peak, true peak, samples beyond full scale and dither, to 2 decimals."""
    side = sidecar or job
    peak, tp = side.get("peak_dbfs"), side.get("true_peak_dbtp")
    rows = [("sample peak", "digital silence" if peak is None else number(peak, 2, " dBFS")),
            ("true peak (ITU-R BS.1770-4, 4× oversampled)", "digital silence" if tp is None else number(tp, 2, " dBTP")),
            ("samples beyond full scale", plain(side.get("clipped_samples")))]
    d = side.get("dither") or {}
    if d.get("kind") == "tpdf":
        rows.append(("dither", f"TPDF ±{plain(d.get('peak_lsb'))} LSB at {plain(d.get('bits'))} bits, seed "
                               f"{plain(d.get('seed'))}"))
    elif d:
        rows.append(("dither", "none" + (f", rounded to {plain(d.get('bits'))} bits" if d.get("bits") else
                                         " (floating-point output)")))
    return rows


# ---------------------------------------------------------------------------
# An ABX session log attached to the report
# ---------------------------------------------------------------------------


def abx_summary(path) -> dict:
    """The summary of an ABX session log written by ``audition listen --blind`` (its JSON, module listen.abx).

    The score and p-value are counted again from the answers, not taken from the
    log's own result, and the log's SHA-256 is kept so the attached file can be
    checked later.

    Raises
    ------
    BadInputFile
        The file cannot be read or is not an ABX session log.
    """
    import hashlib

    from audition.listen.abx import ALPHA, binomial_p_value

    path = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
        log = json.loads(raw.decode("utf-8"))
    except OSError as exc:
        raise BadInputFile(f"{path}: cannot read the ABX log ({exc.strerror or exc})") from None
    except (UnicodeDecodeError, ValueError):
        raise BadInputFile(f"{path}: not an ABX log (not JSON text)") from None
    if not isinstance(log, dict) or log.get("kind") != "abx" or not isinstance(log.get("answers"), list):
        raise BadInputFile(f"{path}: not an ABX log (no \"kind\": \"abx\" with a list of answers)")
    try:
        answers = [bool(a["correct"]) for a in log["answers"]]
        planned = int(log.get("trials_planned") or len(answers))
    except (KeyError, TypeError, ValueError):
        raise BadInputFile(f"{path}: an answer of the ABX log has no \"correct\" field") from None
    n, k = len(answers), sum(answers)
    p = binomial_p_value(k, n)
    underruns = log.get("underruns")
    if underruns is None:
        underruns = sum(int(a.get("underruns") or 0) for a in log["answers"] if isinstance(a, dict))
    settings = log.get("settings") if isinstance(log.get("settings"), dict) else {}
    return {"file": os.path.abspath(path), "sha256": hashlib.sha256(raw).hexdigest(),
            "started_utc": log.get("started_utc"), "finished_utc": log.get("finished_utc"),
            "trials_planned": planned, "trials": n, "correct": k, "p_value": p, "alpha": ALPHA,
            "heard": bool(n) and p < ALPHA, "completed": log.get("completed", n >= planned),
            "underruns": int(underruns), "compared": [v.get("label") or v.get("name") for v in
                                                       settings.get("versions") or [] if isinstance(v, dict)]}


def abx_section(s: dict) -> str:
    """The ABX summary as a field table and one sentence."""
    if not s["trials"]:
        verdict = "no trial was answered"
    elif s["heard"]:
        verdict = "a difference was heard (fewer than 1 in 20 guessers would do as well)"
    else:
        verdict = "no evidence of an audible difference: guessing does as well this often"
    rows = [("log file", fixity(s["file"])), ("log SHA-256", fixity(s["sha256"])),
            ("trials answered", f"{s['trials']:,} of {s['trials_planned']:,}"
                                + ("" if s.get("completed", True) else " (session ended early)")),
            ("right answers", f"{s['correct']:,}"),
            ("one-sided binomial p", number(s["p_value"], 4)),
            ("result", html.escape(verdict)),
            ("output underruns during the session", f"{s['underruns']:,}")]
    if s.get("compared"):
        rows.append(("versions compared", html.escape(", ".join(str(c) for c in s["compared"] if c)) or MISSING))
    if s.get("started_utc"):
        rows.append(("started (UTC)", html.escape(str(s["started_utc"]).replace("T", " ").rstrip("Z"))))
    return fields(rows) + ("<p class='note'>p is the chance of scoring at least this well by guessing "
                           "(each answer right with probability 1/2), counted again here from the log's answers; "
                           "below 0.05 is the usual line (common practice).</p>")


# ---------------------------------------------------------------------------
# Provenance: the rest of the sidecar, as words
# ---------------------------------------------------------------------------

#: Sidecar keys shown in their own sections rather than in the provenance table.
_SHOWN_ELSEWHERE = ("design", "plan", "measured", "predicted", "survey", "transfer", "abx", "processed_utc",
                    "audition_version", "peak_dbfs", "peak_kind", "true_peak_dbtp", "true_peak_kind",
                    "clipped_samples", "dither", "trim_db")


def _flatten(prefix: str, v, out: list) -> None:
    if isinstance(v, dict) and v and all(not isinstance(x, (dict, list)) or _short(x) for x in v.values()) \
            and len(v) <= 3:
        out.append((prefix, plain(v)))
    elif isinstance(v, dict) and v:
        for k, x in v.items():
            _flatten(f"{prefix}, {_words(k)}" if prefix else _words(k), x, out)
    elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
        for i, x in enumerate(v, 1):
            out.append((f"{prefix} {i}", plain(x)))
    elif prefix.endswith("weighting") and v in WEIGHTING_LABELS:
        out.append((prefix, html.escape(WEIGHTING_LABELS[v])))
    else:
        out.append((prefix, "not set" if v is None else plain(v)))


def _short(v) -> bool:
    return isinstance(v, list) and all(not isinstance(x, (dict, list)) for x in v)


def provenance(sidecar: dict) -> str:
    """Everything else the sidecar records, as (field, value) rows of words; hashes and paths may wrap."""
    rows = []
    for k, v in sidecar.items():
        if k in _SHOWN_ELSEWHERE:
            continue
        if k in ("input", "output") and isinstance(v, dict):
            v = {k2: x for k2, x in v.items() if k2 not in ("path", "sha256", "size_bytes")}  # shown at the top
        flat: list = []
        _flatten(_words(k), v, flat)
        for name, value in flat:
            if name.endswith("sha256") or name.endswith(", path") or name == "input, path":
                value = fixity(html.unescape(value))
            rows.append([name, value])
    return table(None, rows)


def _filter_rows(design) -> str:
    if design is None:
        return "<p><b>No filter was applied and no output was written.</b></p>"
    fig = design.figures()
    rows = [("cutoff f0", number(design.f0_hz, 0, " Hz")),
            ("order", f"{design.order}"),
            ("alignment" if design.alignment else "Q",
             html.escape(design.alignment.replace("-", " ")) + (f" ({number(design.ripple_db, 2)} dB ripple)"
                                                                if getattr(design, "ripple_db", None) else "")
             if design.alignment else number(design.q, 3)),
            ("digitising method", html.escape(design.method)),
            ("rumble high-pass", number(design.highpass_hz, 0, " Hz") if design.highpass_hz else "none"),
            ("half-power (−3.01 dB) point", number(fig.minus3db_hz, 0, " Hz")),
            ("resonant peak", f"{number(fig.peak_gain_db, 2, ' dB', signed=True)} at {number(fig.peak_hz, 0, ' Hz')}"
             if fig.peak_gain_db > 0.05 else "none (no lift above the passband)"),
            ("step overshoot", f"{number(fig.prototype_overshoot_pct, 1, ' %')} (the analog prototype's ringing); "
                               f"{number(fig.overshoot_pct, 1, ' %')} sample by sample at this rate")]
    for i, s in enumerate(design.sections):
        rows.append((f"section {i + 1}: {s.kind}",
                     number(s.f0_hz, 0, " Hz") + ("" if s.q is None else f", Q {number(s.q, 3)}")))
    return fields(rows)


def render_page(job: dict, sidecar: dict, survey, plan, design, abx: dict | None = None) -> str:
    """The HTML page of one render job (see :func:`audition.pipeline.render_job`).

    Parameters
    ----------
    job : dict
        What the job returned (render summary, predicted, measured, plan, warnings).
    sidecar : dict
        The sidecar as written, for the provenance (None when nothing was rendered).
    survey : audition.survey.onepass.Survey or None
    plan : audition.plan.Plan or None
    design : audition.design.Design
        The filter that was rendered.
    abx : dict, optional
        An ABX session summary (:func:`abx_summary`); else the sidecar's or the job's "abx" if any.
    """
    from audition.plots.plan import report_figures

    pictures = dict(report_figures(survey, plan, design, title=os.path.basename(job["input"]),
                                   treble_from_hz=(job.get("predicted") or {}).get("treble_from_hz")))
    lead = ""
    warnings = job.get("warnings") or []
    lead += "".join(f"<p class='warn'>{html.escape(w)}</p>" for w in warnings)
    sections = []
    if design is None:
        intro = (f"<p><b>no filter</b>: {html.escape(job.get('no_filter_reason') or '')}. Nothing was rendered; "
                 "the input was only read.</p>")
    else:
        intro = (f"<p>The input was filtered into a new file ({html.escape(job['format'])} "
                 f"{html.escape(job['subtype'])}, {number(job['rate'], 0)} Hz, {job['channels']} channel(s), "
                 f"{number(job['duration_seconds'], 2)} s). The input was only read; keep the unprocessed transfer "
                 "and this page with it.</p>")
    intro += fields(record_rows(sidecar, job))
    sections.append(("What was done, by whom, to which file", intro))
    if survey is not None:
        sv = job.get("survey") or survey.to_dict()
        spans = ", ".join(f"{a:.2f}–{b:.2f} s" for a, b in survey.spans[:12]) or "none (separate clip)"
        if len(survey.spans) > 12:
            spans += f" and {len(survey.spans) - 12} more"
        src = {"auto": "found automatically from the quietest frames", "spans": "the spans given",
               "clip": "a separate noise clip"}[survey.noise_source]
        conf = survey.confidence
        rows = [("noise reference", html.escape(src)), ("noise spans", html.escape(spans)),
                ("confidence", f"{html.escape(conf.grade)} (separation {number(conf.separation_db, 2, ' dB')}, "
                               f"{number(conf.noise_seconds, 2)} s of noise)"),
                ("hiss level, unweighted", number(survey.noise_rms_dbfs, 2, " dBFS")),
                ("programme level (estimate), unweighted", number(survey.programme_rms_dbfs, 2, " dBFS")),
                ("crossover (programme meets the hiss)", number(sv["crossover_hz"], 0, " Hz")
                 if sv.get("crossover_hz") else "none: the programme stays above the hiss")]
        body = fields(rows)
        if "spectra" in pictures:
            body += image(pictures["spectra"], "programme and hiss spectra with the crossover and the filter")
        body += ("<p class='note'>Levels are dBFS as 20·log10(rms): a full-scale sine reads −3.01 dBFS. "
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
            rows.append([label, html.escape(cand.label), number(cand.treble_loss_db), _band(cand.treble_loss_hz),
                         number(cand.reduction_pct, 0, " %"), number(cand.snr_gain_db.get(w))])
        body += table(["", "design", "treble loss (dB)", "in band", "hiss heard taken away",
                       f"SNR gain (dB), {WEIGHTING_LABELS.get(w, w)}"], rows, numeric=(2, 3, 4, 5))
        body += (f"<p class='note'>{plan.searched:,} candidates searched; the treble-loss budget was "
                 f"{plain(float(plan.budget_db))} dB, listening at {plain(float(plan.listening_level_db))} dB SPL "
                 "for a full-scale sine. Treble loss is the largest cut the filter makes in a one-third-octave band "
                 "where the programme is heard (above the hiss and the threshold of hearing); a resonant lift does "
                 "not pay for it. The hiss heard is the ISO 532-1 loudness the hiss adds to the programme, averaged "
                 "over every frame.</p>")
        sections.append(("Trade-off", body))
    if job.get("predicted") or job.get("measured"):
        body = figures_table(job.get("predicted"), job.get("measured"))
        body += ("<p class='note'>Predicted from the input's surveyed spectra; measured on the same noise reference "
                 "and programme segments of the input and the rendered output (programme = outside the noise "
                 "reference, noise subtracted). The measured output includes its dither.</p>")
        sections.append(("Predicted and measured", body))
    if sidecar is not None:
        sections.append(("Levels of the output", fields(levels_rows(sidecar, job)) +
                         "<p class='note'>Full scale = 0 dBFS (sample peak) and 0 dBTP (true peak).</p>"))
    abx = abx or (sidecar or {}).get("abx") or job.get("abx")
    if abx:
        sections.append(("Listening test (ABX)", abx_section(abx)))
    if sidecar is not None:
        sections.append(("Provenance (from the sidecar " + os.path.basename(job.get("sidecar") or "") + ")",
                         provenance(sidecar)))
    return build(f"audition: hiss filter report for {os.path.basename(job['input'])}", sections, lead)


def write(path, text: str) -> None:
    """Write the page (or any text) atomically: a temporary file in the target folder, then a rename."""
    from audition.io import sidecar

    sidecar.write_text(path, text, "report")
