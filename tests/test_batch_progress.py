"""Progress of ``audition batch``: the bar on a terminal, the time left, --verbose lines, the summary.

References: pyte (an outside VT100 terminal emulator, 80 columns) to read what the bar
leaves on a screen; Python's ``datetime.timedelta`` (stdlib), whose ``str`` writes
h:mm:ss, for the durations; the time left as the audio still to do at the pace so far
(common practice, no source), worked by hand below. The 80- and 100-column limits and
the h:mm:ss form are the project's own (issue 17). No timing is asserted: the
clock is a stand-in where the time left is checked.

Clips are short synthetic ones (audition.synth, seeds stated).
"""

from __future__ import annotations

import datetime
import io
import itertools
import json
import multiprocessing
import os
import re
import sys

import pytest

from audition import batch, pipeline, synth
from audition.cli import main
from audition.cli.batch import BatchProgress, format_summary, per_file_line
from audition.cli.render import hms
from audition.errors import BadInputFile
from audition.io import writer

RATE = 44100
PCT = re.compile(r"(\d+\.\d) %")


class Terminal(io.StringIO):
    """stderr as a terminal would be: isatty() is True (its size cannot be asked: 80 columns)."""

    def isatty(self):
        return True


def make_clip(path, seconds, seed, programme="dark"):
    """A clip --auto plans a filter for: dark programme, hiss at -40 dBFS, 3 s of hiss alone (seed stated)."""
    clip = synth.synthesise(seconds=seconds, rate_hz=RATE, channels=1, hiss_dbfs=-40.0,
                            lead_in_seconds=min(3.0, seconds / 2), seed=seed, programme=programme)
    os.makedirs(os.path.dirname(str(path)), exist_ok=True)
    writer.write_clip(path, clip.mix, RATE, subtype="PCM_16", seed=seed)


def frames_of(text: str) -> list[str]:
    """The bar's successive drawings: what each carriage return starts, blank erasures left out."""
    return [f for f in text.replace("\n", "\r").split("\r") if f.startswith("batch [")]


def fake_job(index, path="x.wav"):
    return batch.Job(index=index, input=path, output=path + ".out", rel=path)


# ---------------------------------------------------------------------------
# durations
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("seconds", [0, 8, 59.4, 60, 599.6, 3599, 3600, 3725, 36000 + 61])
def test_durations_are_hours_minutes_seconds_like_timedelta(seconds):
    # str(datetime.timedelta) (stdlib) writes h:mm:ss; under an hour the bar writes m:ss
    ref = str(datetime.timedelta(seconds=round(seconds)))
    h, mm, ss = ref.split(":")
    assert hms(seconds) == (ref if int(h) else f"{int(mm)}:{ss}")


def test_summary_writes_durations_as_h_mm_ss_without_decimals_and_a_failed_path_once():
    rows = [{"input": "/x/a.wav", "output": "", "status": "failed",
             "reason": "/x/a.wav: the noise reference found automatically is doubtful"},
            {"input": "/x/b.wav", "output": "", "status": "failed",
             "reason": "'/x/b.wav': not a sound file"}]
    summary = {"files": 3, "counts": {"done": 1, "no_filter": 0, "skipped": 0, "failed": 2, "not_run": 0},
               "rendered_audio_seconds": 1200.0, "wall_seconds": 8.04, "throughput_audio_seconds_per_second": 149.3,
               "runner": "2 worker process(es)"}
    text = format_summary(batch.BatchResult(rows, summary, False), ("r.csv", "r.json"))
    # timedelta (stdlib) for h:mm:ss: 20 minutes of audio in 8 s
    assert f"{datetime.timedelta(seconds=1200)} of audio rendered in {datetime.timedelta(seconds=8)} " in text
    assert " h " not in text and not re.search(r"\d:\d\d\.\d", text)  # no "0.33 h", no "0:00:08.0"
    assert "  failed: /x/a.wav: the noise reference found automatically is doubtful" in text.splitlines()
    assert "  failed: /x/b.wav: not a sound file" in text.splitlines()
    assert text.count("/x/a.wav") == 1 and text.count("/x/b.wav") == 1


# ---------------------------------------------------------------------------
# the bar, from its parts
# ---------------------------------------------------------------------------


def test_time_left_is_the_audio_still_to_do_at_the_pace_so_far():
    now = [100.0]
    term = Terminal()
    jobs = [fake_job(0, "a.wav"), fake_job(1, "b.wav"), fake_job(2, "c.wav")]
    p = BatchProgress(jobs, stream=term, durations={0: 600.0, 1: 300.0, 2: 1200.0}, clock=lambda: now[0])
    # c.wav was done by an earlier run: its 20 minutes count as done but do not speed up the pace
    p.progress({2: 1.0})
    p({"input": "c.wav", "output": "c.wav.out", "status": "skipped", "reason": "", "duration_seconds": 1200.0})
    now[0] = 110.0
    p.progress({0: 0.5})
    # worked by hand: 300 s of audio in 10 s is 30x; 2100 - 1500 = 600 s still to do, 20 s left
    line = frames_of(term.getvalue())[-1]
    assert "71.4 %" in line  # 1500 / 2100
    assert "1/3 clips" in line and "25:00/35:00 audio" in line
    assert line.endswith("0:20 left"), line
    now[0] = 130.0
    p.progress({0: 1.0, 1: 0.5})
    # 750 s of audio in 30 s is 25x; 150 s still to do: 6 s left
    assert frames_of(term.getvalue())[-1].endswith("0:06 left")


def test_time_left_past_an_hour_is_h_mm_ss_and_the_line_keeps_to_80_columns():
    now = [0.0]
    term = Terminal()
    jobs = [fake_job(i, f"/archive/tapes/reel-{i:04d}.wav") for i in range(1200)]
    p = BatchProgress(jobs, stream=term, durations={i: 3600.0 for i in range(1200)}, clock=lambda: now[0])
    now[0] = 600.0
    p.progress({i: 1.0 for i in range(30)})  # 30 h of audio in 10 min: 180x
    # 1170 h still to do at 180x is 6.5 h: 6:30:00 (timedelta, stdlib)
    line = frames_of(term.getvalue())[-1]
    assert line.endswith(f"{datetime.timedelta(hours=6.5)} left"), line
    for i in range(30):
        p({"input": jobs[i].input, "output": "", "status": "failed" if i % 7 == 0 else "done", "reason": "r"})
    now[0] += 0.1  # the bar is redrawn at most ten times a second
    p.progress({})
    assert "30/1200 clips, 5 failed" in frames_of(term.getvalue())[-1]
    assert max(len(f) for f in frames_of(term.getvalue())) <= 79


def test_fraction_rises_to_100_only_when_every_clip_has_ended():
    now = [0.0]
    term = Terminal()
    p = BatchProgress([fake_job(0), fake_job(1)], stream=term, durations={0: 100.0, 1: 1.0}, clock=lambda: now[0])
    now[0] = 0.5
    p.progress({0: 1.0, 1: 0.9999})
    p({"input": "x.wav", "output": "", "status": "done", "reason": ""})
    assert "99.9 %" in frames_of(term.getvalue())[-1]
    now[0] = 1.0
    p.progress({1: 1.0})
    p({"input": "x.wav", "output": "", "status": "done", "reason": ""})
    assert "100.0 %" in frames_of(term.getvalue())[-1]


# ---------------------------------------------------------------------------
# the bar, drawn by a real batch
# ---------------------------------------------------------------------------


def test_batch_on_a_terminal_counts_audio_across_two_clips_to_100_percent(tmp_path, monkeypatch, capsys):
    import pyte

    src = tmp_path / "src"
    make_clip(src / "long.wav", seconds=12.0, seed=11)
    make_clip(src / "short.wav", seconds=5.0, seed=12)
    term = Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    told = []
    real_progress = BatchProgress.progress
    monkeypatch.setattr(BatchProgress, "progress", lambda self, f: (told.append(dict(f)), real_progress(self, f)))
    rc = main(["batch", str(src), str(tmp_path / "out"), "--auto", "--workers", "2"])
    assert rc == 0, capsys.readouterr()
    drawn = term.getvalue()
    frames = frames_of(drawn)
    pct = [float(PCT.search(f).group(1)) for f in frames]
    assert pct[0] == 0.0 and pct[-1] == 100.0
    assert all(b >= a for a, b in itertools.pairwise(pct)), pct  # never goes back
    assert any(0.0 < x < 100.0 for x in pct)
    # the workers told fractions of running clips, not only the ends (each clip is 4 phases)
    assert any(0.0 < v < 1.0 for f in told for v in f.values()), told
    assert "0:17 audio" in frames[0] and "0:17/0:17 audio" in frames[-1]  # 12 s + 5 s, m:ss
    assert "2/2 clips" in frames[-1]
    # one line, redrawn: on an 80-column terminal (pyte) nothing wraps and the bar is erased at the end
    screen = pyte.Screen(80, 24)
    pyte.Stream(screen).feed(drawn.replace("\n", "\r\n"))
    assert screen.cursor.y == 0 and all(not line.strip() for line in screen.display)
    assert max(len(f) for f in frames) <= 79


def test_no_bar_off_a_terminal_nor_with_quiet_or_json(tmp_path, monkeypatch, capsys):
    src = tmp_path / "src"
    make_clip(src / "a.wav", seconds=4.0, seed=13)
    term = Terminal()
    monkeypatch.setattr(sys, "stderr", term)
    assert main(["batch", str(src), str(tmp_path / "q"), "--f0", "6000", "--quiet"]) == 0
    assert main(["batch", str(src), str(tmp_path / "j"), "--f0", "6000", "--json"]) == 0
    assert "\r" not in term.getvalue() and "batch [" not in term.getvalue()
    json.loads(capsys.readouterr().out)  # --json prints the report alone


def test_worker_progress_reaches_the_main_process_from_spawned_workers(tmp_path):
    # the shared array crosses a spawn as well as a fork; each job's fraction only rises, and ends at 1
    from audition.plan import presets

    src = tmp_path / "src"
    make_clip(src / "a.wav", seconds=4.0, seed=14)
    make_clip(src / "b.wav", seconds=2.0, seed=15)
    jobs = batch.plan_jobs([str(src)], str(tmp_path / "out"), spec=presets.FilterSpec("options", f0_hz=6000.0),
                           noise=pipeline.NoiseReference())
    seen: dict[int, list[float]] = {0: [], 1: []}
    res = batch.run_batch(jobs, workers=1, mp_context=multiprocessing.get_context("spawn"),
                          on_progress=lambda f: [seen[i].append(v) for i, v in f.items()])
    assert [r["status"] for r in res.rows] == ["done", "done"]
    for values in seen.values():
        assert values[-1] == 1.0 and values == sorted(values)


# ---------------------------------------------------------------------------
# --verbose
# ---------------------------------------------------------------------------


def test_verbose_lines_name_the_clip_f0_and_shape_in_100_columns(tmp_path, monkeypatch, capsys):
    deep = tmp_path / "src" / ("a-long-folder-name-of-an-archive-shelf-" * 2) / "box-0042"
    make_clip(deep / "reel-side-a-transfer-2024.wav", seconds=8.0, seed=16)
    bright = synth.synthesise(seconds=8.0, rate_hz=RATE, channels=1, hiss_dbfs=-50.0, lead_in_seconds=1.0, seed=7)
    writer.write_clip(tmp_path / "src" / "bright.wav", bright.mix, RATE, subtype="PCM_16", seed=7)
    rc = main(["batch", str(tmp_path / "src"), str(tmp_path / "out"), "--auto", "--workers", "2", "--verbose",
               "--quiet"])
    err = capsys.readouterr().err
    assert rc == 0, err
    rep = json.loads((tmp_path / "out" / "batch-report.json").read_text())
    by_name = {os.path.basename(r["input"]): r for r in rep["rows"]}
    lines = err.splitlines()
    assert len(lines) == 2 and all(len(line) <= 100 for line in lines), lines
    done = next(line for line in lines if line.startswith("done"))
    row = by_name["reel-side-a-transfer-2024.wav"]
    assert row["status"] == "done" and len(row["input"]) > 100
    assert done.split()[1].startswith("...") and "reel-side-a-transfer-2024.wav:" in done  # cut from the left
    assert f"f0 {row['f0_hz']:,.0f} Hz" in done
    assert f"order {row['order']}" in done
    nofilter = next(line for line in lines if line.startswith("no filter"))
    assert by_name["bright.wav"]["status"] == "no filter"
    assert "bright.wav: the best filter" in nofilter


def test_verbose_line_of_a_failed_clip_gives_its_path_once_within_100_columns():
    path = "/mnt/" + "shelf/" * 20 + "a.wav"
    line = per_file_line({"input": path, "output": "", "status": "failed",
                          "reason": f"{path}: the noise reference found automatically is doubtful (only 5.5 dB "
                                    "below the programme; spans 0.00:0.93 s): --auto will not plan on it"})
    assert len(line) <= 100 and line.count("a.wav") == 1
    assert line.startswith("failed    ...") and "a.wav: the noise reference" in line


def test_a_failed_clip_is_named_once_in_the_summary(tmp_path, monkeypatch, capsys):
    src = tmp_path / "src"
    make_clip(src / "a.wav", seconds=2.0, seed=17)

    def doubtful(in_path, out_path, **kw):  # stands in for the evidence check, which names the file unquoted
        raise BadInputFile(f"{in_path}: the noise reference found automatically is doubtful")

    monkeypatch.setattr(pipeline, "render_job", doubtful)  # forked workers inherit the stand-in
    assert main(["batch", str(src), str(tmp_path / "out"), "--auto", "--workers", "1"]) == 1
    out = capsys.readouterr().out
    failed = [line for line in out.splitlines() if "failed:" in line]
    assert failed == [f"  failed: {src / 'a.wav'}: the noise reference found automatically is doubtful"]
