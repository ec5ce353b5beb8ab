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
