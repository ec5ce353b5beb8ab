"""The temporary file beside its target that every atomic write goes through.

:class:`_TempFile` is created in the target's folder (so the final rename stays on
one file system and is atomic), with the permissions a plain new file would get;
it is synced and renamed into place (the folder synced too), or removed.
:func:`remove_leftover_parts` clears those a killed run left behind.
"""

from __future__ import annotations

import os
import tempfile

from audition.errors import OutputRefused
from audition.io.messages import _os_message

#: Temporary files are ``.NAME.XXXXXXXX.part`` beside their target NAME (XXXXXXXX: mkstemp's random characters).
_PART_SUFFIX = ".part"


def remove_leftover_parts(target) -> list[str]:
    """Remove the temporary files a killed writer of ``target`` left beside it; returns their names."""
    import re

    folder, name = os.path.split(os.path.abspath(os.fspath(target)))
    pattern = re.compile(r"^\." + re.escape(name) + r"\.[A-Za-z0-9_]{8}" + re.escape(_PART_SUFFIX) + "$")
    removed = []
    try:
        entries = os.listdir(folder)
    except OSError:
        return removed
    for entry in entries:
        if pattern.match(entry):
            try:
                os.unlink(os.path.join(folder, entry))
                removed.append(entry)
            except FileNotFoundError:
                pass
    return removed


class _TempFile:
    """A temporary file beside ``target``: fsync, atomic rename into place, or removal."""

    def __init__(self, target: str):
        self.target = target
        folder = os.path.dirname(os.path.abspath(target))
        try:
            self.fd, self.name = tempfile.mkstemp(dir=folder, prefix="." + os.path.basename(target) + ".",
                                                  suffix=_PART_SUFFIX)
        except OSError as exc:
            raise OutputRefused(f"{target!r}: cannot create a file in {folder!r} ({_os_message(exc)})") from None
        self.open = True
        try:
            # mkstemp makes 0600; give the output the permissions a plain new file would get
            umask = os.umask(0)
            os.umask(umask)
            os.fchmod(self.fd, 0o666 & ~umask)
        except BaseException:  # Ctrl-C included: no temporary file outlives its maker
            self.remove()
            raise

    def sync(self):
        os.fsync(self.fd)

    def commit(self):
        os.fsync(self.fd)
        os.close(self.fd)
        self.open = False
        try:
            os.replace(self.name, self.target)
        except OSError as exc:
            self.remove()
            raise OutputRefused(f"{self.target!r}: could not be put in place ({_os_message(exc)})") from None
        _fsync_folder(os.path.dirname(os.path.abspath(self.target)))

    def remove(self):
        if self.open:
            os.close(self.fd)
            self.open = False
        try:
            os.unlink(self.name)
        except FileNotFoundError:
            pass


def _fsync_folder(folder: str) -> None:
    # the rename itself must reach the disk too (common practice on POSIX, no source)
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
