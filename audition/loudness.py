"""Programme loudness by ITU-R BS.1770-4: K-weighting, gated mean square, LKFS.

Three tiers, each built on the one before:

:func:`k_filter`
    K-weighting of a block with the filter state explicit (``zi`` in, ``zf`` out).
:class:`LoudnessMeter`
    A streaming accumulator: feed blocks of any size, ask for :meth:`~LoudnessMeter.result`
    at any time. The state is the filter memory, a partial 100 ms segment and
    one number per completed segment, so an hour of audio costs 36 000 floats.
:func:`integrated_lkfs`
    One call on a whole array; a thin wrapper that feeds one meter.

The measurement (ITU-R BS.1770-4, Annex 1)
------------------------------------------
Each channel i is K-weighted to y_i. Gating blocks are T_g = 400 ms long and
start every 100 ms (75 % overlap); only complete blocks count. For block j

.. math::

    z_{ij} = \\frac{1}{T_g} \\int_{T_g} y_i^2\\,dt \\quad (3), \\qquad
    l_j = -0.691 + 10\\log_{10} \\sum_i G_i z_{ij} \\quad (4)

with channel weights G = 1.0 (L, R, C), 1.41 (Ls, Rs), 0 (LFE). Blocks with
l_j <= Gamma_a = -70 LKFS are dropped (absolute gate); of the rest, those with
l_j <= Gamma_r are dropped, where (6)

.. math:: \\Gamma_r = -0.691 + 10\\log_{10} \\sum_i G_i \\overline{z_{ij}}\\big|_{l_j > \\Gamma_a} - 10

(relative gate, 10 LU below the absolutely gated loudness), and (7)

.. math:: L_K = -0.691 + 10\\log_{10} \\sum_i G_i \\overline{z_{ij}}\\big|_{l_j > \\Gamma_a,\\ l_j > \\Gamma_r}

Equation numbers are those of BS.1770-4 Annex 1, from memory.
Since the sum over channels and the mean over blocks commute, the meter keeps
only the weighted sum over channels per 100 ms segment.

Readings are in LKFS (= LUFS). A 0 dBFS 1 kHz sine in one front channel reads
−3.01 LKFS by the Recommendation (−3.004 with its tabulated filter, whose gain at
1 kHz is 0.698 dB rather than the 0.691 dB the offset cancels). LKFS is not the
RMS-dBFS of the rest of audition: that sine is −3.01 dBFS too, but a stereo pair
of them reads 0 LKFS, because channel powers add.

Examples
--------
>>> import numpy as np
>>> t = np.arange(48000 * 2) / 48000
>>> round(integrated_lkfs(np.sin(2 * np.pi * 1000 * t), 48000), 2)
-3.0
"""

from __future__ import annotations

import math
import numbers

import numpy as np

from audition.errors import BadParameter

BLOCK_SECONDS = 0.4
STEP_SECONDS = 0.1  # 75 % overlap: a block is four steps
_STEPS_PER_BLOCK = 4
ABSOLUTE_GATE_LKFS = -70.0
RELATIVE_GATE_LU = -10.0
#: The constant of eqs. (2), (4), (6), (7), chosen so the K-weighting's gain at 1 kHz cancels.
LOUDNESS_OFFSET_DB = -0.691
SURROUND_WEIGHT = 1.41

#: Default channel weights by channel count, in the BS.1770-4 / SMPTE order
#: L R C (LFE) Ls Rs. Other counts need explicit weights: the layout is ambiguous.
DEFAULT_CHANNEL_WEIGHTS = {
    1: (1.0,),
    2: (1.0, 1.0),
    3: (1.0, 1.0, 1.0),
    5: (1.0, 1.0, 1.0, SURROUND_WEIGHT, SURROUND_WEIGHT),
    6: (1.0, 1.0, 1.0, 0.0, SURROUND_WEIGHT, SURROUND_WEIGHT),
}


def channel_weights_for(channels: int, channel_weights=None) -> np.ndarray:
    """The weights G_i to use for ``channels`` channels (explicit ones checked, else the defaults)."""
    if channel_weights is None:
        if channels not in DEFAULT_CHANNEL_WEIGHTS:
            raise BadParameter(f"channels={channels!r}: no default loudness channel weights for this layout; "
                               f"pass channel_weights (defaults exist for {sorted(DEFAULT_CHANNEL_WEIGHTS)} channels)")
        return np.array(DEFAULT_CHANNEL_WEIGHTS[channels], dtype=float)
    w = np.asarray(channel_weights, dtype=float)
    if w.shape != (channels,) or not np.all(np.isfinite(w)) or np.any(w < 0.0):
        raise BadParameter(f"channel_weights={channel_weights!r}: need {channels} finite weights >= 0, "
                           "one per channel (1.0 front, 1.41 surround, 0 LFE)")
    return w


def _as_frames(data, channels: int | None = None, name: str = "data") -> np.ndarray:
    x = np.asarray(data, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or x.shape[1] < 1:
        raise BadParameter(f"{name} shape={np.shape(data)!r}: need (frames, channels) or (frames,) for mono")
    if channels is not None and x.shape[1] != channels:
        raise BadParameter(f"{name} has {x.shape[1]} channels, expected {channels} (as the meter was set up)")
    if not np.all(np.isfinite(x)):
        raise BadParameter(f"{name} contains NaN or infinite samples; loudness needs finite samples")
    return x


def k_filter(data, rate_hz: float, zi=None) -> tuple[np.ndarray, np.ndarray]:
    """K-weight a block, carrying the filter state.

    Parameters
    ----------
    data : ndarray (frames, channels) or (frames,)
        Samples, full scale ±1.0.
    rate_hz : float
    zi : ndarray (2, 2, channels), optional
        State from the previous block's ``zf``; ``None`` starts at rest.

    Returns
    -------
    y : ndarray (frames, channels)
        K-weighted samples (always 2-D).
    zf : ndarray (2, 2, channels)
        State to pass as ``zi`` with the next block; blocks so chained give
        the one-pass result.
    """
    from audition.streamfilter import StreamingFilter
    from audition.weighting import k_weighting_sos

    x = _as_frames(data)
    sos = k_weighting_sos(rate_hz)
    if zi is None:
        zi = np.zeros((sos.shape[0], 2, x.shape[1]))
    zi = np.asarray(zi, dtype=float)
    if zi.shape != (sos.shape[0], 2, x.shape[1]):
        raise BadParameter(f"zi shape={zi.shape!r}: expected {(sos.shape[0], 2, x.shape[1])!r} "
                           "(the zf returned with the previous block)")
    filt = StreamingFilter(sos, x.shape[1])  # the meter's filter, with the state handed in and out
    filt.zi = zi.copy()  # the caller's array stays as it was
    y = filt(x)
    return y, filt.zi


class LoudnessMeter:
    """Streaming ITU-R BS.1770-4 integrated loudness.

    Parameters
    ----------
    rate_hz : float
        Sample rate in Hz, at least 8000.
    channels : int
        Number of channels of every block to be fed.
    channel_weights : sequence of float, optional
        G_i per channel; default from :data:`DEFAULT_CHANNEL_WEIGHTS`.

    Notes
    -----
    Blocks are counted on a grid of ``step = round(0.1 rate)`` samples, a gating
    block being four steps (exactly 400 ms at 8, 16, 22.05, 32, 44.1, 48, 88.2,
    96 and 192 kHz). Any split of the input into fed blocks gives the same
    result as one block, to rounding (about 1e-15 relative).

    Examples
    --------
    >>> import numpy as np
    >>> meter = LoudnessMeter(48000, 2)
    >>> noise = np.random.default_rng(1).normal(0, 0.1, (48000 * 3, 2))
    >>> for start in range(0, len(noise), 10007):
    ...     meter.feed(noise[start:start + 10007])
    >>> abs(meter.result() - integrated_lkfs(noise, 48000)) < 1e-9
    True
    """

    def __init__(self, rate_hz: float, channels: int, channel_weights=None):
        from audition.design import check_rate
        from audition.streamfilter import StreamingFilter
        from audition.weighting import k_weighting_sos

        self.rate_hz = check_rate(rate_hz)
        if not (isinstance(channels, (int, np.integer)) and channels >= 1):
            raise BadParameter(f"channels={channels!r}: need a whole number >= 1")
        self.channels = int(channels)
        self.weights = channel_weights_for(self.channels, channel_weights)
        self.step_frames = int(round(STEP_SECONDS * self.rate_hz))
        self.block_frames = _STEPS_PER_BLOCK * self.step_frames
        self._k_filter = StreamingFilter(k_weighting_sos(self.rate_hz), self.channels)  # state carried
        self._partial = np.zeros(self.channels)  # sum of y² in the unfinished segment
        self._partial_frames = 0
        self._segments: list[np.ndarray] = []  # weighted sum over channels of y², per segment
        self.frames = 0

    def feed(self, block) -> None:
        """Add the next block of samples, (frames, channels) or (frames,) for mono."""
        x = _as_frames(block, self.channels, name="block")
        if len(x) == 0:
            return
        y = self._k_filter(x)
        sq = y * y
        self.frames += len(sq)
        step = self.step_frames
        # Finish the segment left open by the previous block.
        take = min(step - self._partial_frames, len(sq))
        self._partial += sq[:take].sum(axis=0)
        self._partial_frames += take
        if self._partial_frames < step:
            return
        done = [np.array([self._partial @ self.weights])]
        rest = sq[take:]
        whole = len(rest) // step
        if whole:
            seg = rest[:whole * step].reshape(whole, step, self.channels).sum(axis=1)
            done.append(seg @ self.weights)
        tail = rest[whole * step:]
        self._partial = tail.sum(axis=0)
        self._partial_frames = len(tail)
        self._segments.append(np.concatenate(done))

    def block_powers(self) -> np.ndarray:
        """Sum_i G_i z_ij for every complete gating block so far (mean squares, full scale = 1)."""
        e = np.concatenate(self._segments) if self._segments else np.zeros(0)
        if len(e) < _STEPS_PER_BLOCK:
            return np.zeros(0)
        # Four adjacent 100 ms segments make one 400 ms block (eq. 3, 75 % overlap).
        total = e[:-3] + e[1:-2] + e[2:-1] + e[3:]
        return total / self.block_frames

    def block_loudness_lkfs(self) -> np.ndarray:
        """Loudness l_j of every complete gating block so far, eq. (4); −inf for digital silence."""
        with np.errstate(divide="ignore"):
            return LOUDNESS_OFFSET_DB + 10.0 * np.log10(self.block_powers())

    def result(self) -> float:
        """Gated integrated loudness L_K in LKFS so far, eq. (7).

        Returns −inf when no block passes the absolute gate: silence, or less
        than 400 ms of audio.
        """
        p = self.block_powers()
        # The gates compare l_j with a threshold; in the power domain that is
        # p_j > 10^((threshold - offset)/10), which avoids the log of silence.
        p_abs = 10.0 ** ((ABSOLUTE_GATE_LKFS - LOUDNESS_OFFSET_DB) / 10.0)
        gated = p[p > p_abs]
        if len(gated) == 0:
            return -math.inf
        p_rel = gated.mean() * 10.0 ** (RELATIVE_GATE_LU / 10.0)  # eq. (6)
        gated = gated[gated > p_rel]
        return LOUDNESS_OFFSET_DB + 10.0 * math.log10(gated.mean())  # eq. (7)


def integrated_lkfs(data, rate_hz: float, channel_weights=None) -> float:
    """ITU-R BS.1770-4 gated integrated loudness of a whole array, in LKFS.

    Parameters
    ----------
    data : ndarray (frames, channels) or (frames,)
        Samples, full scale ±1.0, float64.
    rate_hz : float
        Sample rate in Hz, at least 8000.
    channel_weights : sequence of float, optional
        G_i per channel; default 1.0 for L, R, C and 1.41 for surrounds
        (:data:`DEFAULT_CHANNEL_WEIGHTS`).

    Returns
    -------
    float
        Loudness in LKFS; −inf for silence or less than 400 ms of audio.

    Raises
    ------
    BadParameter
        Bad shape, non-finite samples, a rate below 8 kHz, or weights that do
        not fit the channel count.

    References
    ----------
    ITU-R BS.1770-4 (2015), Annex 1, eqs. (1)-(7).
    """
    x = _as_frames(data)
    meter = LoudnessMeter(rate_hz, x.shape[1], channel_weights)
    meter.feed(x)
    return meter.result()


def gain_to_match_db(source_lkfs: float, target_lkfs: float) -> float:
    """Gain in dB that brings a programme measured at ``source_lkfs`` to ``target_lkfs``.

    Integrated loudness scales exactly with gain (the gates move with it), so
    the gain is the difference: ``target_lkfs - source_lkfs``; negative means
    turn it down.

    >>> gain_to_match_db(-18.0, -23.0)
    -5.0
    """
    for name, value in (("source_lkfs", source_lkfs), ("target_lkfs", target_lkfs)):
        if not (isinstance(value, numbers.Real) and math.isfinite(value)):
            raise BadParameter(f"{name}={value!r}: need a finite loudness; silence or under 400 ms "
                               "of audio has none, so it cannot be matched")
    return float(target_lkfs) - float(source_lkfs)
