"""Format policy: what audition reads and writes, and in which container.

Any file libsndfile reads is accepted as input. Outputs are PCM (8, 16, 24, 32
bit) or IEEE float (32, 64 bit) in the container of the input. Integer outputs
are quantised (:mod:`audition.io.quantise`), with TPDF dither at the output word
length by default (Lipshitz, Wannamaker and Vanderkooy 1992), and saturated at
full scale, never wrapped. The integers go to libsndfile as int32, left-justified
(``k << (32-bits)``), which it stores by dropping the low zero bits: exact, and
cheaper than float conversion (checked in tests/test_io.py). libsndfile 1.2 also
converts float64 exactly on the LSB grid (``k / 2**(bits-1)`` times ``2**(bits-1)``),
but it spends a multiply, a rounding and a range check per sample on it.
Float outputs are written as computed: they carry values beyond full scale
without loss, so those are counted but kept. They are written without
libsndfile's PEAK chunk, which would stamp the wall-clock time into the file:
the same samples give the same bytes (:mod:`audition.io.writer`).

Uncompressed PCM_16/24/32 samples of the usual containers are moved as bytes and
converted by :mod:`audition.kernels` (:func:`_byte_layout`), both when reading
and when writing.
"""

from __future__ import annotations

import os
import sys

import soundfile as sf

from audition.errors import BadParameter

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
# sf_command asking whether the file's raw sample bytes are in the other byte order than this CPU's (sndfile.h).
_SFC_RAW_DATA_NEEDS_ENDSWAP = 0x1110
# Containers whose PCM_16/24/32 sample bytes audition converts itself (audition.kernels), libsndfile
# keeping the header, the chunks and the file position: plain two's-complement samples, frame-major.
_BYTE_CONTAINERS = ("WAV", "WAVEX", "W64", "RF64", "AIFF", "CAF")
_BYTE_SUBTYPES = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4}


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


def check_extension(path, fmt: str) -> None:
    """Refuse an output name whose ending claims another container than ``fmt``."""
    p = os.fspath(path)
    ext = os.path.splitext(p)[1].lower()
    names = {e for f, es in _EXTENSIONS.items() for e in es}
    if ext in names and ext not in _EXTENSIONS.get(fmt, ()):
        allowed = ", ".join(_EXTENSIONS.get(fmt, ())) or "its own"
        raise BadParameter(f"{p!r}: the ending {ext!r} names another container than the {fmt} being written; "
                           f"use {allowed}")


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
