"""Fault injection: signals and concurrent writers against real audition processes, many times over.

Four runs, each repeated (``--repeats``, at least 20 for issue 16's figures):

- ``batch-sigint``: a batch of clips with two workers in its own session, SIGINT to the
  whole process group at a random moment (as Ctrl-C at a terminal);
- ``batch-sigkill-main``: the same batch, SIGKILL to the main process alone (its workers
  must stop by themselves: parent-death signal or parent watch);
- ``render-sigterm``: one long render, SIGTERM at a random moment (as ``kill PID``);
- ``render-concurrent``: two renders to one output, started together, without --overwrite.

After each run it checks: every output in place is whole (its frames are the input's, its
bytes hash to the SHA-256 its sidecar records, no output without its sidecar); no ``.part``
file is left; no process of the run outlives it; a signal is never lost (a run that was
signalled exits 128 + the signal's number, or 0 only when everything was finished and
committed); no traceback text on stderr; of two concurrent renders exactly one writes. A
SIGINT in the first few milliseconds, while CPython itself starts (its ``site`` module), ends
the interpreter with CPython's own "Fatal Python error: init_import_site" and exit 1 before any
line of audition runs: nothing is written, and such runs are counted apart.

Usage::

    python benchmarks/faults.py --repeats 20 [--seed 1] [--json]

Random moments come from ``random.Random(seed)``, spread over 2-95 % of the time one
unsignalled run of the same command takes on this machine (timed first), so that most signals
land while the work runs and some during start-up; the clips are seeded noise.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from collections import Counter

import numpy as np
import soundfile as sf

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from common import ROOT, env  # noqa: E402

RATE = 44100


def clip(path, seconds, seed):
    x = np.random.default_rng(seed).standard_normal((int(seconds * RATE), 2)) * 0.1
    sf.write(path, x, RATE, subtype="PCM_16")


def audition(*args, group=True):
    return subprocess.Popen([sys.executable, "-m", "audition", *map(str, args)], env=env(), cwd=ROOT,
                            start_new_session=group, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def sha256(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(1 << 20):
            h.update(chunk)
    return h.hexdigest()


def processes_naming(text):
    """Pids of living processes whose command line holds ``text`` (a run's own folder: its workers too)."""
    found = []
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/cmdline", "rb") as fh:
                cmd = fh.read().decode(errors="replace")
            with open(f"/proc/{d}/stat") as fh:
                state = fh.read().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if text in cmd and state != "Z":
            found.append(int(d))
    return found


def check_outputs(folder, inputs):
    """Problems of the outputs in ``folder``: (truncated or unmatched outputs, leftover .part files)."""
    bad, parts = [], []
    for root, _, files in os.walk(folder):
        for n in files:
            p = os.path.join(root, n)
            if n.endswith(".part"):
                parts.append(p)
            elif n.endswith(".wav"):
                side = p + ".json"
                if not os.path.exists(side):
                    bad.append(f"{n}: no sidecar")
                    continue
                rec = json.load(open(side))
                frames = sf.info(p).frames
                want = inputs.get(n)
                if frames != want or rec["output"]["frames"] != want:
                    bad.append(f"{n}: {frames} frames of {want}")
                elif rec["output"].get("sha256") not in (None, sha256(p)):
                    bad.append(f"{n}: bytes differ from the sidecar's SHA-256")
    return bad, parts


#: What CPython prints when a signal stops it while it starts (init_import_site, init_sys_streams...).
CPYTHON_START_FAILED = b"Fatal Python error: init_"


def in_startup(proc, err):
    """Stopped by SIGINT while CPython itself was starting (its site module, before any line of audition ran).

    CPython then prints "Fatal Python error: init_import_site" (or init_sys_streams) with its own
    traceback and exits 1; nothing of audition's ran, so nothing was written. Counted apart.
    """
    return proc.returncode == 1 and CPYTHON_START_FAILED in err


def ours(err):
    """Traceback text on stderr that is not CPython's own start-up failure (see in_startup)."""
    return (b"Traceback" in err or b"Exception ignored" in err) and CPYTHON_START_FAILED not in err


def wait_gone(text, deadline=60.0):
    end = time.monotonic() + deadline
    while time.monotonic() < end:
        left = processes_naming(text)
        if not left:
            return []
        time.sleep(0.05)
    return processes_naming(text)


BATCH = ("batch", "{src}", "{out}", "--preset", "cassette-ferric", "--no-figures", "--workers", "2", "--quiet")
RENDER = ("render", "{src}", "{out}", "--f0", "8000", "--quiet")


def command(template, src, out):
    return [a.format(src=src, out=out) for a in template]


def time_whole_run(work, template, src, out):
    """Seconds one unsignalled run takes here: the random moments are spread over it."""
    t = time.monotonic()
    proc = audition(*command(template, src, os.path.join(work, out)))
    proc.communicate(timeout=600)
    if proc.returncode != 0:
        raise SystemExit(f"faults: the unsignalled {template[0]} exited {proc.returncode}")
    return time.monotonic() - t


def one_batch(work, src, inputs, rng, how, span):
    out = os.path.join(work, "out")
    proc = audition(*command(BATCH, src, out))
    delay = rng.uniform(0.02, 0.95) * span  # from the lazy imports to the last clip
    time.sleep(delay)
    alive = proc.poll() is None
    if alive:
        if how == "sigint":
            os.killpg(proc.pid, signal.SIGINT)
        else:
            os.kill(proc.pid, signal.SIGKILL)
    _, err = proc.communicate(timeout=300)
    orphans = wait_gone(out)
    for pid in orphans:  # do not leave them for the next run
        os.kill(pid, signal.SIGKILL)
    bad, parts = check_outputs(out, inputs)
    if how == "sigkill":
        # SIGKILL cannot be cleaned up after by the main process; its workers clean up their own
        lost = False
    else:
        rep = os.path.join(out, "batch-report.json")
        finished = proc.returncode == 0 and os.path.exists(rep) and \
            json.load(open(rep))["summary"]["counts"]["done"] == len(inputs)
        # -SIGINT: stopped by Python's own handler before audition's was in place (nothing written yet)
        lost = alive and not (proc.returncode in (130, -signal.SIGINT) or finished or in_startup(proc, err))
    return dict(delay_s=round(delay, 3), signalled=alive, rc=proc.returncode, bad=bad, parts=parts,
                orphans=orphans, lost=lost, startup=in_startup(proc, err), traceback=ours(err))


def one_render(work, src, frames, rng, span):
    out = os.path.join(work, "o.wav")
    proc = audition(*command(RENDER, src, out))
    delay = rng.uniform(0.02, 0.95) * span
    time.sleep(delay)
    alive = proc.poll() is None
    if alive:
        os.killpg(proc.pid, signal.SIGTERM)
    _, err = proc.communicate(timeout=300)
    orphans = wait_gone(work)
    bad, parts = check_outputs(work, {"o.wav": frames})
    finished = proc.returncode == 0 and os.path.exists(out)
    # -SIGTERM: killed by the default action before audition's handler was in place (nothing written yet)
    lost = alive and not (proc.returncode in (143, -signal.SIGTERM) or finished)
    return dict(delay_s=round(delay, 3), signalled=alive, rc=proc.returncode, bad=bad, parts=parts,
                orphans=orphans, lost=lost, startup=in_startup(proc, err), traceback=ours(err))


def one_concurrent(work, src, frames):
    out = os.path.join(work, "o.wav")
    procs = [audition(*command(RENDER, src, out), group=False) for _ in range(2)]
    rcs, errs = [], []
    for p in procs:
        _, e = p.communicate(timeout=300)
        rcs.append(p.returncode)
        errs.append(e)
    bad, parts = check_outputs(work, {"o.wav": frames})
    one_wrote = sorted(rcs) == [0, 2]
    return dict(rc=rcs, bad=bad, parts=parts, orphans=wait_gone(work), lost=False, one_wrote=one_wrote,
                traceback=any(b"Traceback" in e for e in errs))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeats", type=int, default=20)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--clips", type=int, default=10)
    ap.add_argument("--clip-seconds", type=float, default=30.0)
    ap.add_argument("--json", action="store_true")
    a = ap.parse_args(argv)
    rng = random.Random(a.seed)
    base = tempfile.mkdtemp(prefix="audition-faults-")
    results = {}
    try:
        src = os.path.join(base, "src")
        os.makedirs(src)
        inputs = {}
        for i in range(a.clips):
            n = f"c{i:02d}.wav"
            clip(os.path.join(src, n), a.clip_seconds, 100 + i)
            inputs[n] = int(a.clip_seconds * RATE)
        long_in = os.path.join(base, "long.wav")
        clip(long_in, 300.0, 7)
        short_in = os.path.join(base, "short.wav")
        clip(short_in, 10.0, 8)
        calib = os.path.join(base, "calibration")
        os.makedirs(calib)
        batch_s = time_whole_run(calib, BATCH, src, "out")
        render_s = time_whole_run(calib, RENDER, long_in, "o.wav")
        shutil.rmtree(calib)
        if not a.json:
            print(f"unsignalled runs here: batch {batch_s:.2f} s, render {render_s:.2f} s; signals land at "
                  "2-95 % of that", flush=True)
        runs = {
            "batch-sigint": lambda w: one_batch(w, src, inputs, rng, "sigint", batch_s),
            "batch-sigkill-main": lambda w: one_batch(w, src, inputs, rng, "sigkill", batch_s),
            "render-sigterm": lambda w: one_render(w, long_in, 300 * RATE, rng, render_s),
            "render-concurrent": lambda w: one_concurrent(w, short_in, 10 * RATE),
        }
        for name, run in runs.items():
            rows = []
            for k in range(a.repeats):
                work = os.path.join(base, f"{name}-{k}")
                os.makedirs(work)
                rows.append(run(work))
                shutil.rmtree(work, ignore_errors=True)
            results[name] = {
                "runs": len(rows),
                "signalled": sum(r.get("signalled", True) for r in rows),
                "exit_codes": dict(sorted(Counter(str(r["rc"]) for r in rows).items())),
                "truncated_or_unmatched_outputs": sum(len(r["bad"]) for r in rows),
                "part_files_left": sum(len(r["parts"]) for r in rows),
                "orphan_processes": sum(len(r["orphans"]) for r in rows),
                "lost_signals": sum(bool(r["lost"]) for r in rows),
                "stopped_in_interpreter_startup": sum(bool(r.get("startup")) for r in rows),
                "traceback_runs": sum(bool(r["traceback"]) for r in rows),
                **({"exactly_one_wrote": sum(r["one_wrote"] for r in rows)} if name == "render-concurrent" else {}),
                "problems": [r for r in rows if r["bad"] or r["parts"] or r["orphans"] or r["lost"] or r["traceback"]
                             or r.get("one_wrote") is False][:5],
            }
            if not a.json:
                r = results[name]
                print(f"{name}: {r['runs']} runs ({r['signalled']} signalled while running), exit codes "
                      f"{r['exit_codes']}; truncated/unmatched outputs "
                      f"{r['truncated_or_unmatched_outputs']}, .part left {r['part_files_left']}, orphans "
                      f"{r['orphan_processes']}, lost signals {r['lost_signals']}, tracebacks {r['traceback_runs']}, "
                      f"stopped while CPython started {r['stopped_in_interpreter_startup']}"
                      + (f", exactly one of two wrote {r['exactly_one_wrote']}/{r['runs']}"
                         if "exactly_one_wrote" in r else ""), flush=True)
                for p in r["problems"]:
                    print(f"  problem: {p}", flush=True)
    finally:
        shutil.rmtree(base, ignore_errors=True)
    if a.json:
        print(json.dumps(results, indent=2))
    clean = all(r["truncated_or_unmatched_outputs"] == r["part_files_left"] == r["orphan_processes"]
                == r["lost_signals"] == r["traceback_runs"] == 0 and r.get("exactly_one_wrote", r["runs"]) == r["runs"]
                for r in results.values())
    return 0 if clean else 1


if __name__ == "__main__":
    sys.exit(main())
