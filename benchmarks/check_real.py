"""The planner's answers on real recordings, judged against the truth of their clean stems.

Reads the ``manifest.json`` that ``benchmarks/real_clips.py`` writes (real speech, FluidSynth
piano and ensemble, a real band track, each mixed with white, pink and tape-like hiss at 20, 30
and 40 dB under the programme), runs ``audition plan MIX --json`` on every mix as a technician
would, and checks the three rules of the planner:

- **loss**: the chosen filter's treble loss, measured from the clean programme and the hiss stem
  separately (``tests/heardtruth.py``: scipy.signal.sosfilt of the stems, IEC 61260-1 bands,
  Terhardt's 1979 threshold), is within the budget plus 0.3 dB;
- **f3**: where the programme sinks into the hiss at f_c (the manifest's truth), the choice's
  digital -3.01 dB point (scipy.signal.sosfreqz) lies between 0.7 f_c and 1.6 f_c;
- **none**: where the programme stands above the hiss up to the top band (f_c null), the answer
  is "no filter" or a filter within the budget (the loss rule then covers it).

When the automatic noise search refuses a mix (continuous music has no hiss-only stretch) the
plan is run again with the hiss stem as ``--noise-clip``, and the row says so.

Usage: ``python benchmarks/check_real.py [MANIFEST] [--budget-db B] [--json]``
(default manifest ``/work/corpus/mixes/manifest.json``). Exit status 1 when a rule fails,
2 when the manifest is missing.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

import numpy as np
import soundfile as sf
from scipy import signal

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
sys.path.insert(0, os.path.join(os.path.dirname(HERE), "tests"))
from common import ROOT, env  # noqa: E402
from heardtruth import true_treble_loss  # noqa: E402

SLACK_DB = 0.3
F3_RANGE = (0.7, 1.6)


def plan(mix: str, budget: float, noise_clip: str | None = None) -> tuple[int, dict | None, str]:
    cmd = [sys.executable, "-m", "audition", "plan", mix, "--json", "--budget-db", str(budget)]
    if noise_clip:
        cmd += ["--noise-clip", noise_clip]
    p = subprocess.run(cmd, env=env(), cwd=ROOT, capture_output=True, text=True)
    return p.returncode, (json.loads(p.stdout) if p.returncode == 0 else None), p.stderr.strip()


def minus3_hz(sos: np.ndarray, rate: int) -> float:
    f, h = signal.sosfreqz(sos, worN=1 << 16, fs=rate)
    db = 20 * np.log10(np.maximum(np.abs(h), 1e-300) / abs(h[0]))
    below = np.nonzero(db <= -3.0103)[0]
    if below.size == 0:
        return float("nan")
    i = below[0]  # interpolate between the last bin above and the first below
    return float(np.interp(-3.0103, [db[i], db[i - 1]], [f[i], f[i - 1]]))


def check(mix: dict, budget: float) -> dict:
    paths = mix["paths"]
    rc, out, err = plan(paths["mix"], budget)
    noise = "auto"
    if rc == 2:
        rc, out, err = plan(paths["mix"], budget, paths["hiss"])
        noise = "hiss stem"
    row = {"mix": mix["name"], "f_c_hz": mix["f_c_hz"], "noise": noise, "exit": rc}
    if out is None:
        row.update(answer="refused", reason=err.splitlines()[-1] if err else "")
        return row
    choice = out["choice"]
    if choice is None:
        # where the truth has a sink frequency, "no filter" has no -3 dB point to judge: no rule applies
        row.update(answer="no filter", reason=out.get("no_filter_reason"),
                   rules={"none": True} if mix["f_c_hz"] is None else {})
        return row
    clean, rate = sf.read(paths["clean"], always_2d=True)
    hiss, _ = sf.read(paths["hiss"], always_2d=True)
    sos = np.array([[*s["b"], *s["a"]] for s in choice["sections"]], dtype=float)
    loss = true_treble_loss(clean, hiss, sos, rate, 0)
    f3 = minus3_hz(sos, rate)
    rules = {"loss": loss <= budget + SLACK_DB}
    if mix["f_c_hz"] is not None:
        rules["f3"] = F3_RANGE[0] * mix["f_c_hz"] <= f3 <= F3_RANGE[1] * mix["f_c_hz"]
    row.update(answer=choice["label"], predicted_loss_db=choice["predicted"]["treble_loss_db"],
               true_loss_db=loss, f3_hz=f3, heard_reduction_pct=choice["predicted"]["hiss_heard"]["reduction_pct"],
               rules=rules)
    return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("manifest", nargs="?", default="/work/corpus/mixes/manifest.json")
    ap.add_argument("--budget-db", type=float, default=1.0)
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = ap.parse_args(argv)
    try:
        with open(args.manifest) as f:
            manifest = json.load(f)
    except OSError as e:
        print(f"check_real: {args.manifest}: {e.strerror}; make it with benchmarks/real_clips.py", file=sys.stderr)
        return 2
    rows = []
    for mix in manifest["mixes"]:
        row = check(mix, args.budget_db)
        rows.append(row)
        if not args.json:
            fc = f"{row['f_c_hz']:7.0f}" if row["f_c_hz"] else "   none"
            if "true_loss_db" in row:
                what = (f"{row['answer']:44s} loss {row['predicted_loss_db']:4.2f} predicted, "
                        f"{row['true_loss_db']:4.2f} true; -3 dB {row['f3_hz']:6.0f} Hz; "
                        f"heard -{row['heard_reduction_pct']:.0f} %")
            else:
                what = f"{row['answer']}: {row.get('reason') or ''}"[:110]
            bad = [k for k, ok in row.get("rules", {}).items() if not ok]
            flag = ("FAIL " + ",".join(bad)) if bad else "ok"
            print(f"{row['mix']:20s} f_c {fc}  [{row['noise']:9s}] {flag:9s} {what}", flush=True)
    counts = {}
    for r in rows:
        for k, ok in r.get("rules", {}).items():
            c = counts.setdefault(k, [0, 0])
            c[0] += ok
            c[1] += 1
    if args.json:
        print(json.dumps({"rows": rows, "rules": counts}, indent=1))
    else:
        answers = sum(1 for r in rows if "true_loss_db" in r)
        unjudged = sum(1 for r in rows if r["answer"] == "no filter" and r["f_c_hz"] is not None)
        print(f"\n{len(rows)} mixes: {answers} filters, {sum(r['answer'] == 'no filter' for r in rows)} 'no filter' "
              f"({unjudged} of them where the truth has an f_c, so no -3 dB point to judge), "
              f"{sum(r['answer'] == 'refused' for r in rows)} refused; "
              + ", ".join(f"{k} ok {a}/{n}" for k, (a, n) in counts.items()))
    return 0 if all(a == n for a, n in counts.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
