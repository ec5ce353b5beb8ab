"""Each segment's level, and the segments' densities filed by level step: the one-pass noise search rests on it.

For the automatic search (:mod:`audition.survey.noise`) every segment gets a
*balanced level* L: the mean over the octave bands of IEC 61260-1 that are at
least 16 bins wide (from about 90 Hz at 48 kHz) of 10·log10(band power)
(:func:`balance_matrix`). Every octave weighs alike, so programme in any one
octave lifts L even where the hiss is weak (the bass of white or tape hiss);
for steady hiss L varies by about 0.2 dB (standard deviation) from segment to
segment. Segments whose windowed mean square is under :data:`SILENT_POWER`
(-200 dBFS) are digital silence.

Because each segment's density is added to the accumulator of its level step
(:data:`LEVEL_STEP_DB`), the automatic search needs only one pass: once the
floor is known, the noise PSD is the sum of the accumulators inside the window
and the programme's the sum of those above it, exactly the Welch averages over
those segments. The state is one accumulated spectrum per level step and 13
bytes per analysis segment, about 0.5 MB for an hour at 48 kHz.
"""

from __future__ import annotations

import numpy as np

from audition.survey.bands import band_centres, band_edges

#: Width of the level steps of the automatic search, dB.
LEVEL_STEP_DB = 0.25
#: Segments whose windowed mean square is below this are digital silence (-200 dBFS).
SILENT_POWER = 1e-20
#: The level step digital silence is filed under (no level reaches it).
_SILENT_STEP = int(np.iinfo(np.int32).min)


def balance_matrix(freqs_hz: np.ndarray, min_bins: int = 16) -> np.ndarray:
    """(n_bins, n_octaves) 0/1 matrix summing bins into the IEC 61260-1 octave bands used by the search.

    Only octaves at least ``min_bins`` bins wide and wholly below Nyquist are
    used, so a pure-noise segment's band powers are steady; with none, the
    whole spectrum is one band.
    """
    f = np.asarray(freqs_hz, dtype=float)
    df = f[1] - f[0]
    c = band_centres(1, max(df, 1.0), f[-1])
    lo, hi = band_edges(c, 1)
    ok = ((hi - lo) >= min_bins * df) & (hi <= f[-1])
    lo, hi = lo[ok], hi[ok]
    if lo.size == 0:
        return np.ones((f.size, 1))
    return ((f[:, None] >= lo[None, :]) & (f[:, None] < hi[None, :])).astype(np.float64)


class _LevelAccumulator:
    """Per (class, level step): the sum of the segments' densities and their count.

    The level a segment is filed under is its *balanced level*: the mean over
    octave bands (:func:`balance_matrix`) of 10·log10(band power), so every
    octave weighs alike and programme in any one octave lifts it, even where
    the hiss is weak (the bass of white or tape hiss). Its broadband level
    (10·log10 of the windowed mean square, dBFS) is kept too.
    """

    def __init__(self, freqs_hz: np.ndarray):
        self.nfreq = len(freqs_hz)
        self.df = float(freqs_hz[1] - freqs_hz[0])
        self.bands = balance_matrix(freqs_hz)
        self._row: dict = {}      # (class, step) -> row of the tables
        self._sums = np.zeros((16, self.nfreq))
        self._counts = np.zeros(16, dtype=np.int64)
        self.levels: list = []    # per batch: broadband level, float32 dBFS (-inf for silence)
        self.balanced: list = []  # per batch: balanced level, float32 dB
        self.steps: list = []     # per batch: int32 step of the balanced level (_SILENT_STEP for silence)
        self.classes: list = []   # per batch: int8 class

    @property
    def sums(self) -> dict:
        """(class, step) -> sum of the densities filed there (views into the table)."""
        return {k: self._sums[r] for k, r in self._row.items()}

    @property
    def counts(self) -> dict:
        """(class, step) -> number of segments filed there."""
        return {k: int(self._counts[r]) for k, r in self._row.items()}

    def _new_row(self, k) -> int:
        r = self._row[k] = len(self._row)
        if r == len(self._counts):  # grow the tables (doubling: amortised O(1) per key)
            self._sums = np.concatenate([self._sums, np.zeros_like(self._sums)])
            self._counts = np.concatenate([self._counts, np.zeros_like(self._counts)])
        return r

    def add(self, p: np.ndarray, cls: np.ndarray | None = None) -> None:
        power = p.sum(axis=1) * self.df
        silent = power < SILENT_POWER
        level = np.where(silent, -np.inf, 10.0 * np.log10(np.maximum(power, SILENT_POWER)))
        bal = np.mean(10.0 * np.log10(np.maximum((p @ self.bands) * self.df, 1e-30)), axis=1)
        bal = np.where(silent, -np.inf, bal)
        step = np.where(silent, _SILENT_STEP, np.floor(np.where(silent, 0.0, bal) / LEVEL_STEP_DB)).astype(np.int64)
        cls = np.zeros(len(p), dtype=np.int8) if cls is None else cls
        # A row add per segment: cheaper than any grouped numpy form for a few dozen segments.
        for i, k in enumerate(zip(cls.tolist(), step.tolist())):
            r = self._row.get(k)
            if r is None:
                r = self._new_row(k)
            self._sums[r] += p[i]
            self._counts[r] += 1
        self.levels.append(level.astype(np.float32))
        self.balanced.append(bal.astype(np.float32))
        self.steps.append(step.astype(np.int32))
        self.classes.append(cls)

    def finish(self):
        """Per segment: broadband level, balanced level (float32 dB), level step (int32), class (int8)."""
        def cat(parts, dtype):
            return np.concatenate(parts) if parts else np.zeros(0, dtype)

        return (cat(self.levels, np.float32), cat(self.balanced, np.float32), cat(self.steps, np.int32),
                cat(self.classes, np.int8))

    def mean(self, keep) -> tuple[np.ndarray, int]:
        """Mean density and count over the keys (cls, step) for which keep(cls, step) is true."""
        rows = [r for k, r in self._row.items() if keep(*k)]
        s = self._sums[rows].sum(axis=0) if rows else np.zeros(self.nfreq)
        n = int(self._counts[rows].sum()) if rows else 0
        return (s / n if n else s), n
