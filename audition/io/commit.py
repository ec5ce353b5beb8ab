"""Committing a job's files: whole files only, all of them or none.

:func:`commit_together` puts several prepared files (an :class:`~audition.io.writer.AtomicWriter`,
a :class:`~audition.io.sidecar.PreparedText`) in place as one unit, signals held off until
the last rename (:mod:`audition.interrupt`); :func:`finished_path` is where a finished,
uncommitted writer's bytes are, for a measurement made before the commit.
"""

from __future__ import annotations

import os


def finished_path(writer) -> str:
    """Where a finished, uncommitted writer's bytes are (its temporary file beside the target)."""
    return writer._tmp.name


def commit_together(items) -> None:
    """Put finished files in place as one unit: all of them, or none (the files they replace untouched).

    ``items``: prepared writers (:class:`AtomicWriter`, :class:`~audition.io.sidecar.PreparedText`),
    committed in order. Signals wait until the end (:class:`audition.interrupt.shielded`),
    and one recorded before the first rename stops the commit. A rename that fails
    takes back those before it: a new file is removed, a replaced one is put back
    from a hard link made aside just before (``.NAME.XXXXXXXX.part``, removed after).
    """
    import tempfile

    from audition import interrupt

    items = [it for it in items if it is not None]
    with interrupt.shielded(raise_at_end=False):
        try:
            interrupt.check()
        except KeyboardInterrupt:
            for it in items:
                it.abort()
            raise
        done, asides = [], []
        try:
            for it in items:
                tmp = it._tmp
                aside = None
                if tmp.replace and os.path.lexists(tmp.target):
                    folder, name = os.path.split(os.path.abspath(tmp.target))
                    aside = tempfile.mktemp(dir=folder, prefix="." + name + ".", suffix=".part")
                    try:
                        os.link(tmp.target, aside)
                        asides.append(aside)
                    except OSError:
                        aside = None  # no hard links here: the old file cannot be kept aside
                it.commit()
                done.append((tmp.target, aside))
        except BaseException:
            for it in items[len(done):]:
                it.abort()
            for target, aside in reversed(done):
                try:
                    if aside is not None:
                        os.replace(aside, target)
                    else:
                        os.unlink(target)
                except OSError:
                    pass
            raise
        finally:
            for aside in asides:
                try:
                    os.unlink(aside)
                except FileNotFoundError:
                    pass
