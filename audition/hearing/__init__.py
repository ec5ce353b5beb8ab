"""The hearing model: what a listener hears of a sound, from its one-third-octave band levels.

- :mod:`~audition.hearing.threshold`: threshold of hearing in quiet (Terhardt 1979) and
  critical-band rate (Zwicker and Terhardt 1980), as closed formulas.
- :mod:`~audition.hearing.zwicker`: loudness of stationary sounds, ISO 532-1:2017 (the
  Zwicker method), vectorised over many spectra at once.
- :mod:`~audition.hearing.heard`: the hiss heard over a programme, from the masking slopes of
  ISO 532-1: the loudness the hiss adds and, band by band, whether it is audible.

Pure numpy: arrays in, arrays and small frozen dataclasses out.
"""

from audition.hearing.heard import Heard, hiss_heard
from audition.hearing.threshold import bark, threshold_db_spl
from audition.hearing.zwicker import BARK_GRID, THIRD_OCTAVE_HZ, loudness

__all__ = ["BARK_GRID", "THIRD_OCTAVE_HZ", "Heard", "bark", "hiss_heard", "loudness", "threshold_db_spl"]
