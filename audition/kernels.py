"""The inner loops of the streaming engine: filter, dither and quantise, PCM bytes.

Each loop runs over one block. Two implementations give the same results, bit for bit:

* ``compiled``: ``audition/_kernels.c``, built with the package when a C compiler is
  at hand (an optional extension: installing never fails for want of one), called
  through :mod:`ctypes`, which releases the GIL for the call. One pass over each
  block per stage: this is what lets a render keep pace with a plain copy of the
  file (benchmarks/bench_render.py).
* ``portable``: the same operations as whole-array numpy (and
  :func:`scipy.signal.sosfilt`) passes, used when the library was not built.

The module-level functions are those of ``compiled`` when it loaded, else of
``portable``; :data:`COMPILED` says which. Every loop does the same floating-point
operations in the same order as its reference, so the results are equal, not close:

* :func:`sos_filter` is the transposed direct form II recursion of
  :func:`scipy.signal.sosfilt` (tests compare the two exactly);
* :func:`tpdf_quantise` is ``rint(x * s + d)`` with the dither ``d`` made of two
  16-bit uniforms, as :class:`audition.io.quantise.Quantiser` documents;
* :func:`unpack_pcm` and :func:`pack_pcm` convert between two's-complement PCM bytes
  and numbers exactly as libsndfile does for PCM_16/24/32 (its doubles are the
  integers over ``2**(bits-1)``, an exact scaling; tests compare both ways);
* :func:`true_peak_scan` is the screened 4x interpolation of :mod:`audition.truepeak`
  (each interpolated value summed in the same order, so the reading is the same).

Arrays must be C-contiguous with the dtypes given.
"""

from __future__ import annotations

import ctypes
import importlib.util
import os
from types import SimpleNamespace

import numpy as np

#: Set this to anything to use the portable loops even where the compiled ones are built.
PORTABLE_ENV = "AUDITION_PORTABLE_KERNELS"


# ---------------------------------------------------------------------------
# portable: numpy and scipy
# ---------------------------------------------------------------------------


def _np_sos_filter(x, sos, zi, y):
    from scipy.signal import sosfilt

    out, zf = sosfilt(sos, x, axis=0, zi=zi)
    zi[...] = zf
    y[...] = out


def _np_tpdf_quantise(x, scale, words, dither, k):
    if dither:
        # x*s*2**16 + d, then *2**-16: power-of-two scalings are exact, so this is x*s + d/2**16
        t = np.multiply(x, scale * 65536.0)
        t += np.subtract(words[0::2], words[1::2], dtype=np.int32).reshape(t.shape)
        t *= 1.0 / 65536.0
    else:
        t = np.multiply(x, scale)
    np.rint(t, out=t)
    t[np.isnan(t)] = 0.0
    hi, lo = float(t.max(initial=0.0)), float(t.min(initial=0.0))
    clipped = 0
    if hi > scale - 1 or lo < -scale:
        clipped = int(np.count_nonzero(t > scale - 1)) + int(np.count_nonzero(t < -scale))
        np.clip(t, -scale, scale - 1, out=t)
    np.copyto(k, t, casting="unsafe")
    return hi, lo, clipped


def _np_pack_pcm(k, width, big_endian, out):
    words = np.asarray(k, dtype=">i4" if big_endian else "<i4").reshape(-1)
    b = words.view(np.uint8).reshape(-1, 4)
    out.reshape(-1, width)[:] = b[:, 4 - width:] if big_endian else b[:, :width]


def _np_unpack_pcm(raw, width, big_endian, y):
    w = np.zeros((y.size, 4), dtype=np.uint8)  # left-justified in 32 bits: low bytes stay zero
    if big_endian:
        w[:, :width] = raw.reshape(-1, width)
        v = w.view(">i4")
    else:
        w[:, 4 - width:] = raw.reshape(-1, width)
        v = w.view("<i4")
    np.multiply(v.reshape(y.shape), 1.0 / 2147483648.0, out=y)


def _np_true_peak_scan(xx, t, screen, scratch):
    from audition import annex2

    return annex2.scan_block(xx, t, screen, scratch)


portable = SimpleNamespace(sos_filter=_np_sos_filter, tpdf_quantise=_np_tpdf_quantise,
                           pack_pcm=_np_pack_pcm, unpack_pcm=_np_unpack_pcm, true_peak_scan=_np_true_peak_scan)


# ---------------------------------------------------------------------------
# compiled: audition/_kernels.c through ctypes
# ---------------------------------------------------------------------------


def _load_library():
    """The built ``audition._kernels`` library, or None when it was not built or will not load."""
    try:
        spec = importlib.util.find_spec("audition._kernels")
    except (ImportError, ValueError):
        return None
    if spec is None or not spec.origin or not os.path.isfile(spec.origin):
        return None
    try:
        lib = ctypes.CDLL(spec.origin)
    except OSError:
        return None
    c_double_p, c_int32_p = ctypes.POINTER(ctypes.c_double), ctypes.POINTER(ctypes.c_int32)
    c_uint8_p, c_uint16_p = ctypes.POINTER(ctypes.c_uint8), ctypes.POINTER(ctypes.c_uint16)
    n = ctypes.c_ssize_t
    lib.au_sos_filter.argtypes = [c_double_p, c_double_p, n, n, c_double_p, n, c_double_p]
    lib.au_sos_filter.restype = None
    lib.au_tpdf_quantise.argtypes = [c_double_p, c_int32_p, n, ctypes.c_double, c_uint16_p, ctypes.c_int,
                                     c_double_p]
    lib.au_tpdf_quantise.restype = ctypes.c_int64
    lib.au_pack_pcm.argtypes = [c_int32_p, c_uint8_p, n, ctypes.c_int, ctypes.c_int]
    lib.au_pack_pcm.restype = None
    lib.au_unpack_pcm.argtypes = [c_uint8_p, c_double_p, n, ctypes.c_int, ctypes.c_int]
    lib.au_unpack_pcm.restype = None
    lib.au_true_peak_scan.argtypes = [c_double_p, n, n, ctypes.c_double, c_double_p, ctypes.c_double,
                                      ctypes.c_double, ctypes.c_double, ctypes.c_int, c_double_p,
                                      ctypes.POINTER(ctypes.c_int64)]
    lib.au_true_peak_scan.restype = ctypes.c_double
    return lib


def _ptr(a: np.ndarray, ctype, dtype, writable: bool = False):
    if a.dtype != dtype or not a.flags.c_contiguous or (writable and not a.flags.writeable):
        raise ValueError(f"need a C-contiguous{' writable' if writable else ''} {np.dtype(dtype)} array, "
                         f"got {a.dtype} with flags {a.flags}")
    return a.ctypes.data_as(ctypes.POINTER(ctype))


def _compiled(lib):
    d, i32, u8, u16 = ctypes.c_double, ctypes.c_int32, ctypes.c_uint8, ctypes.c_uint16

    def sos_filter(x, sos, zi, y):
        frames, channels = x.shape
        if y.shape != x.shape or sos.shape[1:] != (6,) or zi.shape != (len(sos), 2, channels):
            raise ValueError(f"shapes x {x.shape}, y {y.shape}, sos {sos.shape}, zi {zi.shape} do not fit")
        lib.au_sos_filter(_ptr(x, d, np.float64), _ptr(y, d, np.float64, True), frames, channels,
                          _ptr(sos, d, np.float64), len(sos), _ptr(zi, d, np.float64, True))

    def tpdf_quantise(x, scale, words, dither, k):
        if k.shape != x.shape or (dither and words.size < 2 * x.size):
            raise ValueError(f"shapes x {x.shape}, k {k.shape}, words {words.shape} do not fit")
        hilo = np.zeros(2)
        clipped = lib.au_tpdf_quantise(_ptr(x, d, np.float64), _ptr(k, i32, np.int32, True), x.size,
                                       float(scale), _ptr(words, u16, np.uint16), int(bool(dither)),
                                       _ptr(hilo, d, np.float64, True))
        return float(hilo[0]), float(hilo[1]), int(clipped)

    def pack_pcm(k, width, big_endian, out):
        if out.size != k.size * width:
            raise ValueError(f"{out.size} bytes for {k.size} samples of {width} bytes")
        lib.au_pack_pcm(_ptr(k, i32, np.int32), _ptr(out, u8, np.uint8, True), k.size, int(width),
                        int(bool(big_endian)))

    def unpack_pcm(raw, width, big_endian, y):
        if raw.size != y.size * width:
            raise ValueError(f"{raw.size} bytes for {y.size} samples of {width} bytes")
        lib.au_unpack_pcm(_ptr(raw, u8, np.uint8), _ptr(y, d, np.float64, True), y.size, int(width),
                          int(bool(big_endian)))

    def true_peak_scan(xx, t, screen, scratch):
        from audition import annex2

        rows, channels = xx.shape
        work = scratch.array("scan", 3 * scratch.rows)
        count = ctypes.c_int64(0)
        peak = lib.au_true_peak_scan(_ptr(xx, d, np.float64), rows - annex2.HISTORY, channels, float(t),
                                     _ptr(annex2.TAPS_BY_COLUMN, d, np.float64), annex2.SCREEN_GAIN,
                                     annex2.SCREEN_DIFF, annex2.SCREEN_SLACK, int(bool(screen)),
                                     _ptr(work, d, np.float64, True), ctypes.byref(count))
        return float(peak), int(count.value)

    return SimpleNamespace(sos_filter=sos_filter, tpdf_quantise=tpdf_quantise, pack_pcm=pack_pcm,
                           unpack_pcm=unpack_pcm, true_peak_scan=true_peak_scan)


_lib = _load_library()
#: The compiled loops, or None when the C library was not built here.
compiled = _compiled(_lib) if _lib is not None else None
#: True when the module-level functions are the compiled ones.
COMPILED = compiled is not None and not os.environ.get(PORTABLE_ENV)

_active = compiled if COMPILED else portable
sos_filter = _active.sos_filter
tpdf_quantise = _active.tpdf_quantise
pack_pcm = _active.pack_pcm
unpack_pcm = _active.unpack_pcm
true_peak_scan = _active.true_peak_scan
