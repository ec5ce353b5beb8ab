"""Whole-process timings of ``audition batch`` with 2 workers against 1, and against a single-file render.

Run from the repository root::

    python benchmarks/bench_batch.py                 # 8 one-minute clips, 1 repeat, both modes
    python benchmarks/bench_batch.py --repeats 3     # medians of 3
    python benchmarks/bench_batch.py --clips 4 --seconds 20 --mode render   # a quicker look

It writes ``--clips`` synthetic 44.1 kHz stereo 24-bit WAV clips of
``--seconds`` each (seeded noise plus tones: every bit busy) into a temporary
folder, then times, each as its own process (interpreter start-up and imports
included, as a user would see them):

* render: ``python -m audition render`` of one clip (the single-file route);
* batch, 1 worker: ``python -m audition batch SRC OUT --workers 1``;
* batch, 2 workers: the same with ``--workers 2``;
* the fixed cost of a batch (start-up, imports, worker processes, report): a batch of one 2-second clip.

All with ``--f0 8000`` and defaults (TPDF dither, sidecar). The batches run
twice over: "render only" (``--no-figures``: the same work per clip as the
single-file render) and "with figures" (``--noise-span 0:1``: each clip is
also surveyed before and measured after, the batch's default work). For each
it prints the speed-up of 2 workers over 1 (goal >= 1.7 on 2 cores), whole
process and with the fixed cost taken off, and the throughput in audio-seconds
per wall-second against the single-file render. Times are medians of the
repeats, the routes interleaved, so a busy neighbour on a shared machine hurts
all alike. The files are read from the page cache (just written): these are
CPU figures, not disk ones.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time

from common import ROOT, compile_modules, env

RATE = 44100


def make_clip(path: str, seconds: float, seed: int) -> None:
    """A 44.1 kHz stereo PCM_24 WAV of seeded noise and tones."""
    import numpy as np

    sys.path.insert(0, ROOT)
    from audition.io import writer

    frames = int(seconds * RATE)
    rng = np.random.default_rng(seed)
    t = np.arange(frames) / RATE
    x = 0.2 * rng.standard_normal((frames, 2)) + 0.3 * np.sin(2 * np.pi * np.outer(t, [220.0 + seed, 330.0]))
    writer.write_clip(path, x, RATE, subtype="PCM_24", dither=False)


def timed(cmd) -> float:
    t0 = time.perf_counter()
    r = subprocess.run(cmd, env=env(), cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        sys.exit(f"failed ({r.returncode}): {' '.join(cmd)}\n{r.stderr}")
    return wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--clips", type=int, default=8)
    ap.add_argument("--seconds", type=float, default=60.0, help="length of each clip (default 60)")
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--mode", choices=("both", "render", "with"), default="both",
                    help="batches render only (--no-figures), with figures (survey, prediction, measurement), "
                         "or both (default)")
    a = ap.parse_args()
    compile_modules()
    py = [sys.executable, "-m", "audition"]
    with tempfile.TemporaryDirectory(prefix="bench-batch-") as tmp:
        src = os.path.join(tmp, "src")
        os.makedirs(src)
        for i in range(a.clips):
            make_clip(os.path.join(src, f"clip{i:02d}.wav"), a.seconds, seed=100 + i)
        total_audio = a.clips * a.seconds
        tiny = os.path.join(tmp, "tiny")
        os.makedirs(tiny)
        make_clip(os.path.join(tiny, "one.wav"), 2.0, seed=99)
        modes = {"render only": ["--no-figures"], "with figures": ["--noise-span", "0:1"]}
        if a.mode != "both":
            modes = {k: v for k, v in modes.items() if k.startswith(a.mode)}
        times: dict = {"render": []}
        for rep in range(a.repeats):
            out = os.path.join(tmp, f"r{rep}.wav")
            times["render"].append(timed(py + ["render", os.path.join(src, "clip00.wav"), out, "--f0", "8000",
                                               "--quiet"]))
            for m, opts in modes.items():
                for w in (1, 2):
                    tag = f"{m}-{w}-{rep}".replace(" ", "_")
                    # the fixed cost (start-up, imports, worker processes, report): a batch of one 2 s clip
                    times.setdefault((m, "start", w), []).append(
                        timed(py + ["batch", tiny, os.path.join(tmp, "t-" + tag), "--workers", str(w), "--f0",
                                    "8000", "--quiet"] + opts))
                    times.setdefault((m, "batch", w), []).append(
                        timed(py + ["batch", src, os.path.join(tmp, "b-" + tag), "--workers", str(w), "--f0",
                                    "8000", "--quiet"] + opts))
        med = {k: statistics.median(v) for k, v in times.items()}
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"{a.clips} clips x {a.seconds:g} s (44.1 kHz stereo PCM_24), {cores} core(s), median of {a.repeats} "
          f"(load average {load:.1f} at the end)")
    render_thr = a.seconds / med["render"]
    print(f"  single-file render (no figures)        {med['render']:7.2f} s  {render_thr:7.1f} audio-s per wall-s")
    for m in modes:
        b1, b2 = med[(m, "batch", 1)], med[(m, "batch", 2)]
        s1, s2 = med[(m, "start", 1)], med[(m, "start", 2)]
        print(f"  batch {m}:")
        print(f"    1 worker   {b1:7.2f} s  {total_audio / b1:7.1f} audio-s per wall-s   (fixed cost {s1:.2f} s)")
        print(f"    2 workers  {b2:7.2f} s  {total_audio / b2:7.1f} audio-s per wall-s   (fixed cost {s2:.2f} s)")
        net = (b1 - s1) / (b2 - s2) if b2 > s2 else float("nan")
        print(f"    speed-up 2 workers / 1 worker: {b1 / b2:.2f} whole process (goal >= 1.7), "
              f"{net:.2f} with the fixed cost taken off")
        print(f"    throughput, 2 workers / single-file render: {(total_audio / b2) / render_thr:.2f}")


if __name__ == "__main__":
    main()
