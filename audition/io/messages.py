"""One-line wording of operating-system and libsndfile failures, for the errors the package raises."""

from __future__ import annotations

import errno
import os


def _sf_message(exc) -> str:
    msg = (getattr(exc, "error_string", None) or str(exc)).strip().rstrip(".")
    if not msg or msg == "System error" or getattr(exc, "code", None) == 2:
        # libsndfile reports a failed write(2) as code 2 (SFE_SYSTEM) with no text
        return "a system error: disk full or an I/O error" + (f" ({msg})" if msg and msg != "System error" else "")
    return msg


def _os_message(exc) -> str:
    if isinstance(exc, OSError) and exc.errno is not None:
        return os.strerror(exc.errno) if exc.errno != errno.ENOSPC else "no space left on the disk"
    return _sf_message(exc)


def size_text(n_bytes: float) -> str:
    """A size in binary units with enough figures to mean something: ``"200 KiB"``, ``"1.5 MiB"``, ``"12 bytes"``."""
    n = float(n_bytes)
    for unit, scale in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if n >= scale:
            v = n / scale
            return f"{v:,.1f} {unit}" if v < 100 else f"{v:,.0f} {unit}"
    return f"{n:,.0f} bytes"
