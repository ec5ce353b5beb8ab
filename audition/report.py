"""One self-contained HTML page that a technician files with the transfer.

Pictures are embedded as base64 PNG (no network, no external files), figures are
plain tables, and the provenance comes straight from the render's sidecar.
"""

from __future__ import annotations

import base64
import html
import json
import os
import tempfile

from audition.errors import OutputRefused

STYLE = """
body { font-family: system-ui, sans-serif; max-width: 60rem; margin: 2rem auto; color: #222; line-height: 1.45; }
h1 { font-size: 1.5rem; } h2 { font-size: 1.15rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5rem 0; } td, th { padding: 0.2rem 0.8rem; border-bottom: 1px solid #eee;
text-align: right; } th { background: #f4f4f4; } td:first-child, th:first-child { text-align: left; }
img { max-width: 100%; border: 1px solid #ddd; } .note { color: #555; font-size: 0.9rem; }
.warn { background: #fff4e0; border-left: 4px solid #e0a030; padding: 0.4rem 0.8rem; }
code { font-size: 0.85rem; word-break: break-all; }
"""


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
    """Predicted against measured: SNR gain / noise reduction per weighting, and treble loss."""
    rows = []
    pg = (predicted or {}).get("snr_gain_db", {})
    mg = (measured or {}).get("noise_reduction_db", {})
    for name in ("flat", "a", "itu468"):
        rows.append([f"{name}-weighted SNR gain / noise reduction (dB)", _fmt(pg.get(name)), _fmt(mg.get(name))])
    rows.append(["treble loss (dB)", _fmt((predicted or {}).get("treble_loss_db")),
                 _fmt((measured or {}).get("treble_loss_db"))])
    return table(["figure", "predicted", "measured"], rows)


def provenance(sidecar: dict) -> str:
    rows = [[html.escape(k), f"<code>{html.escape(json.dumps(v) if isinstance(v, (dict, list)) else str(v))}</code>"]
            for k, v in sidecar.items() if k not in ("design", "plan", "measured", "predicted")]
    return table(["field", "value"], rows)


def write(path, text: str) -> None:
    """Write the page atomically (temporary file in the target folder, then rename)."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise OutputRefused(f"{path}: folder {folder!r} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=".audition-", suffix=".html.tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
