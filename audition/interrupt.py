"""Ctrl-C and SIGTERM: recorded the moment they come, acted on where it is safe, never lost.

Python raises ``KeyboardInterrupt`` wherever the main thread happens to be when
SIGINT arrives. Inside a callback that C code makes into Python (libsndfile's
virtual I/O reads the input through cffi; see :mod:`audition.io.reader`) or in a
finalizer, the exception cannot travel: it is printed as "ignored" and lost,
the read ends early as if the file ended there, and a short output would be
committed as done. SIGTERM, left to its default, kills the process with its
temporary files in place.

:func:`install` gives SIGINT and SIGTERM one handler that first records the
signal (:func:`received`), then raises ``KeyboardInterrupt`` unless the main
thread is inside a :class:`shielded` stretch: a call into C that calls back, or
the renames that commit several files as one. A shielded stretch raises when it
ends. :func:`check` raises at any safe point once a signal has been recorded;
every commit calls it, shielded, just before its first rename, so an
interrupted job never commits whatever an exception lost on the way.

Nothing here prints or exits; :mod:`audition.cli` turns the signal into exit
status 130 (SIGINT) or 143 (SIGTERM), 128 + the signal's number (common
practice of POSIX shells, no source).
"""

from __future__ import annotations

import signal
import threading

#: The signals taken as a request to stop cleanly.
SIGNALS = (signal.SIGINT, signal.SIGTERM)

_received: int | None = None  # the first signal recorded (its number)
_depth = 0  # how deep the main thread is in shielded stretches
_previous: dict | None = None  # the handlers install() replaced
_active = None  # optional callable: is a signal to be acted on now? (a batch worker's idle time is not)
_early = False  # install_early() ran and no install() has taken over yet


def received() -> int | None:
    """The number of the first SIGINT or SIGTERM recorded since :func:`install`, or None."""
    return _received


def exit_status() -> int | None:
    """128 + the recorded signal's number (130 for SIGINT, 143 for SIGTERM), or None."""
    return None if _received is None else 128 + int(_received)


def signal_name() -> str:
    return signal.Signals(_received).name if _received is not None else ""


def _handler(signum, frame):
    global _received
    if _active is not None and not _active(signum):
        return
    if _received is not None:
        return  # a second signal must not cut short the clean-up the first one started
    _received = signum
    if _depth == 0 and not _cannot_raise(frame):
        raise KeyboardInterrupt


def _cannot_raise(frame) -> bool:
    """Whether an exception raised in ``frame`` would be printed as "ignored" and lost.

    Finalizers (``__del__``), the import system's callbacks (a weakref callback that
    releases a module lock: a signal during a lazy import lands there) and the
    at-fork hooks run where Python can only report an exception, not raise it. The
    signal stays recorded; the next :func:`check` raises it.
    """
    code = getattr(frame, "f_code", None)
    if code is None:
        return False
    return code.co_filename.startswith("<frozen importlib") or code.co_name in ("__del__", "_releaseLock",
                                                                               "_after_at_fork_child_reinit_locks")


def install_early() -> None:
    """Record SIGINT and SIGTERM from the package's first line on, raising nothing yet.

    For the ``audition`` command only (see ``audition/__init__.py``): a signal that lands
    while the command line's modules are imported is kept, and the :func:`install` that
    :func:`audition.cli.main` makes next acts on it, so it is neither lost nor printed
    as a traceback.
    """
    global _previous, _depth, _early
    previous = {s: signal.signal(s, _handler) for s in SIGNALS}
    if _previous is None:
        _previous = previous
    _depth, _early = 1, True  # a shielded stretch until install()


def install(active=None) -> None:
    """Take SIGINT and SIGTERM in this process (main thread only); forget any signal recorded before.

    A signal recorded since :func:`install_early` is kept. ``active(signum)``, when
    given, says whether a signal that comes now is recorded at all (a batch worker
    between jobs leaves Ctrl-C to its parent).
    """
    global _previous, _received, _active, _depth, _early
    _received = _received if _early else None
    _active, _depth, _early = active, 0, False
    previous = {}
    for s in SIGNALS:
        previous[s] = signal.signal(s, _handler)
    if _previous is None:
        _previous = previous


def uninstall() -> None:
    """Give SIGINT and SIGTERM back the handlers :func:`install` found."""
    global _previous, _active, _received, _depth
    if _previous is not None:
        for s, h in _previous.items():
            signal.signal(s, h if h is not None else signal.SIG_DFL)
    _previous, _active, _received, _depth, _early = None, None, None, 0, False


def check() -> None:
    """Raise ``KeyboardInterrupt`` if a signal has been recorded (call at a safe point, in any thread)."""
    if _received is not None:
        raise KeyboardInterrupt


class shielded:
    """A stretch of the main thread where a signal is recorded but raises only at its end.

    ``with shielded(): ...`` around a call into C that calls back into Python (so
    no exception is lost inside the callback) or around renames that must all
    happen or none. With ``raise_at_end=False`` the signal stays recorded for the
    next :func:`check` (what a commit wants: the files are in place, the job is done).
    Other threads pass through (signal handlers run in the main thread only).
    """

    __slots__ = ("main", "raise_at_end")

    def __init__(self, raise_at_end: bool = True):
        self.raise_at_end = raise_at_end
        self.main = False

    def __enter__(self):
        global _depth
        self.main = threading.current_thread() is threading.main_thread()
        if self.main:
            _depth += 1
        return self

    def __exit__(self, exc_type, exc, tb):
        global _depth
        if self.main:
            _depth -= 1
        if exc_type is None and self.raise_at_end:
            check()
        return False


def block_in_thread():
    """Block SIGINT and SIGTERM in the calling thread (kernel mask); returns the mask to restore.

    For the stretch in which a worker process is forked or spawned: the child
    starts with the signals blocked and unblocks them once its own handler is
    in place, so a Ctrl-C that lands while it starts is neither a traceback
    nor lost (it is delivered when the child unblocks it).
    """
    return signal.pthread_sigmask(signal.SIG_BLOCK, SIGNALS)


def restore_mask(mask) -> None:
    signal.pthread_sigmask(signal.SIG_SETMASK, mask)


def unblock() -> None:
    signal.pthread_sigmask(signal.SIG_UNBLOCK, SIGNALS)
