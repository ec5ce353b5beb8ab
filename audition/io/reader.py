"""Reading sound files: whole, in blocks, or through a checked, hashing block reader.

:func:`read_clip` reads a whole short file into memory; :func:`blocks` yields
float64 blocks for streaming through a file (optionally decoded a few blocks
ahead by a second thread, :func:`audition.io.threads.read_ahead`); :func:`info`
reads the header. They open :class:`AudioReader`, which refuses a bad file with
one line naming it, checks float samples for NaN and infinity, and computes the
SHA-256 of the file's bytes while libsndfile reads them (:func:`sha256_file`
does the same for any file, in one pass of its own).
"""

from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass, field

import numpy as np
import soundfile as sf

from audition.errors import BadInputFile, BadParameter
from audition.io.formats import BLOCK_FRAMES, FLOAT_SUBTYPES, INTEGER_BITS, _byte_layout
from audition.io.messages import _sf_message
from audition.io.threads import read_ahead


def read_clip(path, *, always_2d: bool = True) -> tuple[np.ndarray, float]:
    """Read a whole (short) sound file into memory.

    Parameters
    ----------
    path : str or os.PathLike
    always_2d : bool
        Return shape (frames, channels) even for mono (default True).

    Returns
    -------
    data : np.ndarray, float64, full scale +-1.0
    rate_hz : float

    Raises
    ------
    BadInputFile
        Missing, unreadable, empty or corrupt file, or non-finite samples.
    """
    with AudioReader(path, hash_input=False) as r:
        parts = list(r.blocks(BLOCK_FRAMES))
        data = np.concatenate(parts, axis=0) if parts else np.zeros((0, r.channels))
        rate = r.rate_hz
    if not always_2d and data.shape[1] == 1:
        data = data[:, 0]
    return data, rate


def info(path) -> "AudioInfo":
    """The header of a sound file (rate, channels, frames, container, subtype, metadata)."""
    with AudioReader(path, hash_input=False) as r:
        return r.info


def blocks(path, block_frames: int = BLOCK_FRAMES, *, ahead: bool = False):
    """Yield float64 (frames, channels) blocks of a sound file, checked as they come.

    With ``ahead``, a second thread reads a few blocks ahead (:func:`~audition.io.threads.read_ahead`),
    so decoding overlaps the caller's work on another core.

    Raises :class:`~audition.errors.BadInputFile` for a bad file and for the
    first NaN or infinite sample (naming its frame and channel).
    """
    with AudioReader(path, hash_input=False) as r:
        yield from (read_ahead(r, block_frames) if ahead else r.blocks(block_frames))


@dataclass(frozen=True)
class AudioInfo:
    """What a sound file's header says."""

    path: str
    rate_hz: float
    channels: int
    frames: int
    format: str
    subtype: str
    size_bytes: int
    metadata: dict = field(default_factory=dict)

    @property
    def seconds(self) -> float:
        return self.frames / self.rate_hz


class _HashingFile:
    """A raw file for libsndfile's virtual I/O that hashes the bytes as they are read.

    The hash covers the bytes [0, ``hashed_to``) in order; reads that jump
    ahead are not hashed then but later by :meth:`hexdigest`, which reads what
    libsndfile skipped. So the digest is the file's SHA-256 whatever the access
    pattern, and for the usual front-to-back read the file is read only once.
    """

    def __init__(self, path: str):
        self._f = open(path, "rb", buffering=0)
        self._sha = hashlib.sha256()
        self.hashed_to = 0

    # the file-like protocol soundfile's virtual I/O needs
    def seek(self, offset, whence=os.SEEK_SET):
        return self._f.seek(offset, whence)

    def tell(self):
        return self._f.tell()

    def read(self, n=-1):
        pos = self._f.tell()
        data = self._f.read(n)
        self._feed(pos, data)
        return data

    def readinto(self, buf):
        pos = self._f.tell()
        n = self._f.readinto(buf)
        if n:
            self._feed(pos, memoryview(buf)[:n])
        return n

    def _feed(self, pos, data):
        end = pos + len(data)
        if pos <= self.hashed_to < end:
            self._sha.update(memoryview(data)[self.hashed_to - pos:])
            self.hashed_to = end

    def hexdigest(self) -> str:
        """SHA-256 of the whole file, reading only what has not been hashed yet."""
        sha = self._sha.copy()
        fd = self._f.fileno()
        pos = self.hashed_to
        while chunk := os.pread(fd, 1 << 20, pos):
            sha.update(chunk)
            pos += len(chunk)
        return sha.hexdigest()

    def close(self):
        self._f.close()


class AudioReader:
    """A checked block reader of one sound file (read-only, never opened for writing).

    Parameters
    ----------
    path : str or os.PathLike
    hash_input : bool
        Compute the SHA-256 of the file's bytes while reading (see :meth:`sha256`).

    Attributes
    ----------
    info : AudioInfo
    rate_hz, channels, frames, format, subtype, metadata
        Shortcuts into ``info``.

    Raises
    ------
    BadInputFile
        Missing, unreadable, empty, corrupt or unsupported file; a file with no
        frames; NaN or infinite samples (from :meth:`blocks`).
    """

    def __init__(self, path, *, hash_input: bool = True):
        self.path = os.fspath(path)
        p = self.path
        if not os.path.lexists(p):
            raise BadInputFile(f"{p!r}: no such file")
        if os.path.isdir(p):
            raise BadInputFile(f"{p!r}: is a folder, not a sound file")
        if not os.path.exists(p):
            raise BadInputFile(f"{p!r}: a broken link (its target does not exist)")
        try:
            size = os.path.getsize(p)
            raw = _HashingFile(p) if hash_input else open(p, "rb")
        except PermissionError:
            raise BadInputFile(f"{p!r}: not readable (permission denied)") from None
        except OSError as exc:
            raise BadInputFile(f"{p!r}: cannot be opened ({exc.strerror})") from None
        if size == 0:
            raw.close()
            raise BadInputFile(f"{p!r}: empty file (0 bytes), not a sound file")
        self._raw = raw
        try:
            # Without hashing, libsndfile reads the descriptor itself: no Python call (holding the GIL)
            # for every chunk it reads, so a reading thread runs beside the caller's work.
            self._sf = sf.SoundFile(raw if hash_input else raw.fileno(), mode="r", closefd=False)
        except sf.LibsndfileError as exc:
            raw.close()
            raise BadInputFile(f"{p!r}: not a sound file libsndfile can read ({_sf_message(exc)})") from None
        except (RuntimeError, TypeError) as exc:
            raw.close()
            raise BadInputFile(f"{p!r}: not a sound file libsndfile can read ({exc})") from None
        f = self._sf
        if f.frames <= 0:
            self.close()
            raise BadInputFile(f"{p!r}: a {f.format} header with no audio frames")
        self.info = AudioInfo(path=p, rate_hz=float(f.samplerate), channels=f.channels, frames=f.frames,
                              format=f.format, subtype=f.subtype, size_bytes=size,
                              metadata=_clean_metadata(f.copy_metadata()))
        # Integer samples cannot be NaN; only float files need the finiteness check.
        self._check_finite = f.subtype in FLOAT_SUBTYPES or f.subtype not in INTEGER_BITS
        self._layout = _byte_layout(f)
        self.frames_read = 0

    rate_hz = property(lambda self: self.info.rate_hz)
    channels = property(lambda self: self.info.channels)
    frames = property(lambda self: self.info.frames)
    format = property(lambda self: self.info.format)
    subtype = property(lambda self: self.info.subtype)
    metadata = property(lambda self: self.info.metadata)

    def read(self, n: int) -> np.ndarray:
        """The next ``n`` frames (fewer at the end, none after it) as float64 (frames, channels)."""
        try:
            x = self._read_bytes(n) if self._layout is not None else self._sf.read(n, dtype="float64",
                                                                                   always_2d=True)
        except (sf.LibsndfileError, RuntimeError) as exc:
            raise BadInputFile(f"{self.path!r}: read failed at frame {self.frames_read} ({exc})") from None
        if self._check_finite and len(x) and not np.isfinite(x).all():
            idx = int(np.flatnonzero(~np.isfinite(x))[0])
            frame, ch = self.frames_read + idx // x.shape[1], idx % x.shape[1] + 1
            raise BadInputFile(f"{self.path!r}: sample at frame {frame} channel {ch} is {float(x.flat[idx])!r} "
                               f"(frames from 0; {frame / self.rate_hz:.6f} s); a file with NaN or infinite "
                               "samples cannot be rendered")
        self.frames_read += len(x)
        return x

    def _read_bytes(self, n: int) -> np.ndarray:
        from audition import kernels

        width, big = self._layout
        frame_bytes = width * self.channels
        n = max(0, min(int(n), self.frames - self.frames_read))
        buf = np.empty(n * frame_bytes, dtype=np.uint8)
        got = int(sf._snd.sf_read_raw(self._sf._file, sf._ffi.from_buffer(buf), buf.nbytes)) if n else 0
        if got < len(buf):
            code = sf._snd.sf_error(self._sf._file)
            if code:
                raise sf.LibsndfileError(code)
        x = np.empty((got // frame_bytes, self.channels), dtype=np.float64)
        kernels.unpack_pcm(buf[:len(x) * frame_bytes], width, big, x)
        return x

    def blocks(self, block_frames: int = BLOCK_FRAMES):
        """Yield blocks of ``block_frames`` frames (the last one shorter) until the end."""
        if block_frames < 1:
            raise BadParameter(f"block_frames={block_frames!r}: must be at least 1")
        while True:
            x = self.read(block_frames)
            if not len(x):
                return
            yield x

    def sha256(self) -> str:
        """SHA-256 of the input file's bytes (hashed while reading; the rest read now)."""
        if not isinstance(self._raw, _HashingFile):
            raise RuntimeError("AudioReader was opened with hash_input=False")
        return self._raw.hexdigest()

    def close(self):
        try:
            if getattr(self, "_sf", None) is not None and not self._sf.closed:
                self._sf.close()
        finally:
            self._raw.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


def sha256_file(path) -> str:
    """SHA-256 of a file's bytes, hex."""
    h = hashlib.sha256()
    with open(path, "rb", buffering=0) as f:
        while chunk := f.read(1 << 20):
            h.update(chunk)
    return h.hexdigest()


def _clean_metadata(meta: dict) -> dict:
    """The text fields as the user wrote them.

    libsndfile appends its own name to "software" when it writes a file
    (``"capture (libsndfile-1.2.2)"``), and 1.2.2 can return stray bytes after
    it from AIFF; keep what precedes that mark, so a copy does not grow
    another mark each time.
    """
    out = {}
    for k, v in meta.items():
        if k == "software":
            v = _LIBSNDFILE_MARK.split(v, maxsplit=1)[0]
        if v:
            out[k] = v
    return out


_LIBSNDFILE_MARK = re.compile(r"\s*\(libsndfile-")
