"""Pictures of designs, spectra and results: the only place that imports matplotlib.

matplotlib is imported lazily with the Agg backend, so no window system is needed
and commands that draw nothing pay nothing for it.
"""

from __future__ import annotations

import os

from audition.errors import OutputRefused


def pyplot():
    """matplotlib.pyplot on the Agg backend."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def save_figure(fig, path, dpi: int = 120) -> None:
    """Write ``fig`` as PNG atomically: a temporary file in the target folder, then rename.

    ``path`` may be an :class:`audition.io.guard.Target` (the command's inputs and
    ``--overwrite``); a plain path may replace a regular file but never a folder,
    device or FIFO. Failures (a read-only folder, a full disk) raise OutputRefused.
    """
    from audition.io.messages import _os_message
    from audition.io.tempfiles import _TempFile

    name = os.fspath(path)
    try:
        tmp = _TempFile(path)
        try:
            with os.fdopen(os.dup(tmp.fd), "wb") as fh:
                fig.savefig(fh, format="png", dpi=dpi)
        except BaseException as exc:
            tmp.remove()
            if isinstance(exc, OSError):
                raise OutputRefused(f"{name!r}: writing the picture failed ({_os_message(exc)})") from None
            raise
        tmp.commit()
    finally:
        pyplot().close(fig)


def figure_png(fig, dpi: int = 110) -> bytes:
    """The figure as PNG bytes (for pages that embed their pictures), then closed."""
    import io

    buf = io.BytesIO()
    try:
        fig.savefig(buf, format="png", dpi=dpi)
    finally:
        pyplot().close(fig)
    return buf.getvalue()


#: Frequency ticks a technician reads on a log axis, Hz.
AUDIO_TICKS_HZ = (20, 50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000)


def audio_ticks(ax, lo_hz: float = 20.0, hi_hz: float = 24000.0) -> None:
    """Label a log-frequency x axis 20, 50, 100 … 1k … 10k, 20k instead of powers of ten."""
    from matplotlib.ticker import FixedLocator, NullFormatter

    ticks = [t for t in AUDIO_TICKS_HZ if lo_hz <= t <= hi_hz]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.set_xticklabels([f"{t // 1000}k" if t >= 1000 else str(t) for t in ticks])
    ax.xaxis.set_minor_formatter(NullFormatter())


def mark_line(ax, x: float, text: str, colour) -> None:
    """Remember a label for the vertical line at ``x`` (data units); :func:`place_line_labels` draws them all."""
    if not hasattr(ax, "_audition_line_labels"):
        ax._audition_line_labels = []
    ax._audition_line_labels.append((float(x), text, colour))


def place_line_labels(ax, top: float = 0.975, row: float = 0.07, fontsize: float = 9, pad_px: float = 5.0) -> None:
    """Draw the labels of :func:`mark_line` at the top of ``ax``, one row each, none across another line.

    Call it once the figure's layout is final (after ``tight_layout``): the room
    beside each line is measured in pixels. A label goes right of its line, else
    left of it, else beyond the outermost line on the side with room; a label
    that fits nowhere goes right of its line all the same.
    """
    marks = sorted(getattr(ax, "_audition_line_labels", []), key=lambda m: m[0])
    if not marks:
        return
    renderer = ax.figure.canvas.get_renderer()
    box = ax.get_window_extent(renderer)
    to_px = ax.transData.transform
    to_data = ax.transData.inverted().transform
    xs = [to_px((x, 1.0))[0] for x, _, _ in marks]
    bbox = dict(boxstyle="round,pad=0.2", fc="white", ec="none", alpha=0.9)
    for k, (x, text, colour) in enumerate(marks):
        t = ax.text(0, 0, text, fontsize=fontsize, transform=ax.transAxes, bbox=bbox)
        w = t.get_window_extent(renderer).width
        t.remove()
        me, others = xs[k], xs[:k] + xs[k + 1:]

        def free(lo, hi):
            return lo >= box.x0 + 2 and hi <= box.x1 - 2 and not any(lo - 3 <= o <= hi + 3 for o in others)

        tries = [(me + pad_px, "left"), (me - pad_px, "right"), (max(xs) + pad_px, "left"), (min(xs) - pad_px, "right")]
        at, ha = tries[0]
        for px, side in tries:
            lo, hi = (px, px + w) if side == "left" else (px - w, px)
            if free(lo, hi):
                at, ha = px, side
                break
        ax.text(to_data((at, 0.0))[0], top - row * k, text, transform=ax.get_xaxis_transform(), ha=ha, va="top",
                color=colour, fontsize=fontsize, bbox=bbox)
