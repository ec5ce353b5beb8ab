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
