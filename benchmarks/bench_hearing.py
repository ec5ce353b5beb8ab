"""The hearing model on many columns at once (goal: ISO 532-1 loudness of 28 x 20,000 well under 0.2 s).

Run from the repository root::

    python benchmarks/bench_hearing.py                      # 20,000 columns, 15 repeats
    python benchmarks/bench_hearing.py --columns 2000 --repeats 5

It makes programme-like one-third-octave spectra (seeded: a level of 30-80 dB SPL, a treble
tilt, a random walk across the bands), then times, interleaved so a busy neighbour hurts all
alike:

* ``loudness``: :func:`audition.hearing.zwicker.loudness` on the (28, n) array, total and
  the 240-point specific loudness;
* ``hiss_heard``: :func:`audition.hearing.heard.hiss_heard` of one hiss spectrum under the n
  programme columns (three loudness evaluations side by side, the pattern at 28 points only);
* ``mosqito`` (when installed, the `test` extra): the same loudness by the reference
  library's vectorised core and slope steps, for scale, on the first 2,000 columns only.

It prints the medians and the minimum of each, in milliseconds.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def spectra(columns: int, seed: int = 532):
    import numpy as np

    from audition.hearing import THIRD_OCTAVE_HZ

    rng = np.random.default_rng(seed)
    octaves = np.log2(THIRD_OCTAVE_HZ / 1000.0)[:, None]
    return (rng.uniform(30.0, 80.0, columns) + rng.uniform(-6.0, 0.0, columns) * np.maximum(octaves, 0.0)
            + np.cumsum(rng.normal(0.0, 2.0, (28, columns)), axis=0))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--columns", type=int, default=20000)
    ap.add_argument("--repeats", type=int, default=15)
    args = ap.parse_args()
    sys.path.insert(0, ROOT)
    import numpy as np

    from audition.hearing import THIRD_OCTAVE_HZ, hiss_heard, loudness

    levels = spectra(args.columns)
    hiss = 35.0 - np.log2(THIRD_OCTAVE_HZ / 1000.0)
    routes = {
        "loudness": lambda: loudness(levels),
        "hiss_heard": lambda: hiss_heard(levels, hiss),
    }
    try:
        from mosqito.sq_metrics.loudness.loudness_zwst._calc_slopes import _calc_slopes
        from mosqito.sq_metrics.loudness.loudness_zwst._main_loudness import (
            _main_loudness,
        )
    except ImportError:
        pass
    else:
        few = levels[:, :2000].copy()
        routes["mosqito (2,000 columns)"] = lambda: _calc_slopes(_main_loudness(few.copy(), "free"))
    times = {name: [] for name in routes}
    for route in routes.values():
        route()  # warm up
    for _ in range(args.repeats):
        for name, route in routes.items():
            t0 = time.perf_counter()
            route()
            times[name].append(time.perf_counter() - t0)
    print(f"{args.columns} columns of 28 one-third-octave levels, {args.repeats} repeats, interleaved")
    for name, ts in times.items():
        print(f"  {name:26s} median {1e3 * statistics.median(ts):8.1f} ms   min {1e3 * min(ts):8.1f} ms")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
