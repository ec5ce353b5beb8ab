"""Realise a design at the bench: standard parts for an analog circuit, or DSP coefficients.

Three targets, named as the trade names them::

    design ──► series-rlc     passive R–L–C ladder section per second-order section
           ──► sallen-key     unity-gain Sallen–Key active section per second-order section
           ──► coefficients   the digital sections in double, single and fixed-point words

Analog targets realise the low-pass sections of a design, one stage per section,
and assume the stages are buffered from each other (each stage driven from a
near-zero impedance and looking into a near-infinite one, as an op-amp follower
between stages gives). The source impedance therefore belongs to the first
stage and the load to the last. A first-order section becomes an RC section. A
rumble high-pass, if the design has one, is not realised by the analog targets
(it is listed as omitted); the coefficients target carries every section.

Where each job lives:

- :mod:`~audition.realize.parts`: IEC 60063 preferred-number series (E6 .. E96)
  and the choice of parts: :func:`realise_series_rlc`, :func:`realise_sallen_key`,
  :func:`realise`, with the combined error they minimise in its docstring.
- :mod:`~audition.realize.stages`: the circuits (series RLC, RC, Sallen–Key) and
  their f0, Q and H0 driven from a source and into a load; :class:`Stage` and
  :class:`Realisation`, the real response and the report.
- :mod:`~audition.realize.tolerance`: the Monte Carlo over part tolerances
  (:func:`monte_carlo`, :func:`tolerance_classes`).
- :mod:`~audition.realize.fixedpoint`: the coefficients in double, single, Q1.15,
  Q1.31, Q2.14 and Q2.30 (:func:`quantise`), the arithmetic's noise floor
  (:func:`rounding_noise_gain`) and the input headroom (:func:`headroom`).
- :mod:`~audition.realize.cheader`: the C header of those coefficients (:func:`c_header`).

All functions are pure: they take numbers and return numbers, arrays and small
frozen dataclasses; nothing here prints or touches a file. Every public name is
importable from ``audition.realize``.
"""

from __future__ import annotations

from audition.realize.cheader import c_header, c_identifier
from audition.realize.fixedpoint import (ARITHMETIC, COEFFICIENT_NAMES, FORMATS, NOISE_FLOOR_LIMIT_DBFS, Coefficients,
                                         FormatResult, NumberFormat, headroom, pole_radius, quantise, quantise_sos,
                                         rounding_noise_gain)
from audition.realize.parts import (ANALOG_MIN_F0_HZ, DEFAULT_IMPEDANCE_OHM, E6, E12, E24, E96, IMPEDANCE_RANGE_OHM,
                                    SERIES, check_series, ladder, nearest_preferred, realise, realise_sallen_key,
                                    realise_series_rlc)
from audition.realize.stages import (ANALOG_BAND_HZ, CAUTION, Realisation, Stage, lowpass_response, rc_lowpass,
                                     sallen_key, series_rlc)
from audition.realize.tolerance import TOLERANCE_CLASSES_PCT, Tolerance, monte_carlo, tolerance_classes

#: The targets of ``audition realize --as``: two analog circuits and the digital coefficients.
TARGETS = ("series-rlc", "sallen-key", "coefficients")

__all__ = ["ANALOG_BAND_HZ", "ANALOG_MIN_F0_HZ", "ARITHMETIC", "CAUTION", "COEFFICIENT_NAMES",
           "DEFAULT_IMPEDANCE_OHM", "E6", "E12", "E24", "E96", "FORMATS", "IMPEDANCE_RANGE_OHM",
           "NOISE_FLOOR_LIMIT_DBFS", "SERIES", "TARGETS", "TOLERANCE_CLASSES_PCT", "Coefficients", "FormatResult",
           "NumberFormat", "Realisation", "Stage", "Tolerance", "c_header", "c_identifier", "check_series",
           "headroom", "ladder", "lowpass_response", "monte_carlo", "nearest_preferred", "pole_radius", "quantise",
           "quantise_sos", "rc_lowpass", "realise", "realise_sallen_key", "realise_series_rlc",
           "rounding_noise_gain", "sallen_key", "series_rlc", "tolerance_classes"]
