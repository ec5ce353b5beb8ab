"""The one set of rules every file audition writes obeys, whatever the file is.

A sound output, its sidecar, a report, a plan file, a C header and a picture all
pass :func:`check_output` before anything is written, and again when their
temporary file is made (:class:`~audition.io.tempfiles._TempFile`):

- never one of the command's inputs (the recording, the noise clip, a plan file),
  whether named directly, through a symbolic link, a hard link or another spelling;
- never a path that exists and is not a regular file (a folder, a device node, a FIFO);
- never an existing file unless the command was given ``--overwrite``;
- only in a folder that exists and can be written.

A command names a side output once, as a :class:`Target` (the path, the option
that named it, the inputs and whether it may replace a file); the plotting,
text and sidecar writers take a Target wherever they take a path and apply
the same rules at the moment they write. The final rename of a file that did
not exist never replaces one that appeared meanwhile (see
:func:`audition.io.tempfiles.rename_no_replace`).

This module imports nothing heavy (no numpy, no soundfile), so every command can use it.
"""

from __future__ import annotations

import os
import stat

from audition.errors import OutputRefused


def same_file(a, b) -> bool:
    """True when ``a`` and ``b`` name one file (symbolic links, other spellings and hard links included)."""
    a, b = os.fspath(a), os.fspath(b)
    try:
        if os.path.samefile(a, b):  # same device and inode: hard links and symbolic links alike
            return True
    except OSError:
        pass
    return os.path.realpath(a) == os.path.realpath(b)


def _label(path: str, what: str | None) -> str:
    return f"{what} {path!r}" if what else repr(path)


def check_output(path, *, inputs=(), overwrite: bool = False, what: str | None = None) -> str:
    """Refuse an output that breaks the rules of this module; return its path as a string.

    Parameters
    ----------
    path : str or os.PathLike
    inputs : iterable of paths
        Files the command reads (None entries are skipped).
    overwrite : bool
        An existing regular file may be replaced.
    what : str, optional
        How the user named the output (``"--plot"``, ``"--save"``...), for the message.

    Raises
    ------
    OutputRefused
        One line naming the path and the reason.
    """
    p = os.fspath(path)
    label = _label(p, what)
    if not p:
        raise OutputRefused(f"{what or 'output'}: an empty name; name an output file")
    for src in inputs:
        if src is None:
            continue
        if same_file(p, src):
            raise OutputRefused(f"{label}: is the input {os.fspath(src)!r}; the original is never written to, "
                                "name another output")
    try:
        st = os.stat(p)
    except FileNotFoundError:
        st = None
    except OSError as exc:  # e.g. a component that is not a folder, or no permission to look
        raise OutputRefused(f"{label}: cannot be checked ({os.strerror(exc.errno) if exc.errno else exc})") from None
    if st is not None and stat.S_ISDIR(st.st_mode):
        raise OutputRefused(f"{label}: is a folder; name an output file")
    if st is not None and not stat.S_ISREG(st.st_mode):
        raise OutputRefused(f"{label}: exists and is not a regular file (a device, FIFO or socket); "
                            "name a plain file")
    if os.path.lexists(p) and not overwrite:
        raise OutputRefused(f"{label}: exists; give --overwrite to replace it")
    folder = os.path.dirname(os.path.abspath(p))
    if not os.path.isdir(folder):
        raise OutputRefused(f"{label}: the folder {folder!r} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputRefused(f"{label}: the folder {folder!r} is not writable")
    return p


def check_distinct(targets) -> None:
    """Refuse two outputs of one command that name the same file (``targets``: Targets or paths)."""
    seen: list[tuple[str, str]] = []
    for t in targets:
        if t is None:
            continue
        p = os.fspath(t)
        for q, label in seen:
            if same_file(p, q) or os.path.abspath(p) == os.path.abspath(q):
                raise OutputRefused(f"{_label(p, getattr(t, 'what', None))}: is also the {label}; "
                                    "name each output differently")
        seen.append((p, getattr(t, "what", None) or "output"))


class Target(os.PathLike):
    """An output a command will write: its path, who named it, the inputs it must not be, and ``overwrite``.

    Checked when made (so a command refuses before its long work) and again by the
    writer when it writes. Usable wherever a path is (``os.fspath(target)``).
    """

    def __init__(self, path, *, inputs=(), overwrite: bool = False, what: str | None = None, check: bool = True):
        self.path = os.fspath(path)
        self.inputs = tuple(os.fspath(i) for i in inputs if i is not None)
        self.overwrite = bool(overwrite)
        self.what = what
        if check:
            self.check()

    def check(self) -> str:
        return check_output(self.path, inputs=self.inputs, overwrite=self.overwrite, what=self.what)

    def __fspath__(self) -> str:
        return self.path

    def __str__(self) -> str:
        return self.path

    def __repr__(self) -> str:
        return f"Target({self.path!r}, what={self.what!r}, overwrite={self.overwrite})"


def target(path, *, inputs=(), overwrite: bool = False, what: str | None = None) -> Target | None:
    """A checked :class:`Target` for ``path``; None when ``path`` is None (the option was not given)."""
    if path is None:
        return None
    return Target(path, inputs=inputs, overwrite=overwrite, what=what)
