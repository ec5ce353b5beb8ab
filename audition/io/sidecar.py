"""Small text files written atomically: the JSON sidecar beside an output, reports, headers.

Each goes through a temporary file beside its target (:mod:`audition.io.tempfiles`),
synced and renamed into place, in two phases when it must be committed together
with a sound file (:class:`PreparedText`, :class:`SidecarWriter`).
"""

from __future__ import annotations

import datetime as _dt
import json
import os

from audition.errors import OutputRefused
from audition.io.messages import _os_message
from audition.io.tempfiles import _TempFile


def sidecar_path(path) -> str:
    """The sidecar beside an output: ``OUT.json`` (e.g. ``take1.wav.json``)."""
    return os.fspath(path) + ".json"


def utc_now_iso() -> str:
    """The time now, ISO 8601, UTC, to the second (e.g. ``2024-05-01T12:00:00Z``)."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


class PreparedText:
    """A text file (UTF-8) prepared in a temporary file beside ``path``, renamed into place by :meth:`commit`.

    ``what`` names the file in an error ("sidecar", "report", ...). ``path`` may be an
    :class:`audition.io.guard.Target`, whose rules (never an input, never an existing file
    without ``--overwrite``) are checked again as the file is made.
    """

    def __init__(self, path, text: str, what: str = "file"):
        # ``path`` may be a guard.Target: the temporary file then applies its rules (inputs, --overwrite)
        self.path = os.fspath(path)
        self._tmp = _TempFile(path)
        try:
            view = memoryview(text.encode("utf-8"))
            while view:
                view = view[os.write(self._tmp.fd, view):]
            self._tmp.sync()
        except BaseException as exc:
            self._tmp.remove()
            if isinstance(exc, OSError):
                raise OutputRefused(f"{self.path!r}: writing the {what} failed ({_os_message(exc)})") from None
            raise

    def commit(self):
        self._tmp.commit()

    def abort(self):
        self._tmp.remove()


class SidecarWriter(PreparedText):
    """A JSON record prepared in a temporary file, renamed into place by :meth:`commit`."""

    def __init__(self, path, record: dict):
        super().__init__(path, json.dumps(record, indent=2, allow_nan=False) + "\n", "sidecar")


def write_text(path, text: str, what: str = "file") -> str:
    """Write ``text`` to ``path`` atomically (temporary file beside it, fsync, rename); returns the path."""
    w = PreparedText(path, text, what)
    w.commit()
    return w.path


def write_sidecar(path, record: dict) -> str:
    """Write ``record`` as JSON to ``path`` atomically; returns the path."""
    w = SidecarWriter(path, record)
    w.commit()
    return w.path
