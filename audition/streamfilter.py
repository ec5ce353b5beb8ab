"""The carried-state filter: a cascade of second-order sections applied block by block.

The one primitive that every streaming filter of audition runs on: the render engine
(:mod:`audition.render`), the K-weighting of the loudness meter (:mod:`audition.loudness`),
the survey's filtered prediction (:mod:`audition.pipeline`) and the listening regions
(:mod:`audition.listen.sources`). It stands on :mod:`audition.kernels` only.
"""

from __future__ import annotations

import numpy as np

from audition.errors import BadParameter


class StreamingFilter:
    """A cascade of second-order sections applied block by block with its state carried.

    Parameters
    ----------
    sos : array_like, (n_sections, 6)
        Rows ``[b0, b1, b2, 1, a1, a2]`` as in :func:`scipy.signal.sosfilt`.
    channels : int

    Attributes
    ----------
    zi : np.ndarray, (n_sections, 2, channels)
        The state before the next block (zeros at the start: the signal is
        taken to be silent before its first sample).

    Notes
    -----
    Each call runs :func:`audition.kernels.sos_filter`: the transposed direct
    form II recursion of :func:`scipy.signal.sosfilt`, operation for operation,
    so a call equals ``y, zf = sosfilt(sos, x, axis=0, zi=zi)`` bit for bit and
    ``zf`` becomes the next ``zi``. The recursion is the same whether or not the
    signal is cut, so the blocks join without a seam.
    """

    def __init__(self, sos, channels: int):
        from audition import kernels

        self._run = kernels.sos_filter
        self.sos = np.array(sos, dtype=np.float64, ndmin=2, order="C")
        if self.sos.shape[1] != 6:
            raise BadParameter(f"sos of shape {self.sos.shape!r}: need (n_sections, 6)")
        self.channels = int(channels)
        self.zi = np.zeros((len(self.sos), 2, self.channels))

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Filter one float64 (frames, channels) block; returns a new array."""
        if not len(self.sos):
            return x
        x = np.ascontiguousarray(x, dtype=np.float64)
        if x.ndim != 2 or x.shape[1] != self.channels:
            raise BadParameter(f"block of shape {x.shape!r} for a {self.channels}-channel filter")
        y = np.empty_like(x)
        self._run(x, self.sos, self.zi, y)
        return y
