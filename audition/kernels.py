"""The compiled inner loops of the streaming engine: filter, dither and quantise, PCM bytes.

Each function is one plain loop over one block, compiled by numba on first use
(the machine code is cached on disk, so later processes load it in a few
milliseconds) and run without holding the GIL, so the reading, filtering and
writing threads of a render really run side by side. They replace chains of
whole-array numpy passes: a render does one pass over each block per stage
instead of five or six, which is what lets it keep pace with a plain copy of
the file (benchmarks/bench_render.py).

Every loop does the same floating-point operations in the same order as the
reference it replaces, so the results are equal bit for bit, not merely close:

* :func:`sos_filter` is the transposed direct form II recursion of
  :func:`scipy.signal.sosfilt` (tests compare the two exactly);
* :func:`tpdf_quantise` is ``rint(x * s + d)`` with the dither ``d`` made of
  two 16-bit uniforms, as :class:`audition.audiofile.Quantiser` documents;
* :func:`unpack_pcm` and :func:`pack_pcm` convert between two's-complement PCM
  bytes and numbers exactly as libsndfile does for PCM_16/24/32 (its doubles are
  the integers over ``2**(bits-1)``, exact powers of two; tests compare both
  ways against libsndfile's own conversion).

Arrays must be C-contiguous with the dtypes given; the callers in
:mod:`audition.render` and :mod:`audition.audiofile` see to that.
"""

from __future__ import annotations

import numpy as np
from numba import njit

_COMPILE = dict(cache=True, nogil=True)


@njit(**_COMPILE)
def sos_filter(x, sos, zi, y):
    """Run second-order sections over a block, carrying the state.

    Parameters
    ----------
    x : float64 (frames, channels)
    sos : float64 (sections, 6)
        Rows ``[b0, b1, b2, 1, a1, a2]``.
    zi : float64 (sections, 2, channels)
        The state before the block; updated in place to the state after it
        (the ``zi``/``zf`` of :func:`scipy.signal.sosfilt` with ``axis=0``).
    y : float64 (frames, channels)
        The output (may be ``x`` itself).
    """
    n, channels = x.shape
    sections = sos.shape[0]
    for i in range(n):
        for c in range(channels):
            v = x[i, c]
            for s in range(sections):
                w = sos[s, 0] * v + zi[s, 0, c]
                zi[s, 0, c] = sos[s, 1] * v - sos[s, 4] * w + zi[s, 1, c]
                zi[s, 1, c] = sos[s, 2] * v - sos[s, 5] * w
                v = w
            y[i, c] = v


@njit(**_COMPILE)
def tpdf_quantise(x, scale, words, dither, k):
    """Dither, round and saturate a block to integers.

    Parameters
    ----------
    x : float64 (frames, channels)
        Full scale 1.0.
    scale : float
        ``2**(bits-1)``: one LSB is ``1/scale``.
    words : uint16 (2 * frames * channels,)
        Two uniform 16-bit words per sample, frame-major; the dither of sample
        ``m`` is ``(words[2m] - words[2m+1]) / 65536`` LSB (ignored without ``dither``).
    dither : bool
    k : int32 (frames, channels)
        The integers written, in LSBs, saturated to ``[-scale, scale - 1]``.

    Returns
    -------
    hi, lo : float
        Largest and smallest level before saturation (0 included), in LSBs.
    clipped : int
        Samples saturated.
    """
    n, channels = x.shape
    top = scale - 1.0
    bottom = -scale
    gain = scale * 65536.0
    hi = 0.0
    lo = 0.0
    clipped = 0
    m = 0
    for i in range(n):
        for c in range(channels):
            if dither:
                # x*s*2**16 + d, then *2**-16: power-of-two scalings are exact, so this is x*s + d/2**16
                d = np.int32(words[2 * m]) - np.int32(words[2 * m + 1])
                t = (x[i, c] * gain + d) * (1.0 / 65536.0)
            else:
                t = x[i, c] * scale
            m += 1
            t = np.rint(t)
            if t > hi:
                hi = t
            if t < lo:
                lo = t
            if t > top:
                t = top
                clipped += 1
            elif t < bottom:
                t = bottom
                clipped += 1
            k[i, c] = np.int32(t)
    return hi, lo, clipped


@njit(**_COMPILE)
def pack_pcm(k, width, big_endian, out):
    """Integers to two's-complement PCM bytes.

    Parameters
    ----------
    k : int32 (frames, channels)
        Levels within ``width`` bytes.
    width : int
        Bytes per sample: 2, 3 or 4.
    big_endian : bool
    out : uint8 (frames * channels * width,)
    """
    flat = k.reshape(-1)
    for j in range(flat.size):
        v = flat[j]
        base = j * width
        for b in range(width):
            shift = 8 * (width - 1 - b) if big_endian else 8 * b
            out[base + b] = (v >> shift) & 0xFF


@njit(**_COMPILE)
def unpack_pcm(raw, width, big_endian, y):
    """Two's-complement PCM bytes to float64 with full scale 1.0 (``k / 2**(8*width-1)``).

    Parameters
    ----------
    raw : uint8 (frames * channels * width,)
    width : int
        Bytes per sample: 2, 3 or 4.
    big_endian : bool
    y : float64 (frames, channels)
    """
    flat = y.reshape(-1)
    bits = 8 * width
    half = np.int64(1) << (bits - 1)
    step = 1.0 / float(half)
    for j in range(flat.size):
        base = j * width
        u = np.int64(0)
        for b in range(width):
            shift = 8 * (width - 1 - b) if big_endian else 8 * b
            u |= np.int64(raw[base + b]) << shift
        if u >= half:
            u -= half << 1
        flat[j] = u * step


def warm_up() -> None:
    """Load (or compile, the first time on a machine) every kernel now, on tiny blocks.

    The first call of a kernel in a process costs about half a second (numba sets
    itself up and loads the cached machine code); a parent that forks workers calls
    this once so they all inherit loaded kernels.
    """
    x = np.zeros((4, 1))
    sos_filter(x, np.zeros((1, 6)), np.zeros((1, 2, 1)), x)
    k = np.zeros((4, 1), dtype=np.int32)
    tpdf_quantise(x, 32768.0, np.zeros(8, dtype=np.uint16), True, k)
    raw = np.zeros(12, dtype=np.uint8)
    pack_pcm(k, 3, False, raw)
    unpack_pcm(raw, 3, False, x)
