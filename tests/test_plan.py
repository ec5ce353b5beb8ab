"""The planner judged by what is heard: its search space, its figures and its choices."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from audition.plan import shapes


# --- the search space --------------------------------------------------------------------------------------


@pytest.mark.parametrize("rate_hz", [44100.0, 48000.0])
def test_power_grid_is_the_digital_response_of_every_shape(rate_hz):
    # Every shape at every f0 against its built design's sections through scipy.signal.sosfreqz (reference
    # library): the closed form of the module notes must be the digitised response, bilinear method.
    sh = shapes.shapes()
    f0s = shapes.f0_grid(rate_hz)[::13]
    f = np.geomspace(20.0, rate_hz / 2 * 0.999, 400)
    grid = shapes.power_grid(sh, f0s, f, rate_hz)
    for i, s in enumerate(sh):
        for j, f0 in enumerate(f0s):
            d = s.design(float(f0), rate_hz)
            _, h = scipy.signal.sosfreqz(d.sos, worN=f, fs=rate_hz)
            ref = np.abs(h) ** 2
            live = ref > 1e-12
            np.testing.assert_allclose(grid[i, j][live], ref[live], rtol=1e-7, err_msg=s.label)


def test_search_space_covers_orders_one_to_eight_and_free_cascades():
    sh = shapes.shapes()
    assert sorted({s.order for s in sh}) == list(range(1, 9))
    kinds = {(s.alignment, s.free) for s in sh}
    for alignment in ("butterworth", "bessel", "linkwitz-riley", "chebyshev"):
        assert (alignment, False) in kinds
    assert (None, True) in kinds
    with pytest.raises(Exception, match="outside 1..8"):
        shapes.shapes((9,))


def test_shape_peak_is_the_analog_maximum():
    # A second-order section peaks by Q/sqrt(1 - 1/(4Q²)) for Q > 1/sqrt(2) (handbook formula for the
    # resonant low-pass: |H|max = Q / sqrt(1 - 1/(4 Q^2))).
    for q in (0.8, 1.0, 1.2, 2.0):
        s = shapes.Shape(2, ((1.0, q),), q=q)
        assert s.peak_db() == pytest.approx(20 * math.log10(q / math.sqrt(1 - 1 / (4 * q * q))), abs=1e-3)
    assert shapes.Shape(2, ((1.0, 0.5),), q=0.5).peak_db() == pytest.approx(0.0, abs=1e-9)
