"""--auto is honest about its evidence: a doubtful noise reference stops it; the long phases show progress."""

from __future__ import annotations

import csv
import json
import os

import numpy as np
import pytest
import soundfile as sf

from audition import pipeline, synth
from audition.cli import main
from audition.io import reader

RATE = 44100


def _continuous(path, seed=3):
    """Programme from the first sample to the last (no lead-in, no pause) over tape hiss at -50 dBFS."""
    c = synth.synthesise(seconds=12.0, rate_hz=RATE, channels=2, hiss_dbfs=-50.0, lead_in_seconds=0.0, seed=seed)
    sf.write(path, c.mix, RATE, subtype="PCM_16")
    return c


def test_a_wrong_noise_reference_stops_auto_with_its_spans(tmp_path, capsys):
    # Truth from the synthesised stems: the hiss is -50 dBFS. With no hiss-only stretch the automatic
    # search takes quiet programme for hiss, many dB above the truth; --auto must not plan on it.
    src, out = tmp_path / "cont.wav", tmp_path / "out.wav"
    c = _continuous(src)
    s = pipeline.survey_path(src)
    hiss_truth_dbfs = 10 * np.log10(np.mean(c.hiss.astype(float) ** 2))
    assert s.noise_rms_dbfs > hiss_truth_dbfs + 6.0  # the reference really is wrong (truth from the stems)
    assert s.confidence.grade == "low"
    before = sorted(os.listdir(tmp_path))
    rc = main(["render", str(src), str(out), "--auto"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1
    assert "doubtful" in err[0] and "--noise-span" in err[0] and "--accept-doubtful-noise" in err[0]
    a, b = s.spans[0]
    assert f"{a:.2f}:{b:.2f}" in err[0]  # says which spans it would have used
    assert sorted(os.listdir(tmp_path)) == before  # nothing written


def test_accepting_the_doubtful_reference_or_giving_one_plans(tmp_path, capsys):
    src = tmp_path / "cont.wav"
    _continuous(src)
    rc = main(["render", str(src), str(tmp_path / "a.wav"), "--auto", "--accept-doubtful-noise", "--json"])
    assert rc == 0
    j = json.loads(capsys.readouterr().out)
    assert j["settings"]["noise"]["accept_doubtful"] is True
    # A reference given by the user is the user's evidence: planned with no extra flag.
    rc = main(["render", str(src), str(tmp_path / "b.wav"), "--auto", "--noise-span", "0:2", "--json"])
    assert rc == 0


def test_batch_lists_the_doubtful_clip_as_failed_with_the_reason(tmp_path, capsys):
    src = tmp_path / "src"
    src.mkdir()
    _continuous(src / "cont.wav")
    c = synth.synthesise(seconds=6.0, rate_hz=RATE, channels=2, hiss_dbfs=-45.0, lead_in_seconds=1.0, seed=4,
                         programme_top_hz=6000.0)
    sf.write(src / "good.wav", c.mix, RATE, subtype="PCM_16")
    rc = main(["batch", str(src), str(tmp_path / "out"), "--auto", "--workers", "1"])
    capsys.readouterr()
    assert rc != 0
    rows = {os.path.basename(r["input"]): r for r in csv.DictReader(open(tmp_path / "out" / "batch-report.csv"))}
    assert rows["cont.wav"]["status"] == "failed" and "doubtful" in rows["cont.wav"]["reason"]
    assert rows["good.wav"]["status"] in ("done", "no filter")


class _Phases:
    """A progress sink that records the phases announced and the last (done, total) of each."""

    def __init__(self):
        self.seen = []

    def phase(self, name, index, count):
        self.seen.append([name, index, count, None])

    def __call__(self, done, total):
        self.seen[-1][3] = (done, total)


def test_auto_report_job_announces_each_phase_with_its_progress(tmp_path):
    c = synth.synthesise(seconds=6.0, rate_hz=RATE, channels=1, hiss_dbfs=-45.0, lead_in_seconds=1.0, seed=6,
                         programme_top_hz=6000.0)
    src = tmp_path / "in.wav"
    sf.write(src, c.mix, RATE, subtype="PCM_16")
    p = _Phases()
    j = pipeline.render_job(src, tmp_path / "out.wav", auto=pipeline.PlanSettings(), progress=p,
                            report_path=tmp_path / "r.html")
    assert j["output"] is not None
    frames = reader.info(src).frames
    names = [s[0] for s in p.seen]
    assert names == ["surveying", "planning", "rendering", "measuring", "writing the report"]
    assert all(s[1] == i + 1 and s[2] == 5 for i, s in enumerate(p.seen))
    for name, *_, last in p.seen:
        if name in ("surveying", "rendering", "measuring"):
            assert last == (frames, frames), name  # each streaming phase reaches the whole file


def test_progress_bar_shows_phase_and_time_left():
    import io

    from audition.cli.render import ProgressBar, hms

    out = io.StringIO()
    bar = ProgressBar("rendering", stream=out)
    bar.phase("surveying", 1, 3)
    bar(50, 100)
    bar.close()
    assert "[1/3] surveying" in out.getvalue() and "50.0%" in out.getvalue()
    # h:mm:ss under and over an hour
    assert hms(59.6) == "1:00" and hms(3725) == "1:02:05" and hms(0) == "0:00"
