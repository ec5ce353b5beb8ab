"""Planning against surveying, side by side in one run: plan_seconds / survey_seconds (goal <= 1.5).

Run from the repository root::

    python benchmarks/bench_plan.py                  # 10-minute 48 kHz stereo 24-bit file, 3 repeats
    python benchmarks/bench_plan.py --minutes 2 --repeats 1     # a quick look

It writes a synthetic transfer with ``audition.synth`` (our own scenario: tape
hiss at -50 dBFS under a rolled-off programme, 2 s noise lead-in, seed 7) into
a temporary folder, then times in this process, interleaved so a busy
neighbour hurts both alike:

* survey: :func:`audition.pipeline.survey_path` (streaming Welch survey of the
  file with the automatic noise reference, programme estimate, crossover);
* plan: :func:`audition.pipeline.plan_path` (the same survey, then the search
  of every candidate from the surveyed spectra and the choice).

It prints the medians, the ratio plan/survey (issue 5's goal: <= 1.5, since
predictions come from the spectra and the audio is not filtered again per
candidate) and the planning step alone. The file is read from the page cache
(it was just written): CPU figures, not disk ones.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
RATE = 48000


def make_file(path: str, minutes: float, seed: int = 7) -> None:
    sys.path.insert(0, ROOT)
    from audition import synth
    from audition.io import writer

    frames = int(minutes * 60 * RATE)
    with writer.AtomicWriter(path, RATE, 2, format="WAV", subtype="PCM_24", dither=True, seed=seed,
                             frames_hint=frames) as w:
        for chunk in synth.synth_blocks(seconds=minutes * 60, rate_hz=RATE, channels=2, hiss_dbfs=-50.0,
                                        hiss="tape", lead_in_seconds=2.0, seed=seed):
            w.write(chunk.mix)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    sys.path.insert(0, ROOT)
    from audition import pipeline

    with tempfile.TemporaryDirectory(prefix="bench-plan-") as tmp:
        path = os.path.join(tmp, "transfer.wav")
        t0 = time.perf_counter()
        make_file(path, args.minutes)
        print(f"file: {args.minutes:g} min, {RATE} Hz stereo PCM_24, {os.path.getsize(path) / 1e6:.0f} MB "
              f"(written in {time.perf_counter() - t0:.1f} s)")
        pipeline.plan_path(path)  # warm-up: imports, page cache
        survey_t, plan_t, step_t = [], [], []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            pipeline.survey_path(path)
            survey_t.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            survey, pl = pipeline.plan_path(path)
            plan_t.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            pipeline.plan_survey(survey)
            step_t.append(time.perf_counter() - t0)
        s, p, k = statistics.median(survey_t), statistics.median(plan_t), statistics.median(step_t)
        print(f"survey_seconds {s:.2f}  plan_seconds {p:.2f}  (medians of {args.repeats})")
        print(f"plan_seconds / survey_seconds = {p / s:.3f}   (goal <= 1.5)")
        print(f"planning step alone: {k:.2f} s, {pl.searched} candidates; choice: "
              f"{pl.choice.label if pl.choice else 'none'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
