"""Writing sound files atomically: through a temporary file renamed into place only when complete.

:func:`write_clip` writes an array (dithered if the subtype is integer);
:class:`AtomicWriter`, which it opens, takes blocks, quantises them
(:mod:`audition.io.quantise`), meters them and hands them to libsndfile in a
temporary file beside the target (:mod:`audition.io.tempfiles`). Before anything
is written the output is checked (:func:`check_output_path`): never an input,
not an existing file unless overwriting, a writable folder, room for it in the
container and on the disk.

Every writer meters what it writes: the sample peak and the true peak
(:mod:`audition.truepeak`, ITU-R BS.1770-4 Annex 2), both on the values in the
file (the dithered, rounded, saturated integers; a FLOAT file's float32 values).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import soundfile as sf

from audition.errors import BadParameter, OutputRefused
from audition.io.formats import (
    BLOCK_FRAMES,
    FLOAT_SUBTYPES,
    INTEGER_BITS,
    METADATA_FIELDS,
    _byte_layout,
    check_extension,
    check_output_subtype,
    format_for_path,
)
from audition.io.messages import _os_message, size_text
from audition.io.quantise import Quantiser, left_justify
from audition.io.tempfiles import _TempFile
from audition.truepeak import TruePeakMeter

# Containers whose sizes are 32-bit: 4 GiB at most, headers included.
_SIZE_LIMITED = {"WAV": 2**32 - 1, "WAVEX": 2**32 - 1, "AIFF": 2**32 - 1}
# libsndfile's sf_command for leaving out (SF_FALSE) or adding the PEAK chunk of float files (sndfile.h).
_SFC_SET_ADD_PEAK_CHUNK = 0x1050
_SUBTYPE_BYTES = {"PCM_S8": 1, "PCM_U8": 1, "PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}


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
        One of :data:`~audition.io.formats.OUTPUT_SUBTYPES` (default ``"PCM_16"``).
    overwrite : bool
        Replace an existing file (default: refuse).
    seed : int
        Seed of the TPDF dither, so the same call gives the same bytes.
    dither : bool
        TPDF dither of +-1 LSB before rounding integer subtypes (default True).
    format : str, optional
        libsndfile container name (``"WAV"``, ``"FLAC"``...).
    metadata : dict, optional
        Text fields (see :data:`~audition.io.formats.METADATA_FIELDS`).

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
        One of :data:`~audition.io.formats.OUTPUT_SUBTYPES`.
    overwrite : bool
        Replace an existing file (never one that is an input).
    inputs : sequence of paths
        Files the output must not be (also through links or other spellings).
    metadata : dict, optional
        Text fields to write.
    dither, seed :
        TPDF dither for integer subtypes (see :class:`~audition.io.quantise.Quantiser`).
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
                 frames_hint: int | None = None, carry=None, valid_bits: int | None = None):
        self.path = os.fspath(path)
        # archive metadata (issue 15): ``carry`` (audition.io.archive.Carry) puts the input's chunks
        # back around the audio in finish(); ``valid_bits`` dithers at a shorter valid word length
        self.carry = carry
        self.rate_hz = float(rate_hz)
        self.format = format
        self.subtype = check_output_subtype(subtype, format, self.path)
        check_output_path(self.path, inputs=inputs, overwrite=overwrite)
        check_extension(self.path, format)
        self.bits = INTEGER_BITS.get(subtype)
        self.valid_bits = valid_bits if self.bits and valid_bits and 8 <= valid_bits < self.bits else None
        self._scale = float(2 ** (self.bits - 1)) if self.bits else 1.0  # the meter's units: container LSBs
        self.quantiser = Quantiser(self.valid_bits or self.bits, dither=dither, seed=seed) if self.bits else None
        if frames_hint is not None:
            self._check_room(frames_hint, channels)
        self._tmp = _TempFile(self.path, replace=overwrite)  # never a file that appeared meanwhile, unless overwriting
        try:
            self._sf = sf.SoundFile(self._tmp.fd, mode="w", samplerate=int(round(rate_hz)), channels=channels,
                                    format=format, subtype=subtype, closefd=False)
            if subtype in FLOAT_SUBTYPES:
                # libsndfile stamps the wall-clock time into a float file's PEAK chunk, so two
                # writes of the same samples would differ; leave the chunk out (the same inputs
                # give the same bytes). sndfile.h: SFC_SET_ADD_PEAK_CHUNK = 0x1050, SF_FALSE = 0.
                sf._snd.sf_command(self._sf._file, _SFC_SET_ADD_PEAK_CHUNK, sf._ffi.NULL, 0)
            self.metadata_written = []
            self.metadata_given = dict(metadata or {})
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
                raise OutputRefused(f"{self.path!r}: needs about {size_text(size)} but the disk has "
                                    f"{size_text(free)} free")

    def quantise(self, x: np.ndarray) -> tuple[np.ndarray, float]:
        """Dither, round and saturate a block for this output; update the counts.

        Returns what :meth:`write_quantised` takes: the samples to write (int32
        levels for integer subtypes) and their sample peak in the same units.
        """
        if self.quantiser is not None:
            y, clipped, peak, unclipped = self.quantiser.quantise(x)
            if self.valid_bits:  # valid-bit integers stored left-justified in the container's word
                np.left_shift(y, self.bits - self.valid_bits, out=y)
            units = peak * self._scale  # the meter reads the integers, in LSBs
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
        scale = self._scale
        return WriteStats(self._frames, self._peak, self._clipped, self._unclipped, self.meter.peak / scale)

    def finish(self) -> None:
        """Close the sound file and flush it to the disk (the output is not in place yet)."""
        if self._state != "open":
            return
        # the crests between the last samples need the (silent) samples after them
        self.meter.finish()
        try:
            self._sf.close()
            if self.carry is not None and self.carry.active:
                self._tmp = self.carry.apply(self._tmp, self)
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


def same_file(a, b) -> bool:
    """True when ``a`` and ``b`` name one file (links, other spellings, hard links included)."""
    from audition.io.guard import same_file as _same

    return _same(a, b)


def check_output_path(path, *, inputs=(), overwrite: bool = False) -> None:
    """Refuse an output that is an input, not a regular file, exists (unless ``overwrite``), or has no writable folder.

    The rules of :func:`audition.io.guard.check_output`, the one check every writer uses.
    """
    from audition.io.guard import check_output

    check_output(path, inputs=inputs, overwrite=overwrite)


def _free_bytes(folder: str) -> int | None:
    try:
        st = os.statvfs(folder)
    except OSError:
        return None
    return st.f_bavail * st.f_frsize
