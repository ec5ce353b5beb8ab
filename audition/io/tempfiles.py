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


#: A temporary file that no process holds locked is stale once it is this old (a living writer locks its
#: file within microseconds of making it) ...
LOCKED_AFTER_SECONDS = 0.1
#: ... and, on a file system without locks, once nothing has written to it for this long.
STALE_AFTER_SECONDS = 2.0


def remove_leftover_parts(*targets) -> list[str]:
    """Remove the temporary files that killed writers of ``targets`` left beside them; their names.

    The files of this module's pattern (``.NAME.XXXXXXXX.part``) that no living process
    holds locked: every :class:`_TempFile` holds a lock on its file while it is open (the
    lock goes with its process, however it dies). One younger than
    :data:`LOCKED_AFTER_SECONDS` may have just been made and not yet locked; on a file
    system without locks, one written to in the last :data:`STALE_AFTER_SECONDS` is a
    living writer's. So a writer running now to the same output keeps its own.
    """
    import fcntl
    import re
    import time

    removed = []
    for target in targets:
        if not target:
            continue
        folder, name = os.path.split(os.path.abspath(os.fspath(target)))
        pattern = re.compile(r"^\." + re.escape(name) + r"\.[A-Za-z0-9_]{8}" + re.escape(_PART_SUFFIX) + "$")
        try:
            entries = [e for e in os.listdir(folder) if pattern.match(e)]
        except OSError:
            continue
        for entry in entries:
            path = os.path.join(folder, entry)
            try:
                age = time.time() - os.lstat(path).st_mtime
                fd = os.open(path, os.O_RDONLY | os.O_NOFOLLOW)
            except OSError:
                continue
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                stale = age >= LOCKED_AFTER_SECONDS
            except BlockingIOError:
                stale = False  # held: a living writer's
            except OSError:
                stale = age >= STALE_AFTER_SECONDS  # no locks here: only the age tells
            finally:
                os.close(fd)
            if not stale:
                continue
            try:
                os.unlink(path)
                removed.append(entry)
            except FileNotFoundError:
                pass
    return removed


class _TempFile:
    """A temporary file beside ``target``: fsync, atomic rename into place, or removal."""

    def __init__(self, target, replace: bool | None = None):
        from audition.io.guard import Target, check_output

        if isinstance(target, Target):
            # the rules again, at the moment of writing: an input, a folder, a file that appeared meanwhile
            target.check()
            if replace is None:
                replace = target.overwrite
        target = os.fspath(target)
        existed = os.path.lexists(target)
        if existed:
            # never replace a folder, device node or FIFO, whatever the caller allowed
            check_output(target, overwrite=True)
        #: the final rename may replace a file: only one that was there when this file was made
        #: (and that the caller was allowed to replace); a new output never replaces a file that
        #: appeared meanwhile (another writer's)
        self.replace = existed if replace is None else (replace and existed)
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
            _hold(self.fd)
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
            if self.replace:
                os.replace(self.name, self.target)
            else:
                rename_no_replace(self.name, self.target)
        except FileExistsError:
            self.remove()
            raise OutputRefused(f"{self.target!r}: appeared while it was being written (another run?); "
                                "it was left as it is and nothing was written") from None
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


def _hold(fd: int) -> None:
    """Lock the temporary file while this process works on it (see :func:`remove_leftover_parts`)."""
    import fcntl

    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        pass  # a file system without locks: the age rule alone then tells a living writer's file


_AT_FDCWD = -100
_RENAME_NOREPLACE = 1  # linux/fs.h
_renameat2 = None


def _libc_renameat2():
    """glibc's renameat2 (2.28 and later), or None where there is none."""
    global _renameat2
    if _renameat2 is None:
        _renameat2 = False
        try:
            import ctypes

            fn = ctypes.CDLL(None, use_errno=True).renameat2
            fn.argtypes = (ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint)
            fn.restype = ctypes.c_int
            _renameat2 = fn
        except (OSError, AttributeError):
            pass
    return _renameat2 or None


def rename_no_replace(src: str, dst: str) -> None:
    """Rename ``src`` to ``dst`` atomically, failing with FileExistsError if ``dst`` exists.

    ``renameat2(..., RENAME_NOREPLACE)`` where the kernel and file system have it
    (Linux 3.15+, glibc 2.28+; renameat2(2)); else a hard link then the removal of
    ``src`` (``link(2)`` fails with EEXIST on an existing name, POSIX); on a file
    system with neither (some FUSE and FAT mounts) a check then ``os.replace``,
    which leaves a window of a few microseconds in which a file made by another
    process could be replaced.
    """
    import ctypes
    import errno

    fn = _libc_renameat2()
    if fn is not None:
        if fn(_AT_FDCWD, os.fsencode(src), _AT_FDCWD, os.fsencode(dst), _RENAME_NOREPLACE) == 0:
            return
        err = ctypes.get_errno()
        if err == errno.EEXIST:
            raise FileExistsError(err, os.strerror(err), dst)
        if err not in (errno.EINVAL, errno.ENOSYS, errno.ENOTSUP, errno.EOPNOTSUPP):
            raise OSError(err, os.strerror(err), dst)
    try:
        os.link(src, dst)
    except FileExistsError:
        raise
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.ENOSYS, errno.EMLINK, errno.EXDEV):
            raise
        if os.path.lexists(dst):
            raise FileExistsError(errno.EEXIST, os.strerror(errno.EEXIST), dst) from None
        os.replace(src, dst)
        return
    os.unlink(src)


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
