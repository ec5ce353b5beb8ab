"""The quantiser of integer outputs: TPDF dither, rounding to the word length, saturation.

:class:`Quantiser` turns float64 blocks (full scale +-1.0) into the integers an
integer file holds, counting what it saturates and metering the sample peak;
:func:`left_justify` gives those integers the int32 form libsndfile's writes
take. The dither follows S. P. Lipshitz, R. A. Wannamaker, J. Vanderkooy,
"Quantization and Dither: A Theoretical Survey", JAES 40(5), 1992.
"""

from __future__ import annotations

import numpy as np

from audition.errors import BadParameter


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
        # any word length from 8 to 32: a WAVE_FORMAT_EXTENSIBLE file may hold, say, 20 valid bits in 24
        if not isinstance(bits, (int, np.integer)) or not 8 <= bits <= 32:
            raise BadParameter(f"bits={bits!r}: allowed are 8 to 32")
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
