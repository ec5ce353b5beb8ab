"""Filter design: analog prototypes, alignments and their digital second-order sections.

The design is a visible pipeline of small public steps::

    alignment -> analog sections (f0, Q) -> digitise each section -> sos rows

The basic block is the second-order low-pass

.. math:: H(s) = H_0 \\frac{\\omega_0^2}{s^2 + (\\omega_0/Q)\\,s + \\omega_0^2}

flat below f0, falling 40 dB/decade above, with a resonant peak when
Q > 1/sqrt(2). A series RLC divider (output across C) is one, with
omega0 = 1/sqrt(LC) and Q = (1/R)·sqrt(L/C). Higher orders are cascades of such
sections plus one first-order section for odd orders; a rumble high-pass is the
same machinery with s^2 in the numerator.

Digitising methods
------------------
``"bilinear"`` (default)
    The bilinear transform prewarped at each section's own f0, so the digital
    magnitude and phase at f0 equal the analog ones exactly. The transform maps
    the whole analog axis onto 0..Nyquist, so toward Nyquist the digital
    response falls below the analog one (a zero at Nyquist).
``"matched"``
    M. Vicanek, "Matched Second Order Digital Filters" (2016): poles by the
    impulse-invariant map (exact analog pole positions), numerator chosen so the
    magnitude matches the analog one at DC and at f0 (low-pass) or at f0, with
    the double zero kept at DC (high-pass). Much closer to the analog magnitude
    near Nyquist; the phase is not matched.

Every design reports the largest digital-minus-analog magnitude deviation over
the audible band, so a user can choose between them.

The steps live in their own modules: :mod:`~audition.design.checks` (allowed values),
:mod:`~audition.design.analog` (sections and alignments), :mod:`~audition.design.digital`
(digitising and responses) and :mod:`~audition.design.cascade` (the :class:`Design` object
and its constructors). Every public name is importable from ``audition.design``.
"""

from __future__ import annotations

from audition.design.analog import (Section, alignment_sections, bessel_sections, chebyshev_sections,
                                    butterworth_qs)
from audition.design.cascade import Design, Figures, from_rlc, from_sections, highpass, lowpass
from audition.design.checks import (ALIGNMENTS, BUTTERWORTH_Q, KINDS, MAX_RIPPLE_DB, METHODS, MIN_RATE_HZ,
                                    check_alignment, check_f0, check_gain, check_method, check_order, check_q, check_rate,
                                    check_ripple)
from audition.design.digital import (bilinear_section, digitise, matched_section,
                                     sos_group_delay, sos_response)

__all__ = ["ALIGNMENTS", "BUTTERWORTH_Q", "KINDS", "MAX_RIPPLE_DB", "METHODS", "MIN_RATE_HZ", "chebyshev_sections", "check_ripple", "Design", "Figures", "Section",
           "alignment_sections", "bessel_sections", "bilinear_section", "butterworth_qs", "check_alignment",
           "check_f0", "check_gain", "check_method", "check_order", "check_q", "check_rate", "digitise", "from_rlc",
           "from_sections", "highpass", "lowpass", "matched_section", "sos_group_delay", "sos_response"]
