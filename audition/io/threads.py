"""Handing blocks between threads: reading ahead here, writing behind in the renderer.

:func:`read_ahead` lets a second thread decode a file a few blocks ahead of its
user. The pieces it is built of (:data:`END`, :class:`Failed`,
:func:`put_unless_stopped`, :func:`get_unless_stopped`) serve any pair of
threads joined by a bounded queue, such as the renderer's writing thread: a
failure in either thread stops the other without a deadlock, and an exception
raised in a worker is raised again in the thread that waits for its blocks.
"""

from __future__ import annotations

from audition.io.formats import BLOCK_FRAMES

#: Marks the end of a stream of blocks in a queue.
END = object()
#: Blocks a reading thread may hold ready (each 65,536 frames: 1 MB a channel in float64).
READ_AHEAD_BLOCKS = 4


class Failed:
    """An exception raised in a worker thread, carried to the thread that raises it again."""

    def __init__(self, exc: BaseException):
        self.exc = exc


def put_unless_stopped(q, item, stop) -> bool:
    """``q.put(item)`` unless ``stop`` is set first (a full queue never deadlocks a failed pipeline)."""
    import queue

    while not stop.is_set():
        try:
            q.put(item, timeout=0.1)
            return True
        except queue.Full:
            continue
    return False


def get_unless_stopped(q, stop):
    """``q.get()``, or :data:`END` once ``stop`` is set."""
    import queue

    while not stop.is_set():
        try:
            return q.get(timeout=0.1)
        except queue.Empty:
            continue
    return END


def read_ahead(reader, block_frames: int = BLOCK_FRAMES, depth: int = READ_AHEAD_BLOCKS):
    """Yield ``reader.blocks(block_frames)`` as a second thread reads them, up to ``depth`` blocks ahead.

    libsndfile and numpy release the GIL for most of the decoding, so the reading
    runs on another core while the caller works on the block before. An
    exception of the reading is raised here, in the caller's thread, at the
    point in the stream where it happened; closing the generator early stops
    the reading thread (and waits for it) before the reader is closed.
    """
    import queue
    import threading

    q: queue.Queue = queue.Queue(depth)
    stop = threading.Event()

    def loop():
        try:
            for x in reader.blocks(block_frames):
                if not put_unless_stopped(q, x, stop):
                    return
            put_unless_stopped(q, END, stop)
        except BaseException as exc:  # handed to the caller's thread, which raises it
            put_unless_stopped(q, Failed(exc), stop)

    thread = threading.Thread(target=loop, name="audition-read", daemon=True)
    thread.start()
    try:
        while True:
            x = get_unless_stopped(q, stop)
            if x is END:
                return
            if isinstance(x, Failed):
                raise x.exc
            yield x
    finally:
        stop.set()
        thread.join()
