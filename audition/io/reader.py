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

from audition import interrupt
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


def counted(blocks, total: int, progress=None):
    """``blocks`` passed through, with ``progress(frames_done, total)`` after each one (when given)."""
    if progress is None:
        yield from blocks
        return
    done = 0
    for b in blocks:
        yield b
        done += len(b)
        progress(done, total)


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
    #: the frame count a truncated file's header declares, when it was accepted (see :func:`accept_truncated`)
    frames_declared: int | None = None

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
        self.size = os.fstat(self._f.fileno()).st_size
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
        """SHA-256 of the whole file, reading only what has not been hashed yet.

        Raises :class:`OSError` (ESTALE) when the bytes hashed are not the file's size at
        opening: the file changed while it was read, and no digest would describe it.
        """
        sha = self._sha.copy()
        fd = self._f.fileno()
        pos = self.hashed_to
        while chunk := os.pread(fd, 1 << 20, pos):
            sha.update(chunk)
            pos += len(chunk)
        if pos != self.size:
            import errno

            raise OSError(errno.ESTALE, f"{pos} bytes hashed but the file had {self.size} when it was opened")
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
        _check_regular(p)
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
            with interrupt.shielded():  # libsndfile calls back into Python (the hashing file) as it opens
                self._sf = sf.SoundFile(raw if hash_input else raw.fileno(), mode="r", closefd=False)
            fmt_name = self._sf.format
        except sf.LibsndfileError as exc:
            # a valid RF64/BW64 libsndfile refuses (odd-sized chunks, BW64): audition.io.archive reads its chunks
            from audition.io.archive.riff import open_wave64

            try:
                opened = open_wave64(p, raw)
            except (OSError, ValueError, sf.LibsndfileError):
                opened = None
            if opened is None:
                raw.close()
                raise BadInputFile(f"{p!r}: not a sound file libsndfile can read ({_sf_message(exc)})") from None
            self._sf, fmt_name, _ = opened
        except (RuntimeError, TypeError) as exc:
            raw.close()
            raise BadInputFile(f"{p!r}: not a sound file libsndfile can read ({exc})") from None
        f = self._sf
        if f.frames <= 0:
            self.close()
            raise BadInputFile(f"{p!r}: a {f.format} header with no audio frames")
        declared = _declared_frames(f)
        if declared is not None and declared > f.frames and not truncation_accepted(p):
            self.close()
            raise BadInputFile(f"{p!r}: truncated: its header declares {declared} frames but the file holds only "
                               f"{f.frames} ({f.frames / f.samplerate:.3f} s of {declared / f.samplerate:.3f} s); "
                               "find the complete transfer, or give --accept-truncated to render what is there")
        self.info = AudioInfo(path=p, rate_hz=float(f.samplerate), channels=f.channels, frames=f.frames,
                              format=fmt_name, subtype=f.subtype, size_bytes=size,
                              metadata=_clean_metadata(_text_fields(f)),
                              frames_declared=declared if declared is not None and declared > f.frames else None)
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
            # shielded: a Ctrl-C inside libsndfile's call back into Python (the hashing file) would be
            # lost there and end the read early as if the file ended; it is raised here, after the read
            with interrupt.shielded():
                x = self._read_bytes(n) if self._layout is not None else self._sf.read(n, dtype="float64",
                                                                                       always_2d=True)
        except (sf.LibsndfileError, RuntimeError) as exc:
            interrupt.check()
            raise BadInputFile(f"{self.path!r}: read failed at frame {self.frames_read} ({exc})") from None
        interrupt.check()  # a signal recorded in a reading thread, or in a callback of the main one
        if len(x) < n and self.frames_read + len(x) < self.frames:
            # never a short file taken for a whole one: the end comes where the header says
            raise BadInputFile(f"{self.path!r}: the reading ended at frame {self.frames_read + len(x)} but the "
                               f"header declares {self.frames} frames (a damaged or truncated file?)")
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
        try:
            return self._raw.hexdigest()
        except OSError as exc:
            raise BadInputFile(f"{self.path!r}: changed while it was being read ({exc.strerror or exc}); "
                               "no output was made from it") from None

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


def _check_regular(p: str) -> None:
    """Refuse a FIFO, device or socket: reading one could wait for ever or never end."""
    import stat

    try:
        mode = os.stat(p).st_mode
    except OSError:
        return  # the opening says what is wrong
    if not stat.S_ISREG(mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or
                stat.S_ISBLK(mode) else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        raise BadInputFile(f"{p!r}: is {kind}, not a sound file; give a regular file (copy the stream to one first)")


#: real paths of inputs whose truncation the user accepted (``--accept-truncated``), see :func:`accept_truncated`
_TRUNCATED_OK: dict[str, int] = {}


def truncation_accepted(path) -> bool:
    return os.path.realpath(path) in _TRUNCATED_OK


class accept_truncated:
    """``with accept_truncated(path): ...``: a truncated ``path`` is read (what it holds) instead of refused."""

    def __init__(self, *paths):
        self.paths = [os.path.realpath(p) for p in paths if p]

    def __enter__(self):
        for p in self.paths:
            _TRUNCATED_OK[p] = _TRUNCATED_OK.get(p, 0) + 1
        return self

    def __exit__(self, *exc):
        for p in self.paths:
            n = _TRUNCATED_OK.get(p, 0) - 1
            if n <= 0:
                _TRUNCATED_OK.pop(p, None)
            else:
                _TRUNCATED_OK[p] = n
        return False


#: what libsndfile's log says of a header that promises more than the file holds (libsndfile 1.2 wording)
_COUNT_IN_HEADER = re.compile(r"from 'COMM' chunk \((\d+)\)|value from 'ds64' chunk of (\d+)")
_SIZE_IN_HEADER = re.compile(r"^\s*(?:RIFF|RIFX|FORM|riff)\s*:\s*(\d+)\s*\(should be (\d+)\)", re.M)
_SAMPLE_BYTES = {"PCM_S8": 1, "PCM_U8": 1, "PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}


def _declared_frames(f) -> int | None:
    """The frame count the header declares, when it is more than libsndfile found in the file; else None.

    libsndfile opens a WAVE, AIFF, RF64 or W64 file cut short with the frames it holds
    and notes the header's figure in its log: the frame count of an AIFF ``COMM`` or
    RF64 ``ds64`` chunk, or the container size of a RIFF or FORM header with the size
    the file has ("should be"). FLAC's STREAMINFO count is libsndfile's frame count
    itself; a FLAC cut short fails in the reading (see :meth:`AudioReader.read`).
    """
    try:
        log = f.extra_info
    except Exception:  # a reader without a log (audition.io.archive's): nothing to say
        return None
    m = _COUNT_IN_HEADER.search(log)
    if m:
        n = int(m.group(1) or m.group(2))
        return n if n > f.frames else None
    m = _SIZE_IN_HEADER.search(log)
    width = _SAMPLE_BYTES.get(f.subtype)
    if m and width:
        missing = int(m.group(1)) - int(m.group(2))
        extra = round(missing / (width * f.channels))  # to the nearest: the file may end inside a frame
        return f.frames + extra if extra > 0 else None
    return None


def sha256_file(path) -> str:
    """SHA-256 of a file's bytes, hex."""
    h = hashlib.sha256()
    with open(path, "rb", buffering=0) as f:
        while chunk := f.read(1 << 20):
            h.update(chunk)
    return h.hexdigest()


def _text_fields(f) -> dict:
    """The text fields libsndfile reads, decoded as UTF-8 or, where they are not UTF-8, as Latin-1.

    soundfile's ``copy_metadata`` decodes as UTF-8 with replacement, which turns the
    Latin-1 text of older LIST INFO chunks into U+FFFD; the bytes say which it is.
    """
    out = {}
    for name, code in sf._str_types.items():
        ptr = sf._snd.sf_get_string(f._file, code)
        if ptr:
            b = sf._ffi.string(ptr)
            try:
                out[name] = b.decode("utf-8")
            except UnicodeDecodeError:
                out[name] = b.decode("latin-1")
    return out


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
