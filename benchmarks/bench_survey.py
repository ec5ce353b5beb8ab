"""``audition survey`` of a long file against a plain streaming read of the same file.

Run from the repository root::

    python benchmarks/bench_survey.py                  # 60-minute file, RSS also on a 10-minute one
    python benchmarks/bench_survey.py --minutes 5 --rss-minutes 1    # a quick look

It writes a 48 kHz stereo PCM_24 WAV into a temporary folder: one minute of
``audition.synth`` (programme plus tape hiss at -50 dBFS, seed 41, a 2-second
hiss-only lead-in) repeated to length, like a reel of one-minute items with
leader between them, so the automatic noise search has real work to do. Then,
each as its own process (interpreter start-up and imports included), timed from
this process:

* read: soundfile reading 65,536-frame float64 blocks and doing nothing with them;
* survey: ``python -m audition survey FILE --f0 8000 --json`` (automatic noise
  reference, Welch spectra, bands, crossover, one prediction).

It prints survey_seconds / read_seconds (goal <= 2) and the peak RSS of each
process as the kernel reports it for that child (``os.wait4``), for the full
length and for the shorter file (goal: flat, under 150 MB). The file is read
once, untimed, before the timed runs, so both timed runs read from the page
cache: these are CPU figures, not disk ones. The machine may be shared: the CPU
seconds of each child are printed beside the wall-clock ones. The temporary
files are deleted at the end (also on failure or Ctrl-C).
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time

from common import ROOT, compile_modules, env

RATE = 48000
CHANNELS = 2

READ = """
import sys, soundfile as sf
for b in sf.blocks(sys.argv[1], blocksize=65536, dtype="float64", always_2d=True):
    pass
"""


def make_file(path: str, minutes: float, seed: int = 41) -> None:
    """``minutes`` of one synthesised minute repeated, 48 kHz stereo PCM_24 (no dither: not needed here)."""
    import numpy as np
    import soundfile as sf

    sys.path.insert(0, ROOT)
    from audition import synth

    unit = synth.synthesise(seconds=60.0, rate_hz=RATE, channels=CHANNELS, hiss_dbfs=-50.0, hiss="tape",
                            lead_in_seconds=2.0, seed=seed).mix
    frames = int(round(minutes * 60 * RATE))
    with sf.SoundFile(path, "w", RATE, CHANNELS, "PCM_24", format="WAV") as f:
        done = 0
        while done < frames:
            n = min(len(unit), frames - done)
            f.write(np.ascontiguousarray(unit[:n]))
            done += n


def run_child(argv: list) -> tuple[float, float, float]:
    """Wall seconds, CPU seconds (user + system) and peak RSS in MB of one child process."""
    t0 = time.perf_counter()
    p = subprocess.Popen(argv, stdout=subprocess.DEVNULL, env=env(), cwd=ROOT)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t0
    p.returncode = os.waitstatus_to_exitcode(status)
    if p.returncode != 0:
        raise SystemExit(f"{' '.join(argv)}: exit status {p.returncode}")
    return wall, ru.ru_utime + ru.ru_stime, ru.ru_maxrss / 1024.0  # ru_maxrss is in KiB on Linux


def measure(path: str) -> dict:
    read = [sys.executable, "-c", READ, path]
    survey = [sys.executable, "-m", "audition", "survey", path, "--f0", "8000", "--json"]
    run_child(read)  # untimed: puts the file in the page cache
    out = {}
    out["read"] = run_child(read)
    out["survey"] = run_child(survey)
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--minutes", type=float, default=60.0, help="length of the timed file (default 60)")
    ap.add_argument("--rss-minutes", type=float, default=10.0, help="length of the shorter file (default 10)")
    ap.add_argument("--dir", help="folder for the temporary files (default: the system's)")
    args = ap.parse_args()
    compile_modules()

    tmp = tempfile.mkdtemp(prefix="bench-survey-", dir=args.dir)
    try:
        results = {}
        for minutes in (args.rss_minutes, args.minutes):
            path = os.path.join(tmp, f"survey-{minutes:g}min.wav")
            t0 = time.perf_counter()
            # in a child, so this process stays small: a child's peak RSS counts what it was forked from
            subprocess.run([sys.executable, "-c", f"import bench_survey as b; b.make_file({path!r}, {minutes!r})"],
                           check=True, env=dict(env(), PYTHONPATH=os.path.dirname(os.path.abspath(__file__))
                                                + os.pathsep + ROOT))
            print(f"wrote {minutes:g} min, {os.path.getsize(path) / 2**20:,.0f} MiB "
                  f"in {time.perf_counter() - t0:.1f} s", flush=True)
            results[minutes] = measure(path)
            os.unlink(path)
        print()
        print(f"{'file':>8} {'route':>7} {'wall s':>8} {'cpu s':>8} {'peak RSS MB':>12}")
        for minutes, r in results.items():
            for route in ("read", "survey"):
                wall, cpu, rss = r[route]
                print(f"{minutes:>6g} m {route:>7} {wall:8.2f} {cpu:8.2f} {rss:12.1f}")
        big, small = results[args.minutes], results[args.rss_minutes]
        print()
        print(f"survey_seconds / read_seconds ({args.minutes:g} min): "
              f"{big['survey'][0] / big['read'][0]:.2f} wall, {big['survey'][1] / big['read'][1]:.2f} cpu "
              "(goal <= 2)")
        print(f"survey peak RSS: {small['survey'][2]:.1f} MB at {args.rss_minutes:g} min, "
              f"{big['survey'][2]:.1f} MB at {args.minutes:g} min, ratio {big['survey'][2] / small['survey'][2]:.2f} "
              "(goal flat, < 150 MB)")
        print(f"read peak RSS:   {small['read'][2]:.1f} MB at {args.rss_minutes:g} min, "
              f"{big['read'][2]:.1f} MB at {args.minutes:g} min")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
