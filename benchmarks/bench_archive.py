"""Carrying an archive file's metadata into a long output, against a plain read of the same file.

Run from the repository root::

    python benchmarks/bench_archive.py                    # 60 minutes, 96 kHz stereo 24-bit
    python benchmarks/bench_archive.py --minutes 5 --repeats 1   # a quick look

What it times is the step :class:`audition.io.archive.Carry` adds after libsndfile has
written the processed audio, on files as long as a transfer gets:

* FLAC: ``audition.io.archive.flac.rebuild``: the input's metadata blocks put into the
  file libsndfile wrote (mutagen, in place) and the seek table rebuilt on its frames
  (``seek_points``: windows of at most 1 MiB, never the whole file);
* BWF: ``audition.io.archive.wave.rebuild``: a new file of the input's chunks (bext with a
  coding-history line, iXML, cue) around the audio libsndfile wrote, copied by
  ``copy_file_range`` (or 4 MiB blocks where the kernel has no such copy).

Each beside a plain read of the same file (1 MiB ``readinto`` until the end, doing
nothing); the BWF also beside a plain copy of it (``shutil.copyfile``, the kernel's copy),
since its rebuild writes a whole new file; and a process that only imports what the rebuild imports (numpy, mutagen,
audition.io.archive), so the peak RSS of the interpreter and its libraries is seen
apart from what the rebuild itself holds. Every route is its own process, timed from
this one; peak RSS is the kernel's figure for that child (``os.wait4``). The files are
read once, untimed, before the timed runs, so all routes read from the page cache: CPU
and memory figures, not disk ones. The routes run interleaved ``--repeats`` times and
the medians are printed with ratios. The temporary files (about 4.5 times the WAV size
of the length asked for) are deleted at the end, also on failure or Ctrl-C.

The audio is a seeded random walk (a dark, programme-like spectrum that FLAC compresses
to roughly 60 % of the PCM size), 96 kHz stereo PCM_24.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time

from common import ROOT, compile_modules, env

RATE = 96000
CHANNELS = 2
SPACING = RATE * 10  # the input's seek points: every 10 s

COPY = """
import shutil, sys
shutil.copyfile(sys.argv[1], sys.argv[2])
"""

READ = """
import sys
buf = bytearray(1 << 20)
with open(sys.argv[1], "rb", buffering=0) as f:
    while f.readinto(buf):
        pass
"""

IMPORTS = """
import numpy, mutagen.flac
import audition.io.archive.flac, audition.io.archive.wave, audition.io.archive.riff
"""

FLAC_REBUILD = """
import sys
from audition.io.archive import flac
fates, fmt = flac.rebuild(sys.argv[1], sys.argv[2], "audition bench;low-pass 1 section f0 9000 Hz")
assert fmt["frames"] > 0
"""

WAVE_REBUILD = """
import os, sys
from audition.io.archive import wave
src, tmp, new = sys.argv[1:4]
tfd = os.open(tmp, os.O_RDONLY)
nfd = os.open(new, os.O_RDWR | os.O_CREAT | os.O_TRUNC, 0o644)
fates, fmt, used = wave.rebuild(src, tfd, tmp, nfd, frames=int(sys.argv[4]),
                                coding_line="A=PCM,F=96000,W=24,M=stereo,T=audition bench\\r\\n",
                                true_peak_dbtp=None)
assert used
os.close(tfd)
os.close(nfd)
"""


def _blocks(minutes: float, seed: int = 5):
    """10-second blocks of a seeded random walk (float64, frames x channels), ``minutes`` long in all."""
    import numpy as np

    rng = np.random.default_rng(seed)
    frames = int(round(minutes * 60 * RATE))
    done = 0
    while done < frames:
        n = min(RATE * 10, frames - done)
        x = np.cumsum(rng.standard_normal((n, CHANNELS)) * 1e-3, axis=0)
        yield np.clip(x - x.mean(axis=0), -0.99, 0.99)
        done += n


def make_flac(folder: str, minutes: float) -> tuple[str, str]:
    """``(input, libsndfile's output)``: the output as soundfile writes it; the input the same audio with
    Vorbis comments, a picture and a seek table (mutagen), as an archive's FLAC has them."""
    import soundfile as sf
    from mutagen.flac import FLAC, Picture, SeekPoint, SeekTable

    out = os.path.join(folder, "written.flac")
    with sf.SoundFile(out, "w", RATE, CHANNELS, "PCM_24", format="FLAC") as f:
        for x in _blocks(minutes):
            f.write(x)
    src = os.path.join(folder, "input.flac")
    shutil.copyfile(out, src)
    f = FLAC(src)
    f.tags.vendor = "a transfer station 2.1"
    for kv in [("TITLE", "Reel 12"), ("ARTIST", "A"), ("ARTIST", "B"), ("Comment", "transfer 1, no processing")]:
        f.tags.append(kv)
    pic = Picture()
    pic.type, pic.mime, pic.data = 3, "image/png", bytes(4096)
    f.add_picture(pic)
    table = SeekTable(None)
    table.seekpoints = [SeekPoint(k * SPACING, 0, 4096) for k in range(2)]  # the spacing is what counts
    f.metadata_blocks.append(table)
    f.save()
    return src, out


def make_bwf(folder: str, minutes: float) -> tuple[str, str, int]:
    """``(input, libsndfile's output, frames)``: a plain WAV as soundfile writes it, and a BWF of the same audio
    with bext, iXML and cue chunks (built with audition.io.archive.riff; the audio copied by range)."""
    import struct

    import soundfile as sf

    from audition.io.archive.riff import Piece, read_layout, read_payload, write_file

    out = os.path.join(folder, "written.wav")
    with sf.SoundFile(out, "w", RATE, CHANNELS, "PCM_24", format="WAV") as f:
        for x in _blocks(minutes):
            f.write(x)
    lay = read_layout(out)
    fmt, data = lay.first(b"fmt "), lay.first(b"data")
    frames = data.size // (3 * CHANNELS)
    bext = (b"Reel 12".ljust(256, b"\0") + b"Archive".ljust(32, b"\0") + b"REF-1".ljust(32, b"\0")
            + b"2024:05:0112:00:00" + struct.pack("<IIH", 0, 0, 2) + bytes(64) + bytes(190)
            + b"A=ANALOGUE,M=stereo,T=tape\r\nA=PCM,F=96000,W=24,M=stereo,T=transfer 1\r\n")
    cue = struct.pack("<I", 1) + struct.pack("<II4sIII", 1, 0, b"data", 0, 0, frames // 2)
    src = os.path.join(folder, "input.wav")
    fd_in, fd_out = os.open(out, os.O_RDONLY), os.open(src, os.O_RDWR | os.O_CREAT | os.O_TRUNC, 0o644)
    try:
        pieces = [Piece(b"fmt ", read_payload(out, fmt)), Piece(b"bext", bext),
                  Piece(b"iXML", b"<BWFXML><PROJECT>bench</PROJECT></BWFXML>"), Piece(b"cue ", cue),
                  Piece(b"data", source=(fd_in, data.data_offset, data.size))]
        write_file(fd_out, b"RIFF", pieces, frames)
    finally:
        os.close(fd_in)
        os.close(fd_out)
    return src, out, frames


def run_child(argv: list) -> tuple[float, float, float]:
    """Wall seconds, CPU seconds (user + system) and peak RSS in MB of one child process."""
    t0 = time.perf_counter()
    p = subprocess.Popen(argv, stdout=subprocess.DEVNULL, env=env(), cwd=ROOT)
    _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t0
    code = os.waitstatus_to_exitcode(status)
    if code != 0:
        raise SystemExit(f"{' '.join(argv[:3])}...: exit status {code}")
    return wall, ru.ru_utime + ru.ru_stime, ru.ru_maxrss / 1024.0  # ru_maxrss is in KiB on Linux


def _make(folder: str, minutes: float) -> dict:
    """Both pairs of files, made in a child (this process stays small: a child's peak RSS counts what it was
    forked from)."""
    code = (f"import json, bench_archive as b; f = b.make_flac({folder!r}, {minutes!r}); "
            f"w = b.make_bwf({folder!r}, {minutes!r}); print(json.dumps([f, w]))")
    e = dict(env(), PYTHONPATH=os.path.dirname(os.path.abspath(__file__)) + os.pathsep + env()["PYTHONPATH"])
    r = subprocess.run([sys.executable, "-c", code], check=True, env=e, capture_output=True, text=True)
    import json

    (fsrc, fout), (wsrc, wout, frames) = json.loads(r.stdout.strip().splitlines()[-1])
    return {"flac_src": fsrc, "flac_out": fout, "wav_src": wsrc, "wav_out": wout, "frames": frames}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--minutes", type=float, default=60.0, help="length of the files (default 60)")
    ap.add_argument("--repeats", type=int, default=3, help="interleaved runs of every route (default 3)")
    ap.add_argument("--dir", help="folder for the temporary files (default: the system's)")
    args = ap.parse_args()
    compile_modules()

    tmp = tempfile.mkdtemp(prefix="bench-archive-", dir=args.dir)
    try:
        t0 = time.perf_counter()
        f = _make(tmp, args.minutes)
        sizes = {k: os.path.getsize(f[k]) / 2**20 for k in ("flac_src", "wav_src")}
        print(f"wrote {args.minutes:g} min at {RATE} Hz, {CHANNELS} channels, 24 bit: FLAC {sizes['flac_src']:,.0f} "
              f"MiB, BWF {sizes['wav_src']:,.0f} MiB in {time.perf_counter() - t0:.1f} s", flush=True)
        py = sys.executable
        work = os.path.join(tmp, "work.flac")
        new = os.path.join(tmp, "rebuilt.wav")
        for p in (f["flac_src"], f["flac_out"], f["wav_src"], f["wav_out"]):
            run_child([py, "-c", READ, p])  # untimed: into the page cache
        routes = {
            "imports only": lambda: run_child([py, "-c", IMPORTS]),
            "FLAC read": lambda: run_child([py, "-c", READ, f["flac_out"]]),
            "FLAC rebuild": lambda: run_child([py, "-c", FLAC_REBUILD, f["flac_src"], work]),
            "BWF read": lambda: run_child([py, "-c", READ, f["wav_src"]]),
            "BWF copy": lambda: run_child([py, "-c", COPY, f["wav_src"], new]),
            "BWF rebuild": lambda: run_child([py, "-c", WAVE_REBUILD, f["wav_src"], f["wav_out"], new,
                                              str(f["frames"])]),
        }
        got = {k: [] for k in routes}
        for _ in range(max(1, args.repeats)):
            for name, run in routes.items():
                if name == "FLAC rebuild":
                    shutil.copyfile(f["flac_out"], work)  # rebuilt in place: a fresh copy each time, untimed
                got[name].append(run())
                if name in ("BWF rebuild", "BWF copy"):
                    os.unlink(new)
        med = {k: tuple(statistics.median(r[i] for r in v) if i < 2 else max(r[i] for r in v) for i in range(3))
               for k, v in got.items()}
        print()
        print(f"{'route':>14} {'wall s':>8} {'cpu s':>8} {'peak RSS MB':>12}   (medians of {args.repeats}; RSS max)")
        for name, (wall, cpu, rss) in med.items():
            print(f"{name:>14} {wall:8.2f} {cpu:8.2f} {rss:12.1f}")
        print()
        for kind in ("FLAC", "BWF"):
            rb, rd = med[f"{kind} rebuild"], med[f"{kind} read"]
            print(f"{kind}: rebuild / read  wall {rb[0] / rd[0]:.2f}, cpu {rb[1] / rd[1]:.2f}, peak RSS "
                  f"{rb[2] / rd[2]:.2f} ({rb[2]:.1f} / {rd[2]:.1f} MB; imports alone {med['imports only'][2]:.1f} MB)")
        rb, cp = med["BWF rebuild"], med["BWF copy"]
        print(f"BWF: rebuild / copy  wall {rb[0] / cp[0]:.2f}, cpu {rb[1] / cp[1]:.2f}, peak RSS {rb[2] / cp[2]:.2f}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
