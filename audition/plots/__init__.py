"""Pictures of designs, spectra and results: the only place that imports matplotlib.

matplotlib is imported lazily with the Agg backend, so no window system is needed
and commands that draw nothing pay nothing for it.
"""

from __future__ import annotations

import os
import tempfile

from audition.errors import OutputRefused


def pyplot():
    """matplotlib.pyplot on the Agg backend."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def save_figure(fig, path: str | os.PathLike, dpi: int = 120) -> None:
    """Write ``fig`` as PNG atomically: a temporary file in the target folder, then rename."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise OutputRefused(f"{path}: folder {folder!r} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=".audition-", suffix=".png.tmp", dir=folder)
    # mkstemp makes 0600; give the picture the permissions a plain new file would get
    umask = os.umask(0)
    os.umask(umask)
    os.fchmod(fd, 0o666 & ~umask)
    try:
        with os.fdopen(fd, "wb") as fh:
            fig.savefig(fh, format="png", dpi=dpi)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
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
