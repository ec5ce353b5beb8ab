"""The interpolator of ITU-R BS.1770-4 Annex 2 and the numpy form of the screened scan.

The low room under the true-peak meter (:mod:`audition.truepeak`, which explains the
method and the screen) and under the compiled kernels (:mod:`audition.kernels`), which
both need the tabulated filter and the screen constants; neither imports the other for them.

References
----------
Recommendation ITU-R BS.1770-4 (10/2015), Annex 2, and its table of the order-48, 4-phase
FIR interpolating filter.
"""

from __future__ import annotations

import numpy as np


#: The interpolating filter of ITU-R BS.1770-4 Annex 2 (order 48, four phases of
#: 12 taps), one row per phase as the Recommendation tabulates its columns. Values
#: checked against several independent public copies of the table, which
#: agree digit for digit; the prototype is symmetric (phase 3 is phase 0 reversed,
#: phase 2 is phase 1 reversed), which tests/test_truepeak.py asserts.
ANNEX2_PHASES = np.array([
    [0.0017089843750, 0.0109863281250, -0.0196533203125, 0.0332031250000, -0.0594482421875, 0.1373291015625,
     0.9721679687500, -0.1022949218750, 0.0476074218750, -0.0266113281250, 0.0148925781250, -0.0083007812500],
    [-0.0291748046875, 0.0292968750000, -0.0517578125000, 0.0891113281250, -0.1665039062500, 0.4650878906250,
     0.7797851562500, -0.2003173828125, 0.1015625000000, -0.0582275390625, 0.0330810546875, -0.0189208984375],
    [-0.0189208984375, 0.0330810546875, -0.0582275390625, 0.1015625000000, -0.2003173828125, 0.7797851562500,
     0.4650878906250, -0.1665039062500, 0.0891113281250, -0.0517578125000, 0.0292968750000, -0.0291748046875],
    [-0.0083007812500, 0.0148925781250, -0.0266113281250, 0.0476074218750, -0.1022949218750, 0.9721679687500,
     0.1373291015625, -0.0594482421875, 0.0332031250000, -0.0196533203125, 0.0109863281250, 0.0017089843750],
])
ANNEX2_PHASES.setflags(write=False)
#: Oversampling ratio (phases) and taps per phase.
FACTOR, TAPS = ANNEX2_PHASES.shape
#: Samples of the previous block each window still needs.
HISTORY = TAPS - 1

#: Relative slack on the screen's comparison: floating-point rounding of the bound and
#: of the interpolated values is below 1e-14 of the window's largest sample, which is
#: never above T (T includes the sample peak); 1e-9 leaves a wide margin.
SCREEN_SLACK = 1e-9


def annex2_prototype() -> np.ndarray:
    """The 48-tap prototype low-pass of Annex 2: ``h[4*j + k] = phase_k[j]`` (for :func:`scipy.signal.upfirdn`)."""
    return ANNEX2_PHASES.T.reshape(-1).copy()


def _screen_constants(phases: np.ndarray) -> tuple[float, float, tuple[int, ...]]:
    """Constants of the difference bound: max |phase gain|, max sum |c|, and each phase's centre lag.

    For phase ``h`` and centre lag ``m``, with ``e_l = x[i-l] - x[i-l-1]`` (l = 0..10)::

        x[i-j] = x[i-m] + sum_{l=j}^{m-1} e_l      (j < m)
        x[i-j] = x[i-m] - sum_{l=m}^{j-1} e_l      (j > m)

    so ``y = (sum_j h[j]) x[i-m] + sum_l c_l e_l`` with ``c`` accumulated below. The
    centre that minimises ``sum |c|`` is chosen per phase.
    """
    gains, sums, centres = [], [], []
    for h in phases:
        best = None
        for m in range(len(h)):
            c = np.zeros(len(h) - 1)
            for j, hj in enumerate(h):
                if j < m:
                    c[j:m] += hj
                elif j > m:
                    c[m:j] -= hj
            s = float(np.abs(c).sum())
            if best is None or s < best[0]:
                best = (s, m)
        sums.append(best[0])
        centres.append(best[1])
        gains.append(abs(float(h.sum())))
    # rounded up a little so the constants, once in floating point, are never below the exact ones
    return max(gains) * (1 + 1e-12), max(sums) * (1 + 1e-12), tuple(centres)


SCREEN_GAIN, SCREEN_DIFF, _CENTRES = _screen_constants(ANNEX2_PHASES)
# The screen takes the larger of the two centre samples (lags 5 and 6); it is valid only if every
# phase's centre is one of them (true of the tabulated filter; checked here so a changed table cannot
# silently break the proof).
assert set(_CENTRES) <= {5, 6}, _CENTRES
#: Column ``col`` of a gathered window is x[i - (11 - col)], oldest first: the taps reversed, (12, 4).
TAPS_BY_COLUMN = np.ascontiguousarray(ANNEX2_PHASES[:, ::-1].T)
TAPS_BY_COLUMN.setflags(write=False)
# The plain bound's constant: the largest sum |h_k| (2.02, phases 1 and 2).
_ABS_SUM = float(np.abs(ANNEX2_PHASES).sum(axis=1).max()) * (1 + 1e-12)


def interpolate_windows(windows: np.ndarray) -> np.ndarray:
    """The four interpolated values of each 12-sample window.

    Parameters
    ----------
    windows : np.ndarray, float64, (n, 12)
        Row ``r`` holds ``x[i-11] .. x[i]``, oldest first.

    Returns
    -------
    np.ndarray, (n, 4)
        ``y_k[i] = sum_j h_k[j] x[i-j]`` for k = 0..3 (BS.1770-4 Annex 2).

    Notes
    -----
    Summed in a fixed order, one tap at a time, with element-wise operations only
    (no BLAS, whose order of summation may depend on the number of rows): a window
    gives bit-for-bit the same values whichever other windows are evaluated with it.
    That is what lets the screened meter equal the full computation exactly.
    """
    w = np.asarray(windows, dtype=np.float64)
    y = w[:, 0:1] * TAPS_BY_COLUMN[0]
    for col in range(1, TAPS):
        y += w[:, col:col + 1] * TAPS_BY_COLUMN[col]
    return y


def scan_block(xx: np.ndarray, t: float, screen: bool, buf: "_Scratch") -> tuple[float, int]:
    """The largest interpolated magnitude of a block's windows, at least ``t``; and how many were interpolated.

    ``xx`` is (n + 11, channels): 11 samples of history, then the block; window k is
    ``xx[k:k+12]``. With ``screen`` only the windows whose bound reaches ``t`` are
    interpolated (see the module's notes); the result is the same. This is the numpy
    form; :mod:`audition.kernels` holds a compiled one that gives the same reading.
    """
    n, channels = len(xx) - HISTORY, xx.shape[1]
    if screen:
        k, ch = _candidates(xx, t, buf)
    else:
        k, ch = np.divmod(np.arange(n * channels), channels)
    if len(k):
        windows = xx[k[:, None] + np.arange(TAPS), ch[:, None]]
        t = max(t, float(np.abs(interpolate_windows(windows)).max()))
    return t, len(k)


def _candidates(xx: np.ndarray, t: float, buf: "_Scratch"):
    """(window, channel) indices whose bound reaches ``t``; window k ends at stream index k + 11."""
    rows, channels = xx.shape
    n = rows - HISTORY
    full, ch = buf.rows, buf.channels
    a = np.abs(xx, out=buf.array("a", full, ch)[:rows])
    threshold = t * (1.0 - SCREEN_SLACK)
    # whole block first: no window exceeds sum|h| * max|x| (the plain bound, one reduction)
    if _ABS_SUM * float(a.max()) < threshold:
        return (np.zeros(0, dtype=np.intp),) * 2
    # |first differences|; window k uses d[k .. k+10] (its 11 differences)
    d = np.subtract(xx[1:], xx[:-1], out=buf.array("d", full - 1, ch)[:rows - 1])
    np.abs(d, out=d)
    big = _sliding_max(d, HISTORY, buf.array("s1", full - 1, ch), buf.array("s2", full - 1, ch))  # (n, channels)
    # the centre samples x[i-6], x[i-5] of window k (i = k + 11) are a[k+5], a[k+6];
    # bound/gain = max(centres) + (diff/gain) * big, compared with threshold/gain
    big *= SCREEN_DIFF / SCREEN_GAIN
    big += np.maximum(a[5:5 + n], a[6:6 + n], out=buf.array("bound", full - HISTORY, ch)[:n])
    mask = np.greater_equal(big, threshold / SCREEN_GAIN, out=buf.array("mask", full - HISTORY, ch, bool)[:n])
    # flat indices of a C-ordered (frames, channels) array: cheaper than a 2-D nonzero
    return np.divmod(np.flatnonzero(mask), channels)


class _Scratch:
    """The work arrays of one meter for blocks of up to ``rows - 11`` frames, kept between blocks."""

    def __init__(self, rows: int, channels: int):
        self.rows, self.channels = rows, channels
        self.xx = np.zeros((rows, channels))
        self._arrays: dict[str, np.ndarray] = {}

    def array(self, name: str, rows: int, channels: int | None = None, dtype=np.float64) -> np.ndarray:
        """Work array ``name``, (rows,) or (rows, channels), made on first use (each scan uses its own)."""
        a = self._arrays.get(name)
        if a is None:
            a = self._arrays[name] = np.empty((rows,) if channels is None else (rows, channels), dtype=dtype)
        return a


def _sliding_max(d: np.ndarray, width: int, s1: np.ndarray, s2: np.ndarray) -> np.ndarray:
    """``out[k] = max(d[k:k+width])`` along axis 0, by doubling: a few passes, into ``s1``/``s2`` in turn."""
    out, spare = d, (s1, s2)
    span, turn = 1, 0
    while span <= width:
        step = min(span, width - span)
        if step == 0:
            break
        out = np.maximum(out[:-step], out[step:], out=spare[turn][:len(out) - step])
        turn ^= 1
        span += step
    return out
