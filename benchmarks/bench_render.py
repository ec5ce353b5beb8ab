"""Whole-process timings of ``audition render`` against a plain copy and the hand-scripted route.

Run from the repository root::

    python benchmarks/bench_render.py            # 30-minute file, 3 repeats, RSS on 10 and 60 minutes
    python benchmarks/bench_render.py --minutes 5 --repeats 1 --no-rss   # a quick look

It writes a synthetic 48 kHz stereo 24-bit WAV (seeded pink-ish noise plus
tones, so every bit is busy) into a temporary folder and times, each as its own
process (interpreter start-up and imports included):

* copy: soundfile reading 65,536-frame blocks and writing them, same subtype;
* render: ``python -m audition render IN OUT --f0 8000`` (defaults: dither on, sidecar);
* by hand: ``soundfile.read`` of the whole file, ``scipy.signal.sosfilt``, ``soundfile.write``.

It prints copy/render (goal >= 0.8) and hand/render (goal >= 4), the start-up
of ``audition --version`` and ``audition response``, and the peak RSS of render
on 10- and 60-minute files (goal: flat, 60-minute within 1.2x of 10-minute and
under 150 MB). Every file is read from the page cache (it was just written):
these are CPU figures, not disk ones. Times are medians of the repeats, runs
interleaved so a busy neighbour on the machine hurts all routes alike.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

from common import ROOT, compile_modules, env

RATE = 48000

COPY = """
import sys, soundfile as sf
src, dst = sys.argv[1:3]
with sf.SoundFile(src) as i, sf.SoundFile(dst, "w", i.samplerate, i.channels, i.subtype, format=i.format) as o:
    for b in i.blocks(65536):
        o.write(b)
"""

BY_HAND = """
import sys, soundfile as sf, scipy.signal as ss
src, dst = sys.argv[1:3]
x, rate = sf.read(src)
y = ss.sosfilt(ss.butter(2, 8000, fs=rate, output="sos"), x, axis=0)
sf.write(dst, y, rate, subtype=sf.info(src).subtype)
"""

# Runs a command as a child and prints the child's peak RSS (kB on Linux), as getrusage reports it.
RSS = """
import resource, subprocess, sys
subprocess.run(sys.argv[1:], check=True, stdout=subprocess.DEVNULL)
print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)
"""


def make_file(path: str, minutes: float, seed: int = 1) -> None:
    """A 48 kHz stereo PCM_24 WAV of ``minutes`` of seeded noise and tones, written in blocks."""
    import numpy as np

    sys.path.insert(0, ROOT)
    from audition.io import formats, writer

    frames = int(minutes * 60 * RATE)
    rng = np.random.default_rng(seed)
    block = formats.BLOCK_FRAMES * 4
    with writer.AtomicWriter(path, RATE, 2, format="WAV", subtype="PCM_24", dither=False,
                             frames_hint=frames) as w:
        for start in range(0, frames, block):
            n = min(block, frames - start)
            t = (start + np.arange(n)) / RATE
            tone = 0.2 * np.sin(2 * np.pi * 997.0 * t)[:, None] * [1.0, 0.7]
            w.write(tone + 0.05 * rng.standard_normal((n, 2)))


CPU_SECONDS: dict[str, list[float]] = {}


def timed(cmd, label: str | None = None) -> float:
    """Wall seconds of one child process; its CPU seconds (user + system) go to CPU_SECONDS[label]."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, env=env(), cwd=ROOT, stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if label is not None:
        cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
        CPU_SECONDS.setdefault(label, []).append(cpu)
    return wall


def load() -> str:
    """The machine's 1-minute load average (other people's work makes every wall time noisy)."""
    try:
        return f"{os.getloadavg()[0]:.2f}"
    except OSError:
        return "unknown"


def remove(*paths):
    for p in paths:
        if os.path.exists(p):
            os.remove(p)


def render_cmd(src, dst):
    return [sys.executable, "-m", "audition", "render", src, dst, "--f0", "8000"]


def peak_rss_mb(cmd) -> float:
    out = subprocess.run([sys.executable, "-c", RSS, *cmd], check=True, env=env(), cwd=ROOT,
                         capture_output=True, text=True).stdout
    return int(out.split()[-1]) / 1024.0


def verdict(ok: bool) -> str:
    return "goal met" if ok else "goal MISSED"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--minutes", type=float, default=30.0, help="length of the timed file (default 30)")
    ap.add_argument("--repeats", type=int, default=3, help="runs of each route (default 3; medians)")
    ap.add_argument("--no-hand", action="store_true", help="skip the read-all/sosfilt/write route")
    ap.add_argument("--no-rss", action="store_true", help="skip the 10- and 60-minute peak-RSS runs")
    ap.add_argument("--dir", help="work folder (default: a temporary one, removed afterwards)")
    a = ap.parse_args(argv)
    compile_modules()

    with tempfile.TemporaryDirectory(dir=a.dir) as d:
        print(f"load average at the start: {load()} on {os.cpu_count()} cpus", flush=True)
        src = os.path.join(d, "in.wav")
        print(f"writing a {a.minutes:g}-minute 48 kHz stereo PCM_24 WAV ...", flush=True)
        make_file(src, a.minutes)
        print(f"  {os.path.getsize(src) / 1e6:,.0f} MB; cpus: {os.cpu_count()}", flush=True)
        copy_out, render_out, hand_out = (os.path.join(d, n) for n in ("copy.wav", "render.wav", "hand.wav"))
        times = {"copy": [], "render": [], "hand": []}
        for i in range(a.repeats):
            remove(copy_out)
            times["copy"].append(timed([sys.executable, "-c", COPY, src, copy_out], "copy"))
            remove(render_out, render_out + ".json")
            times["render"].append(timed(render_cmd(src, render_out), "render"))
            if not a.no_hand:
                remove(hand_out)
                times["hand"].append(timed([sys.executable, "-c", BY_HAND, src, hand_out], "hand"))
            print(f"  run {i + 1}: " + ", ".join(f"{k} {v[-1]:.2f} s" for k, v in times.items() if v)
                  + f"   (load average {load()})", flush=True)
        remove(copy_out, hand_out)
        med = {k: statistics.median(v) for k, v in times.items() if v}
        audio_s = a.minutes * 60
        print()
        cpu = {k: statistics.median(v) for k, v in CPU_SECONDS.items()}
        print(f"copy (soundfile blocks)      {med['copy']:7.2f} s")
        print(f"audition render (dither on)  {med['render']:7.2f} s   ({audio_s / med['render']:,.0f}x real time)")
        r = med["copy"] / med["render"]
        print(f"copy_seconds / render_seconds = {r:.2f}   (goal >= 0.8: {verdict(r >= 0.8)})")
        if "hand" in med:
            h = med["hand"] / med["render"]
            print(f"read-all + sosfilt + write   {med['hand']:7.2f} s")
            print(f"hand_seconds / render_seconds = {h:.2f}   (goal >= 4: {verdict(h >= 4)})")
        print("CPU seconds (user + system, medians): " + ", ".join(f"{k} {v:.2f}" for k, v in cpu.items())
              + "   (the render's threads can only beat the copy's wall time on cores nobody else is using)")

        aud = [sys.executable, "-m", "audition"]
        ver = statistics.median(timed(aud + ["--version"]) for _ in range(5))
        hlp = statistics.median(timed(aud + ["--help"]) for _ in range(5))
        resp = statistics.median(timed(aud + ["response", "--f0", "8000", "--rate", "48000"]) for _ in range(3))
        print()
        print(f"start-up: audition --version {ver:.3f} s, --help {hlp:.3f} s (goal < 0.3 s: {verdict(max(ver, hlp) < 0.3)})")
        print(f"start-up: audition response --f0 8000 --rate 48000  {resp:.3f} s")

        if not a.no_rss:
            print()
            rss = {}
            for minutes in (10, 60):
                p = os.path.join(d, f"in{minutes}.wav")
                remove(src, render_out, render_out + ".json")
                make_file(p, minutes, seed=minutes)
                out = os.path.join(d, f"out{minutes}.wav")
                rss[minutes] = peak_rss_mb(render_cmd(p, out))
                print(f"peak RSS of render, {minutes}-minute file: {rss[minutes]:6.1f} MB", flush=True)
                remove(p, out, out + ".json")
            grow = rss[60] / rss[10]
            print(f"60-minute / 10-minute = {grow:.3f}   (goal <= 1.2 and < 150 MB: "
                  f"{verdict(grow <= 1.2 and rss[60] < 150)})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
