"""Sound files in and out: the only module that touches soundfile (libsndfile).

Three tiers, as in python-soundfile:

1. simple functions: :func:`read_clip` (a whole short file into memory) and
   :func:`write_clip` (an array to a file, atomically, dithered if integer);
2. :func:`blocks`: a generator of float64 blocks for streaming through a file;
3. the classes they wrap: :class:`AudioReader` (a checked, hashing block
   reader) and :class:`AtomicWriter` (a writer that puts a temporary file in
   the target folder and renames it into place only when complete).

Everything a user can get wrong raises an :class:`~audition.errors.AuditionError`
with one line naming the file and the problem. Nothing half-written is ever left:
the temporary file is removed on any failure, ``KeyboardInterrupt`` included.

Format policy
-------------
Any file libsndfile reads is accepted as input. Outputs are PCM (8, 16, 24, 32
bit) or IEEE float (32, 64 bit) in the container of the input. Integer outputs
are quantised here, with TPDF dither at the output word length by default
(Lipshitz, Wannamaker and Vanderkooy 1992), and saturated at full scale, never
wrapped. The integers go to libsndfile as int32, left-justified (``k << (32-bits)``),
which it stores by dropping the low zero bits: exact, and cheaper than float
conversion (checked in tests/test_audiofile.py). libsndfile 1.2 also converts
float64 exactly on the LSB grid (``k / 2**(bits-1)`` times ``2**(bits-1)``), but
it spends a multiply, a rounding and a range check per sample on it.
Float outputs are written as computed: they carry values beyond full scale
without loss, so those are counted but kept. They are written without
libsndfile's PEAK chunk, which would stamp the wall-clock time into the file:
the same samples give the same bytes.

Every writer meters what it writes: the sample peak and the true peak
(:mod:`audition.truepeak`, ITU-R BS.1770-4 Annex 2), both on the values in the
file (the dithered, rounded, saturated integers; a FLOAT file's float32 values).
"""

from __future__ import annotations

import datetime as _dt
import errno
import hashlib
import json
import math
import os
import re
import sys
import tempfile
from dataclasses import dataclass, field

import numpy as np
import soundfile as sf

from audition.errors import BadInputFile, BadParameter, OutputRefused
from audition.truepeak import TruePeakMeter

#: Output word length of each integer subtype, bits.
INTEGER_BITS = {"PCM_S8": 8, "PCM_U8": 8, "PCM_16": 16, "PCM_24": 24, "PCM_32": 32}
#: Float subtypes: written as computed, never dithered.
FLOAT_SUBTYPES = ("FLOAT", "DOUBLE")
#: Every subtype an output may have.
OUTPUT_SUBTYPES = tuple(INTEGER_BITS) + FLOAT_SUBTYPES
#: The text fields libsndfile carries and soundfile exposes as attributes.
METADATA_FIELDS = ("title", "copyright", "software", "artist", "comment", "date", "album", "license",
                   "tracknumber", "genre")
#: Frames per block when streaming: big enough that per-block Python costs vanish
#: (64 Ki frames of stereo float64 is 1 MiB), small enough to stay in cache-ish memory.
BLOCK_FRAMES = 65536

# File name endings that name each container; an output must not claim another one.
_EXTENSIONS = {
    "WAV": (".wav", ".wave"), "WAVEX": (".wav", ".wave"), "RF64": (".wav", ".rf64"), "W64": (".w64",),
    "FLAC": (".flac",), "AIFF": (".aif", ".aiff", ".aifc"), "CAF": (".caf",), "AU": (".au", ".snd"),
}
# Containers whose sizes are 32-bit: 4 GiB at most, headers included.
_SIZE_LIMITED = {"WAV": 2**32 - 1, "WAVEX": 2**32 - 1, "AIFF": 2**32 - 1}
# libsndfile's sf_command for leaving out (SF_FALSE) or adding the PEAK chunk of float files (sndfile.h).
_SFC_SET_ADD_PEAK_CHUNK = 0x1050
_SUBTYPE_BYTES = {"PCM_S8": 1, "PCM_U8": 1, "PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}
# sf_command asking whether the file's raw sample bytes are in the other byte order than this CPU's (sndfile.h).
_SFC_RAW_DATA_NEEDS_ENDSWAP = 0x1110
# Containers whose PCM_16/24/32 sample bytes audition converts itself (audition.kernels), libsndfile
# keeping the header, the chunks and the file position: plain two's-complement samples, frame-major.
_BYTE_CONTAINERS = ("WAV", "WAVEX", "W64", "RF64", "AIFF", "CAF")
_BYTE_SUBTYPES = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4}


# ---------------------------------------------------------------------------
# Tier 1: simple functions
# ---------------------------------------------------------------------------


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


def write_clip(path, data, rate_hz: float, subtype: str = "PCM_16", *, overwrite: bool = False, seed: int = 0,
               dither: bool = True, format: str | None = None, metadata: dict | None = None) -> "WriteStats":
    """Write an array to a sound file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; its ending picks the container unless ``format`` is given.
    data : array_like, (frames,) or (frames, channels), full scale +-1.0
    rate_hz : float
    subtype : str
        One of :data:`OUTPUT_SUBTYPES` (default ``"PCM_16"``).
    overwrite : bool
        Replace an existing file (default: refuse).
    seed : int
        Seed of the TPDF dither, so the same call gives the same bytes.
    dither : bool
        TPDF dither of +-1 LSB before rounding integer subtypes (default True).
    format : str, optional
        libsndfile container name (``"WAV"``, ``"FLAC"``...).
    metadata : dict, optional
        Text fields (see :data:`METADATA_FIELDS`).

    Returns
    -------
    WriteStats
        Frames written, sample peak and count of samples beyond full scale.
    """
    x = np.asarray(data, dtype=np.float64)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[1] < 1:
        raise BadParameter(f"data of shape {np.shape(data)!r}: need (frames,) or (frames, channels)")
    if not np.all(np.isfinite(x)):
        idx = int(np.flatnonzero(~np.isfinite(x))[0])
        raise BadParameter(f"data: sample at frame {idx // x.shape[1]} channel {idx % x.shape[1] + 1} is "
                           f"{float(x.flat[idx])!r}; only finite samples can be written")
    fmt = format or format_for_path(path)
    with AtomicWriter(path, rate_hz, x.shape[1], format=fmt, subtype=subtype, overwrite=overwrite,
                      metadata=metadata, dither=dither, seed=seed) as w:
        for start in range(0, len(x), BLOCK_FRAMES):
            w.write(x[start:start + BLOCK_FRAMES])
    return w.stats


def info(path) -> "AudioInfo":
    """The header of a sound file (rate, channels, frames, container, subtype, metadata)."""
    with AudioReader(path, hash_input=False) as r:
        return r.info


def format_for_path(path) -> str:
    """The libsndfile container an output file name asks for (from its ending)."""
    ext = os.path.splitext(os.fspath(path))[1].lower()
    for fmt in ("WAV", "W64", "FLAC", "AIFF", "CAF", "AU", "RF64"):
        if ext in _EXTENSIONS[fmt]:
            return fmt
    raise BadParameter(f"{os.fspath(path)!r}: cannot tell the container from the ending {ext!r}; "
                       f"use one of .wav, .w64, .flac, .aiff, .caf, .au")


def check_output_subtype(subtype: str, fmt: str, path=None) -> str:
    """Refuse a subtype audition cannot write, or one the container cannot hold."""
    where = f"{os.fspath(path)!r}: " if path is not None else ""
    if subtype not in OUTPUT_SUBTYPES:
        raise BadParameter(f"{where}subtype={subtype!r}: allowed are {', '.join(OUTPUT_SUBTYPES)}")
    if not sf.check_format(fmt, subtype):
        ok = [s for s in OUTPUT_SUBTYPES if sf.check_format(fmt, s)]
        raise BadParameter(f"{where}subtype={subtype!r} does not fit the {fmt} container; it holds {', '.join(ok)}")
    return subtype


# ---------------------------------------------------------------------------
# Tier 2: block reading
# ---------------------------------------------------------------------------


def blocks(path, block_frames: int = BLOCK_FRAMES, *, ahead: bool = False):
    """Yield float64 (frames, channels) blocks of a sound file, checked as they come.

    With ``ahead``, a second thread reads a few blocks ahead (:func:`read_ahead`),
    so decoding overlaps the caller's work on another core.

    Raises :class:`~audition.errors.BadInputFile` for a bad file and for the
    first NaN or infinite sample (naming its frame and channel).
    """
    with AudioReader(path, hash_input=False) as r:
        yield from (read_ahead(r, block_frames) if ahead else r.blocks(block_frames))


# Hand-over between threads: reading ahead here, writing behind in audition.render.

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


# ---------------------------------------------------------------------------
# Tier 3: classes
# ---------------------------------------------------------------------------


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


def _byte_layout(snd: sf.SoundFile) -> tuple[int, bool] | None:
    """``(bytes per sample, big-endian)`` when audition converts this file's samples itself, else None.

    For uncompressed PCM_16/24/32 the samples are moved as bytes with libsndfile's
    ``sf_read_raw``/``sf_write_raw`` and converted by :mod:`audition.kernels`: the
    same numbers libsndfile's own conversion gives (the tests compare them), in
    one compiled pass instead of libsndfile's conversion through small buffers.
    Everything else (FLAC, float, 8-bit, other containers) goes through libsndfile.
    """
    width = _BYTE_SUBTYPES.get(snd.subtype)
    if width is None or snd.format not in _BYTE_CONTAINERS:
        return None
    swapped = bool(sf._snd.sf_command(snd._file, _SFC_RAW_DATA_NEEDS_ENDSWAP, sf._ffi.NULL, 0))
    return width, swapped != (sys.byteorder == "big")


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


@dataclass(frozen=True)
class WriteStats:
    """What an :class:`AtomicWriter` wrote.

    Attributes
    ----------
    frames : int
    peak : float
        Sample peak of the written output, full scale 1.0 (not a true-peak meter reading).
    peak_dbfs : float or None
        ``20*log10(peak)``; None for digital silence.
    unclipped_peak : float
        Sample peak before saturation; above 1.0 when samples were clipped.
    clipped_samples : int
        Samples beyond full scale: saturated for integer outputs, kept for float ones.
    true_peak : float
        True peak of the written output (ITU-R BS.1770-4 Annex 2, 4x oversampled; see
        :mod:`audition.truepeak`), full scale 1.0, measured on the values in the file:
        after dither, rounding and saturation for integer outputs, after rounding to
        float32 for FLOAT ones. Never below ``peak``.
    true_peak_dbtp : float or None
        ``20*log10(true_peak)``, dBTP (0 dBTP = full scale); None for digital silence.
    """

    frames: int
    peak: float
    clipped_samples: int
    unclipped_peak: float
    true_peak: float = 0.0

    @property
    def peak_dbfs(self) -> float | None:
        return 20.0 * math.log10(self.peak) if self.peak > 0 else None

    @property
    def true_peak_dbtp(self) -> float | None:
        return 20.0 * math.log10(self.true_peak) if self.true_peak > 0 else None

    @property
    def trim_db(self) -> float:
        """dB of gain reduction that would have kept every sample within full scale (0 if none needed)."""
        return max(0.0, 20.0 * math.log10(self.unclipped_peak)) if self.unclipped_peak > 0 else 0.0


class Quantiser:
    """TPDF-dithered rounding to an integer word length, with saturation and counts.

    For ``bits`` b the LSB is ``2**(1-b)`` of full scale. Each sample gets a
    dither ``d = u1 - u2`` LSB, u1 and u2 independent and uniform on [0, 1)
    (on a grid of 2**-16 LSB): a triangular PDF spanning +-1 LSB. Then it is
    rounded to the nearest LSB and saturated to ``[-2**(b-1), 2**(b-1) - 1]``.

    Notes
    -----
    With this dither the total error (dither plus rounding) has power
    ``LSB**2/6 + LSB**2/12 = LSB**2/4`` whatever the signal, and its first two
    moments do not depend on the signal (Lipshitz, Wannamaker and Vanderkooy
    1992, non-subtractive dither).

    The uniforms are the 16-bit quarters of the raw 64-bit outputs of one
    ``numpy.random.PCG64(seed)``, taken in order, two per sample, frame-major:
    the output does not depend on how the signal is cut into blocks, and the
    random numbers cost a quarter of a draw per sample. (16 bits of resolution
    put the dither within 2**-16 LSB of the continuous TPDF.)

    References
    ----------
    S. P. Lipshitz, R. A. Wannamaker, J. Vanderkooy, "Quantization and Dither:
    A Theoretical Survey", J. Audio Eng. Soc. 40(5), 355-375, 1992.
    """

    def __init__(self, bits: int, *, dither: bool = True, seed: int = 0):
        if bits not in (8, 16, 24, 32):
            raise BadParameter(f"bits={bits!r}: allowed are 8, 16, 24, 32")
        self.bits = int(bits)
        self.scale = float(2 ** (self.bits - 1))
        self.dither = bool(dither)
        self.seed = seed
        self._bitgen = np.random.PCG64(seed)
        self._carry = np.zeros(0, dtype=np.uint32)  # 32 random bits left over from an odd-sized block

    def _words(self, n: int) -> np.ndarray:
        """The next ``n`` pairs of uniform 16-bit words (uint16, ``2n`` of them), in stream order."""
        need = n - len(self._carry)
        raw = self._bitgen.random_raw((need + 1) // 2).view(np.uint32) if need > 0 else np.zeros(0, np.uint32)
        bits = np.concatenate([self._carry, raw]) if len(self._carry) else raw
        self._carry = bits[n:].copy()
        return bits[:n].view(np.uint16)

    def dither_lsb(self, n: int) -> np.ndarray:
        """The next ``n`` dither values times 2**16 (int32 in [-65535, 65535]; divide by 2**16 for LSB)."""
        u = self._words(n)
        return np.subtract(u[0::2], u[1::2], dtype=np.int32)

    def quantise(self, x: np.ndarray) -> tuple[np.ndarray, int, float, float]:
        """Dither, round and saturate a float64 block.

        Returns
        -------
        k : np.ndarray, int32, same shape
            The integers written, in LSBs (full scale is ``2**(bits-1)``).
        clipped : int
            Samples that were saturated.
        peak, unclipped_peak : float
            Sample peak after and before saturation, full scale 1.0.
        """
        from audition import kernels

        x = np.ascontiguousarray(x, dtype=np.float64)
        k = np.empty(x.shape if x.ndim == 2 else (x.size, 1), dtype=np.int32)
        words = self._words(x.size) if self.dither else np.zeros(0, np.uint16)
        hi, lo, clipped = kernels.tpdf_quantise(x.reshape(k.shape), self.scale, words, self.dither, k)
        s = self.scale
        unclipped = max(hi, -lo) / s
        peak = max(min(hi, s - 1), -max(lo, -s)) / s
        return k.reshape(x.shape), int(clipped), peak, unclipped


def left_justify(k: np.ndarray, bits: int) -> np.ndarray:
    """Integers of ``bits`` bits as int32 ``k * 2**(32-bits)`` (in place), the form libsndfile's int32 writes take."""
    if bits < 32:
        np.left_shift(k, 32 - bits, out=k)
    return k


class AtomicWriter:
    """Write a sound file through a temporary file in the target folder, renamed into place when complete.

    Use as a context manager: leaving the block normally commits (flush,
    fsync, ``os.replace``); leaving it by any exception, ``KeyboardInterrupt``
    included, removes the temporary file and leaves the target untouched. Or
    call :meth:`finish` then :meth:`commit` (two phases, so a sidecar can be
    prepared between them), and :meth:`abort` on failure.

    Parameters
    ----------
    path : str or os.PathLike
    rate_hz : float
    channels : int
    format : str
        libsndfile container name.
    subtype : str
        One of :data:`OUTPUT_SUBTYPES`.
    overwrite : bool
        Replace an existing file (never one that is an input).
    inputs : sequence of paths
        Files the output must not be (also through links or other spellings).
    metadata : dict, optional
        Text fields to write.
    dither, seed :
        TPDF dither for integer subtypes (see :class:`Quantiser`).
    frames_hint : int, optional
        Expected length, to refuse early a container size limit or a disk
        without room.

    Raises
    ------
    OutputRefused
        Output is an input, exists (without ``overwrite``), is a folder; target
        folder missing or not writable; not enough room; write failure.
    """

    def __init__(self, path, rate_hz: float, channels: int, *, format: str, subtype: str, overwrite: bool = False,
                 inputs=(), metadata: dict | None = None, dither: bool = True, seed: int = 0,
                 frames_hint: int | None = None):
        self.path = os.fspath(path)
        self.format = format
        self.subtype = check_output_subtype(subtype, format, self.path)
        check_output_path(self.path, inputs=inputs, overwrite=overwrite)
        check_extension(self.path, format)
        self.bits = INTEGER_BITS.get(subtype)
        self.quantiser = Quantiser(self.bits, dither=dither, seed=seed) if self.bits else None
        if frames_hint is not None:
            self._check_room(frames_hint, channels)
        self._tmp = _TempFile(self.path)
        try:
            self._sf = sf.SoundFile(self._tmp.fd, mode="w", samplerate=int(round(rate_hz)), channels=channels,
                                    format=format, subtype=subtype, closefd=False)
            if subtype in FLOAT_SUBTYPES:
                # libsndfile stamps the wall-clock time into a float file's PEAK chunk, so two
                # writes of the same samples would differ; leave the chunk out (the same inputs
                # give the same bytes). sndfile.h: SFC_SET_ADD_PEAK_CHUNK = 0x1050, SF_FALSE = 0.
                sf._snd.sf_command(self._sf._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, 0)
            self.metadata_written = []
            for k, v in (metadata or {}).items():
                if k in METADATA_FIELDS and v:
                    try:
                        setattr(self._sf, k, v)
                    except (sf.LibsndfileError, RuntimeError):
                        continue  # a field this container cannot carry (W64 carries none)
                    self.metadata_written.append(k)
            self.channels = channels
            self._layout = _byte_layout(self._sf)
            self.meter = TruePeakMeter(channels)
            self._frames = 0
            self._peak = 0.0
            self._unclipped = 0.0
            self._clipped = 0
            self._state = "open"
        except BaseException as exc:  # Ctrl-C included: the constructor leaves no temporary file behind
            self._discard()
            if isinstance(exc, (sf.LibsndfileError, RuntimeError, ValueError)):
                raise OutputRefused(f"{self.path!r}: cannot be written as {format} {subtype} ({exc})") from None
            raise

    def _check_room(self, frames: int, channels: int):
        size = frames * channels * _SUBTYPE_BYTES[self.subtype] + 65536
        limit = _SIZE_LIMITED.get(self.format)
        if limit is not None and size > limit:
            raise OutputRefused(f"{self.path!r}: {size / 2**30:.2f} GiB of {self.subtype} does not fit a {self.format} "
                                f"file (4 GiB at most); choose a smaller --subtype or an RF64/W64 output")
        if self.format != "FLAC":
            free = _free_bytes(os.path.dirname(os.path.abspath(self.path)))
            if free is not None and size > free:
                raise OutputRefused(f"{self.path!r}: needs about {size / 2**20:,.0f} MiB but the disk has "
                                    f"{free / 2**20:,.0f} MiB free")

    def quantise(self, x: np.ndarray) -> tuple[np.ndarray, float]:
        """Dither, round and saturate a block for this output; update the counts.

        Returns what :meth:`write_quantised` takes: the samples to write (int32
        levels for integer subtypes) and their sample peak in the same units.
        """
        if self.quantiser is not None:
            y, clipped, peak, unclipped = self.quantiser.quantise(x)
            units = peak * self.quantiser.scale  # the meter reads the integers, in LSBs
        else:
            a = float(np.max(np.abs(x), initial=0.0))
            clipped = int(np.count_nonzero(np.abs(x) > 1.0)) if a > 1.0 else 0
            # a FLOAT file stores float32: its peaks are those of the rounded values, and
            # libsndfile's double-to-float conversion is this same round-to-nearest cast
            y = x.astype(np.float32) if self.subtype == "FLOAT" else x
            peak = float(np.float32(a)) if self.subtype == "FLOAT" else a
            unclipped = units = peak
        self._clipped += clipped
        self._peak = max(self._peak, peak)
        self._unclipped = max(self._unclipped, unclipped)
        return y, units

    def write_quantised(self, block: tuple[np.ndarray, float]) -> None:
        """Meter the true peak of a block :meth:`quantise` returned, and write it (may run in another thread).

        Blocks must come in the order they were quantised.
        """
        y, units = block
        self.meter.process(y, sample_peak=units)
        try:
            self._write_samples(y)
        except (sf.LibsndfileError, RuntimeError, OSError, AssertionError) as exc:
            raise OutputRefused(f"{self.path!r}: writing failed after {self._frames} frames "
                                f"({_os_message(exc)}); nothing was left behind") from None
        self._frames += len(y)

    def _write_samples(self, y: np.ndarray) -> None:
        """Hand one block to libsndfile: as PCM bytes, as left-justified int32, or as floats."""
        if self._layout is not None:
            from audition import kernels

            width, big = self._layout
            buf = np.empty(y.size * width, dtype=np.uint8)
            kernels.pack_pcm(np.ascontiguousarray(y), width, big, buf)
            put = int(sf._snd.sf_write_raw(self._sf._file, sf._ffi.from_buffer(buf), buf.nbytes))
            if put != buf.nbytes:
                raise sf.LibsndfileError(sf._snd.sf_error(self._sf._file) or 2)  # 2: SFE_SYSTEM, a failed write(2)
        elif self.quantiser is not None:
            self._sf.write(left_justify(y, self.bits))
        else:
            self._sf.write(y)

    def write(self, x: np.ndarray) -> None:
        """Quantise and write one float64 (frames, channels) block."""
        x = np.asarray(x, dtype=np.float64)
        if x.ndim == 1:
            x = x[:, None]
        if x.shape[1] != self.channels:
            raise BadParameter(f"block of {x.shape[1]} channels for a {self.channels}-channel file {self.path!r}")
        self.write_quantised(self.quantise(x))

    @property
    def stats(self) -> WriteStats:
        """What was written so far (the true peak is complete once :meth:`finish` has run)."""
        scale = self.quantiser.scale if self.quantiser is not None else 1.0
        return WriteStats(self._frames, self._peak, self._clipped, self._unclipped, self.meter.peak / scale)

    def finish(self) -> None:
        """Close the sound file and flush it to the disk (the output is not in place yet)."""
        if self._state != "open":
            return
        # the crests between the last samples need the (silent) samples after them
        self.meter.finish()
        try:
            self._sf.close()
            self._tmp.sync()
        except (sf.LibsndfileError, RuntimeError, OSError) as exc:
            raise OutputRefused(f"{self.path!r}: finishing the file failed ({_os_message(exc)}); "
                                "nothing was left behind") from None
        self._state = "finished"

    def commit(self) -> None:
        """Rename the finished temporary file into place (atomic on one file system)."""
        self.finish()
        self._tmp.commit()
        self._state = "committed"

    def abort(self) -> None:
        """Drop everything written so far; the target is untouched."""
        if self._state == "committed":
            return
        self._discard()
        self._state = "aborted"

    def _discard(self) -> None:
        """Close libsndfile's handle, then drop the temporary file.

        In that order: closed later, the handle would write its header to a descriptor already reused.
        """
        sfile = getattr(self, "_sf", None)  # absent when the constructor failed before opening it
        try:
            if sfile is not None and not sfile.closed:
                sfile.close()
        except Exception:  # the file is being thrown away; its close errors do not matter
            pass
        self._tmp.remove()

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            try:
                self.commit()
            except BaseException:
                self.abort()
                raise
        else:
            self.abort()
        return False


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


# ---------------------------------------------------------------------------
# Output checks
# ---------------------------------------------------------------------------


def same_file(a, b) -> bool:
    """True when ``a`` and ``b`` name one file (links, other spellings, hard links included)."""
    a, b = os.fspath(a), os.fspath(b)
    try:
        if os.path.samefile(a, b):
            return True
    except OSError:
        pass
    return os.path.realpath(a) == os.path.realpath(b)


def check_output_path(path, *, inputs=(), overwrite: bool = False) -> None:
    """Refuse an output that is an input, a folder, exists (unless ``overwrite``), or has no writable folder."""
    p = os.fspath(path)
    for src in inputs:
        if same_file(p, src):
            raise OutputRefused(f"{p!r}: is the input {os.fspath(src)!r}; the original is never written to, "
                                "name another output")
    if os.path.isdir(p):
        raise OutputRefused(f"{p!r}: is a folder; name an output file")
    if os.path.lexists(p) and not overwrite:
        raise OutputRefused(f"{p!r}: exists; give --overwrite to replace it")
    folder = os.path.dirname(os.path.abspath(p))
    if not os.path.isdir(folder):
        raise OutputRefused(f"{p!r}: the folder {folder!r} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputRefused(f"{p!r}: the folder {folder!r} is not writable")


def check_extension(path, fmt: str) -> None:
    """Refuse an output name whose ending claims another container than ``fmt``."""
    p = os.fspath(path)
    ext = os.path.splitext(p)[1].lower()
    names = {e for f, es in _EXTENSIONS.items() for e in es}
    if ext in names and ext not in _EXTENSIONS.get(fmt, ()):
        allowed = ", ".join(_EXTENSIONS.get(fmt, ())) or "its own"
        raise BadParameter(f"{p!r}: the ending {ext!r} names another container than the {fmt} being written; "
                           f"use {allowed}")


# ---------------------------------------------------------------------------
# Sidecar and small helpers
# ---------------------------------------------------------------------------


def sidecar_path(path) -> str:
    """The sidecar beside an output: ``OUT.json`` (e.g. ``take1.wav.json``)."""
    return os.fspath(path) + ".json"


def utc_now_iso() -> str:
    """The time now, ISO 8601, UTC, to the second (e.g. ``2024-05-01T12:00:00Z``)."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace("+00:00", "Z")


class PreparedText:
    """A text file (UTF-8) prepared in a temporary file beside ``path``, renamed into place by :meth:`commit`.

    ``what`` names the file in an error ("sidecar", "report", ...).
    """

    def __init__(self, path, text: str, what: str = "file"):
        self.path = os.fspath(path)
        self._tmp = _TempFile(self.path)
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


def _free_bytes(folder: str) -> int | None:
    try:
        st = os.statvfs(folder)
    except OSError:
        return None
    return st.f_bavail * st.f_frsize


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
