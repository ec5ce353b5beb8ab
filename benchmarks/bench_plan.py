"""Planning against surveying, side by side in one run: plan_seconds / survey_seconds (goal <= 1.5).

Run from the repository root::

    python benchmarks/bench_plan.py                  # 10-minute 48 kHz stereo 24-bit file, 3 repeats
    python benchmarks/bench_plan.py --minutes 2 --repeats 1     # a quick look

It writes a synthetic transfer with ``audition.synth`` (our own scenario: tape
hiss at -50 dBFS under a rolled-off programme, 2 s noise lead-in, seed 7) into
a temporary folder, then times, interleaved so a busy neighbour hurts both alike:

* the two commands as a technician runs them, each a whole process (interpreter
  start-up and imports included, Python's bytecode cache on):
  ``audition survey FILE --json`` (the survey, with the hiss heard at the listening
  level) and ``audition plan FILE --json`` (the same survey, then the search of every
  candidate from the surveyed frames, and the choice). Their ratio is the goal's figure
  (issue 14: the plan takes no more than 1.5 times the survey);
* in this process, after a warm-up: :func:`audition.pipeline.survey_path` (the streaming
  pass alone: Welch spectra, noise reference, crossover, no hearing model) and
  :func:`audition.pipeline.plan_path`, and the planning step alone. A stricter ratio, shown
  beside the goal's: everything the plan adds to the bare pass.

The file is read from the page cache (it was just written): CPU figures, not disk ones.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from common import ROOT, compile_modules, env  # noqa: E402

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


def run_command(command: str, path: str) -> float:
    """Wall seconds of ``audition COMMAND FILE --json`` as a whole process."""
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "audition", command, path, "--json"], env=env(), cwd=ROOT, check=True,
                   stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


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
        compile_modules()
        cmd_survey, cmd_plan = [], []
        for _ in range(args.repeats):
            cmd_survey.append(run_command("survey", path))
            cmd_plan.append(run_command("plan", path))
        cs, cp = statistics.median(cmd_survey), statistics.median(cmd_plan)
        print(f"commands: audition survey {cs:.2f} s, audition plan {cp:.2f} s (medians of {args.repeats})")
        print(f"plan / survey as commands = {cp / cs:.3f}   (goal <= 1.5)")
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
        print(f"in this process: survey pass {s:.2f} s, plan {p:.2f} s (medians of {args.repeats})")
        print(f"plan / bare survey pass = {p / s:.3f}   (stricter: no hearing model in the survey)")
        print(f"planning step alone: {k:.2f} s, {pl.searched} candidates; choice: "
              f"{pl.choice.label if pl.choice else 'none'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
