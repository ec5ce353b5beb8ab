"""Tests of ``audition batch`` (audition.batch and audition.cli.batch).

References: scipy.signal.butter and sosfilt (reference library) for what a good
output must hold; scipy.signal.sosfreqz (reference library) and the
noise-equivalent bandwidth of the second-order low-pass, (pi/2)·Q·f0 (analog
handbook formula), for the measured noise reduction on white hiss; Python's
``csv`` and ``json`` (stdlib) to read the report back; dask.distributed's
LocalCluster (reference library) for the cluster path.

Clips are short synthetic ones (audition.synth, seeds stated) so the file runs in seconds.
"""

from __future__ import annotations

import csv
import json
import math
import os
import signal
import socket
import subprocess
import sys
import time

import numpy as np
import pytest
import scipy.signal
import soundfile as sf

from audition import batch, pipeline, synth
from audition.cli import main
from audition.errors import BadParameter
from audition.io import reader, sidecar, writer

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
_real_render_job = pipeline.render_job
RATE = 44100
F0 = 6000.0


def make_clip(path, seconds=1.0, channels=1, seed=1, subtype="FLOAT", hiss="white", rate=RATE):
    """A programme-plus-hiss clip with 0.5 s of hiss alone at the start (audition.synth, seed stated)."""
    clip = synth.synthesise(seconds=seconds, rate_hz=rate, channels=channels, hiss=hiss, hiss_dbfs=-40.0,
                            lead_in_seconds=0.5, seed=seed)
    os.makedirs(os.path.dirname(str(path)), exist_ok=True)
    writer.write_clip(path, clip.mix, rate, subtype=subtype, seed=seed)
    return clip.mix


def butter_reference(x, f0=F0, rate=RATE):
    # scipy.signal.butter (reference library): 2nd-order Butterworth, bilinear transform prewarped at the cutoff,
    # which is what a second-order low-pass at f0 with Q = 1/sqrt(2) must be
    sos = scipy.signal.butter(2, f0, fs=rate, output="sos")
    return scipy.signal.sosfilt(sos, x, axis=0)


def read_report(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return {row["input"]: row for row in csv.DictReader(fh)}


def files_under(folder) -> dict[str, int]:
    out = {}
    for d, _, names in os.walk(folder):
        for n in names:
            p = os.path.join(d, n)
            out[os.path.relpath(p, folder)] = os.stat(p).st_mtime_ns
    return out


@pytest.fixture
def good_and_bad(tmp_path):
    """Two good float clips (mono, and stereo in a sub-folder) and three bad files, plus a text file."""
    src = tmp_path / "src"
    make_clip(src / "a.wav", channels=1, seed=3)
    make_clip(src / "tape2" / "b.wav", channels=2, seed=4)
    rng = np.random.default_rng(5)  # seed stated: the corrupt file's bytes
    (src / "corrupt.wav").write_bytes(rng.integers(0, 256, 3000, dtype=np.uint8).tobytes())
    (src / "empty.flac").write_bytes(b"")
    clip = synth.synthesise(seconds=1.0, rate_hz=RATE, channels=1, hiss="white", lead_in_seconds=0.5, seed=6)
    sf.write(str(src / "vorbis.ogg"), clip.mix, RATE, format="OGG", subtype="VORBIS")
    (src / "notes.txt").write_text("not audio: left out by the folder search\n")
    return src


# ---------------------------------------------------------------------------
# good files, bad files
# ---------------------------------------------------------------------------


def test_bad_files_are_reported_and_the_good_outputs_are_right(tmp_path, good_and_bad, capsys):
    out = tmp_path / "out"
    rc = main(["batch", str(good_and_bad), str(out), "--f0", str(F0), "--workers", "2", "--noise-span", "0:0.45"])
    captured = capsys.readouterr()
    assert rc == 1
    assert "3 of 5 clip(s) failed" in captured.err
    assert "\r" not in captured.err  # no progress bar off a terminal
    # the good outputs keep their places and are the reference filter's output (float: no dither)
    for rel in ("a.wav", os.path.join("tape2", "b.wav")):
        x, _ = reader.read_clip(good_and_bad / rel)
        y, rate = reader.read_clip(out / rel)
        assert rate == RATE and y.shape == x.shape
        # FLOAT output stores float32: agree with scipy within float32 rounding
        np.testing.assert_allclose(y, butter_reference(x), rtol=0, atol=2e-7)
        side = json.loads((out / (rel + ".json")).read_text())
        assert side["input"]["sha256"] == reader.sha256_file(good_and_bad / rel)
    assert sorted(files_under(out)) == sorted(["a.wav", "a.wav.json", os.path.join("tape2", "b.wav"),
                                               os.path.join("tape2", "b.wav.json"), "batch-report.csv",
                                               "batch-report.json"])
    rows = read_report(out / "batch-report.csv")
    assert len(rows) == 5  # notes.txt is not a sound file name: not a clip
    by_name = {os.path.basename(k): v for k, v in rows.items()}
    assert by_name["a.wav"]["status"] == by_name["b.wav"]["status"] == "done"
    assert by_name["corrupt.wav"]["status"] == "failed" and "not a sound file" in by_name["corrupt.wav"]["reason"]
    assert by_name["empty.flac"]["status"] == "failed" and "empty file" in by_name["empty.flac"]["reason"]
    assert by_name["vorbis.ogg"]["status"] == "failed" and "VORBIS" in by_name["vorbis.ogg"]["reason"]
    for r in rows.values():
        assert "\n" not in r["reason"]
    assert float(by_name["b.wav"]["duration_seconds"]) == pytest.approx(1.0)
    assert int(by_name["b.wav"]["channels"]) == 2 and float(by_name["b.wav"]["f0_hz"]) == F0
    rep = json.loads((out / "batch-report.json").read_text())
    assert rep["summary"]["counts"] == {"done": 2, "no_filter": 0, "skipped": 0, "failed": 3, "not_run": 0}
    assert rep["summary"]["audio_seconds"] == pytest.approx(2.0)
    names = [os.path.relpath(r["input"], good_and_bad) for r in rep["rows"]]  # sorted by path
    assert names == ["a.wav", "corrupt.wav", "empty.flac", os.path.join("tape2", "b.wav"), "vorbis.ogg"]


def test_batch_picture_draws_the_report_figures_and_names_the_failures(tmp_path, good_and_bad):
    from matplotlib import image

    from audition.plots.batch import batch_figure

    out = tmp_path / "out"
    rc = main(["batch", str(good_and_bad), str(out), "--f0", str(F0), "--workers", "1", "--noise-span", "0:0.45",
               "--plot", str(out / "summary.png"), "--quiet"])
    assert rc == 1
    h, w = image.imread(out / "summary.png").shape[:2]
    assert h == 744 and w >= 1560  # 6.2 in at 120 dpi; 13 in, plus the key's width when it has one
    rep = json.loads((out / "batch-report.json").read_text())
    result = batch.BatchResult(rep["rows"], rep["summary"], rep["interrupted"])
    fig = batch_figure(result, "itu468")
    gain_ax, peak_ax = fig.axes
    measured = next(line for line in gain_ax.lines if line.get_label() == "rendered: measured on the output")
    predicted = next(line for line in gain_ax.lines if line.get_label() == "rendered: predicted from the survey")
    done = [r for r in rep["rows"] if r["status"] == "done"]
    assert len(done) == 2
    # the points are the report's figures, clip for clip
    np.testing.assert_array_equal(measured.get_xdata(), [r["measured_treble_loss_db"] for r in done])
    np.testing.assert_array_equal(measured.get_ydata(), [r["measured_snr_gain_db_itu468"] for r in done])
    np.testing.assert_array_equal(predicted.get_ydata(), [r["predicted_snr_gain_db_itu468"] for r in done])
    assert sum(p.get_height() for p in peak_ax.patches) == 2  # one true peak per rendered clip
    # every clip with figures is numbered on the panel and named in the key, by its place under OUTDIR
    assert sorted(t.get_text() for t in gain_ax.texts if t.get_text().isdigit()) == ["1", "2"]
    key = next(t.get_text() for t in fig.texts if t.get_text().lstrip().startswith("#"))
    assert "a.wav" in key and os.path.join("tape2", "b.wav") in key
    notes = next(t.get_text() for t in fig.texts if "rendered," in t.get_text())
    assert "2 rendered, 0 already done, 3 failed" in notes
    for name in ("corrupt.wav", "empty.flac", "vorbis.ogg"):
        reason = next(r["reason"] for r in rep["rows"] if r["input"].endswith(name))
        assert f"failed: {name}: {reason[:60]}" in notes


def test_report_figures_match_the_noise_bandwidth_of_the_filter(tmp_path):
    """White hiss through a 2nd-order Butterworth low-pass: the measured flat noise reduction in the report."""
    src, out = tmp_path / "src", tmp_path / "out"
    make_clip(src / "w.wav", seconds=2.0, channels=1, seed=12, hiss="white")
    f0 = 4000.0
    rc = main(["batch", str(src), str(out), "--f0", str(f0), "--noise-span", "0:0.45", "--quiet"])
    assert rc == 0
    row = next(iter(read_report(out / "batch-report.csv").values()))
    # scipy.signal.sosfreqz (reference library): the share of white-noise power the digital filter passes
    _, h = scipy.signal.sosfreqz(scipy.signal.butter(2, f0, fs=RATE, output="sos"), worN=1 << 16, fs=RATE)
    expected = -10 * np.log10(np.mean(np.abs(h) ** 2))
    # analog handbook: noise-equivalent bandwidth (pi/2)·Q·f0 against the band up to Nyquist; the bilinear
    # filter's zero at Nyquist takes a little more, so this is a cross-check within 0.2 dB
    analog = 10 * np.log10((RATE / 2) / (math.pi / 2 * (1 / math.sqrt(2)) * f0))
    assert expected == pytest.approx(analog, abs=0.2)
    # Welch estimate over 0.45 s of hiss: the same noise before and after, so the ratio is steady (0.3 dB)
    assert float(row["measured_noise_reduction_db_flat"]) == pytest.approx(expected, abs=0.3)
    assert float(row["predicted_noise_reduction_db_flat"]) == pytest.approx(expected, abs=0.3)
    for w in ("flat", "a", "itu468"):
        assert row[f"predicted_snr_gain_db_{w}"] != "" and row[f"measured_snr_gain_db_{w}"] != ""
    assert row["predicted_treble_loss_db"] != "" and row["measured_treble_loss_db"] != ""


# ---------------------------------------------------------------------------
# bad arguments: one line, exit 2, nothing written
# ---------------------------------------------------------------------------


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


BAD_ARGS = {
    "output folder inside the source": (lambda t: [str(t / "src"), str(t / "src" / "out"), "--f0", "6000"],
                                        ["inside the source folder"]),
    "two sources to one output": (lambda t: [str(t / "src"), str(t / "src2"), str(t / "out"), "--f0", "6000"],
                                  ["both map to", "a.wav"]),
    "unreachable cluster": (lambda t: [str(t / "src"), str(t / "out"), "--f0", "6000", "--cluster",
                                       f"tcp://127.0.0.1:{_free_port()}", "--cluster-timeout", "1"],
                            ["cluster", "no scheduler answered"]),
    "two filter choices": (lambda t: [str(t / "src"), str(t / "out"), "--f0", "6000", "--preset",
                                      "cassette-ferric"], ["one way only"]),
    "no filter": (lambda t: [str(t / "src"), str(t / "out")], ["no filter"]),
    "missing source": (lambda t: [str(t / "nowhere"), str(t / "out"), "--f0", "6000"], ["no such file or folder"]),
    "pattern matching nothing": (lambda t: [str(t / "src" / "*.aiff"), str(t / "out"), "--f0", "6000"],
                                 ["matches no file"]),
    "manifest with an unknown column": (lambda t: [str(t / "bad.csv"), str(t / "out"), "--f0", "6000"],
                                        ["column 'gain'"]),
    "recursive pattern reaching the output folder": (lambda t: [str(t / "src" / "**" / "*.wav"),
                                                                 str(t / "src" / "o"), "--f0", "6000"],
                                                      ["pattern", "searches"]),
    "zero workers": (lambda t: [str(t / "src"), str(t / "out"), "--f0", "6000", "--workers", "0"], ["--workers"]),
    "plot folder missing": (lambda t: [str(t / "src"), str(t / "out"), "--f0", "6000", "--plot",
                                       str(t / "nowhere" / "b.png")], ["plot", "nowhere", "does not exist"]),
    "plot is a folder": (lambda t: [str(t / "src"), str(t / "out"), "--f0", "6000", "--plot", str(t / "src2")],
                         ["plot", "is a folder"]),
}


@pytest.mark.parametrize("case", list(BAD_ARGS))
def test_bad_arguments_one_line_exit_2_nothing_written(tmp_path, capsys, case):
    make_clip(tmp_path / "src" / "a.wav", seed=1)
    make_clip(tmp_path / "src2" / "a.wav", seed=2)
    (tmp_path / "bad.csv").write_text("path,gain\nsrc/a.wav,3\n")
    before = files_under(tmp_path)
    argv, words = BAD_ARGS[case]
    rc = main(["batch", *argv(tmp_path)])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2
    assert len(err) == 1 and err[0].startswith("audition batch: error:")
    for w in words:
        assert w in err[0]
    assert files_under(tmp_path) == before  # nothing written, nothing touched
    assert not (tmp_path / "out").exists() and not (tmp_path / "src" / "out").exists()


def test_existing_outputs_need_resume_or_overwrite(tmp_path, capsys):
    src, out = tmp_path / "src", tmp_path / "out"
    make_clip(src / "a.wav", seed=1)
    assert main(["batch", str(src), str(out), "--f0", "6000", "--no-figures", "--quiet"]) == 0
    before = files_under(out)
    assert main(["batch", str(src), str(out), "--f0", "6000", "--no-figures"]) == 2
    assert "exists" in capsys.readouterr().err
    assert files_under(out) == before
    assert main(["batch", str(src), str(out), "--f0", "6000", "--no-figures", "--overwrite", "--quiet"]) == 0
    assert files_under(out)["a.wav"] > before["a.wav"]


# ---------------------------------------------------------------------------
# sources: folders, patterns, manifests
# ---------------------------------------------------------------------------


def test_pattern_keeps_the_layout_below_its_fixed_part(tmp_path):
    for rel in ("box1/side-a.wav", "box1/side-b.wav", "box2/side-a.wav", "box2/skip.flac"):
        make_clip(tmp_path / "tapes" / rel, seed=len(rel), subtype="PCM_16")
    found = batch.discover(str(tmp_path / "tapes" / "*" / "side-*.wav"), str(tmp_path / "out"))
    assert [s.rel for s in found] == [os.path.join("box1", "side-a.wav"), os.path.join("box1", "side-b.wav"),
                                      os.path.join("box2", "side-a.wav")]
    with pytest.raises(BadParameter, match="inside"):
        batch.discover(str(tmp_path / "tapes" / "**" / "*.wav"), str(tmp_path / "tapes" / "out"))


def test_manifest_rows_bring_their_own_preset_and_noise_spans(tmp_path):
    make_clip(tmp_path / "clips" / "a.wav", seed=1)
    make_clip(tmp_path / "clips" / "b.wav", seed=2)
    (tmp_path / "list.csv").write_text("path,preset,noise_spans\n"
                                       "clips/a.wav,cassette-ferric,\n"
                                       "clips/b.wav,,0:0.2;0.25:0.45\n")
    out = tmp_path / "out"
    rc = main(["batch", str(tmp_path / "list.csv"), str(out), "--f0", "5000", "--noise-span", "0:0.45", "--quiet",
               "--report", str(out / "reports" / "set1.csv")])  # a report folder below OUTDIR is made with it
    assert rc == 0
    assert sorted(os.listdir(out / "reports")) == ["set1.csv", "set1.json"]
    rows = read_report(out / "reports" / "set1.csv")
    a, b = rows[str(tmp_path / "clips" / "a.wav")], rows[str(tmp_path / "clips" / "b.wav")]
    assert a["filter"] == "preset cassette-ferric" and float(a["f0_hz"]) == 9000.0  # presets/cassette-ferric.toml
    assert b["filter"] == "options" and float(b["f0_hz"]) == 5000.0
    side = json.loads((out / "clips" / "b.wav.json").read_text())
    assert side["settings"]["noise"]["spans"] == [[0.0, 0.2], [0.25, 0.45]]  # the row's, not --noise-span
    assert json.loads((out / "clips" / "a.wav.json").read_text())["settings"]["noise"]["spans"] == [[0.0, 0.45]]


# ---------------------------------------------------------------------------
# resume
# ---------------------------------------------------------------------------


def test_resume_skips_what_is_done_and_renders_what_changed(tmp_path):
    src, out = tmp_path / "src", tmp_path / "out"
    for i in range(3):
        make_clip(src / f"c{i}.wav", seed=20 + i)
    args = ["batch", str(src), str(out), "--f0", "6000", "--no-figures", "--quiet", "--workers", "2"]
    assert main(args) == 0
    first = files_under(out)
    os.unlink(src / "c1.wav")
    make_clip(src / "c1.wav", seed=99)  # new bytes for one input
    assert main([*args, "--resume"]) == 0
    second = files_under(out)
    rows = read_report(out / "batch-report.csv")
    assert [rows[str(src / f"c{i}.wav")]["status"] for i in range(3)] == ["skipped", "done", "skipped"]
    for name in ("c0.wav", "c0.wav.json", "c2.wav", "c2.wav.json"):
        assert second[name] == first[name]
    assert second["c1.wav"] > first["c1.wav"]
    # other settings: nothing matches, everything is rendered again
    args[args.index("6000")] = "7000"
    assert main([*args, "--resume"]) == 0
    assert {r["status"] for r in read_report(out / "batch-report.csv").values()} == {"done"}


def test_stale_temporary_files_of_a_killed_render_are_removed(tmp_path):
    folder = tmp_path / "o"
    folder.mkdir()
    stale = [folder / ".x.wav.ab12_xYz.part", folder / ".x.wav.json.Q9w8e7r6.part"]
    keep = [folder / ".y.wav.ab12_xYz.part", folder / "x.wav.part"]
    long_ago = time.time() - 3600  # left by a run killed some time ago (io.tempfiles.STALE_AFTER_SECONDS)
    for p in stale + keep:
        p.write_bytes(b"half")
        os.utime(p, (long_ago, long_ago))
    assert sorted(batch.remove_stale_parts(str(folder / "x.wav"))) == sorted(p.name for p in stale)
    assert sorted(os.listdir(folder)) == sorted(p.name for p in keep)


def _env():
    e = dict(os.environ)
    e["PYTHONPATH"] = ROOT + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    return e


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGINT], ids=["SIGKILL", "SIGINT"])
def test_killed_batch_resumes_to_the_uninterrupted_result(tmp_path, sig):
    src = tmp_path / "src"
    names = [f"take{i}.wav" for i in range(5)]
    for i, n in enumerate(names):
        make_clip(src / n, seconds=3.0, channels=2, seed=40 + i, subtype="PCM_16")  # integer: dither is seeded
    cmd = [sys.executable, "-m", "audition", "batch", str(src), None, "--f0", "6000", "--noise-span", "0:0.45",
           "--workers", "1", "--quiet"]

    def command(out, *extra):
        c = list(cmd)
        c[5] = str(out)
        return c + list(extra)

    ref = tmp_path / "ref"
    assert subprocess.run(command(ref), env=_env(), cwd=ROOT, capture_output=True).returncode == 0

    out = tmp_path / "out"
    proc = subprocess.Popen(command(out), env=_env(), cwd=ROOT, start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60

    def second_job_started():
        # one worker takes the clips in order, so once the second one's temporary file (or the file itself)
        # is there, the first job has returned: the kill cannot fall inside it
        try:
            return any(n.startswith("." + names[1] + ".") or n == names[1] for n in os.listdir(out))
        except FileNotFoundError:
            return False

    while not second_job_started() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.002)
    os.killpg(proc.pid, sig)  # the whole process group: the batch and its worker
    _, err = proc.communicate(timeout=60)
    finished = {}
    for n in names:
        side = out / (n + ".json")
        if (out / n).exists() and side.exists():
            rec = json.loads(side.read_text())
            if rec.get("measured"):  # the job's last step
                finished[n] = ((out / n).stat().st_mtime_ns, side.stat().st_mtime_ns, rec["processed_utc"])
    why = f"the kill came too late to test anything: {sorted(os.listdir(out))} {err!r}"
    assert 1 <= len(finished) < len(names), why
    if sig == signal.SIGINT:
        assert proc.returncode == 130
        assert not [n for n in os.listdir(out) if n.endswith(".part")]  # Ctrl-C: every render cleaned up
        rep = json.loads((out / "batch-report.json").read_text())
        assert rep["interrupted"] is True and rep["summary"]["counts"]["not_run"] >= 1

    r = subprocess.run(command(out, "--resume"), env=_env(), cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr + (out / "batch-report.csv").read_text()
    assert not [n for n in os.listdir(out) if n.endswith(".part")]
    rows = read_report(out / "batch-report.csv")
    for n in names:
        # same bytes as the run that was never interrupted
        assert (out / n).read_bytes() == (ref / n).read_bytes()
        assert rows[str(src / n)]["status"] == ("skipped" if n in finished else "done")
    for n, (m_out, m_side, utc) in finished.items():  # done before the kill: not done again
        assert (out / n).stat().st_mtime_ns == m_out
        assert (out / (n + ".json")).stat().st_mtime_ns == m_side
        assert json.loads((out / (n + ".json")).read_text())["processed_utc"] == utc


# ---------------------------------------------------------------------------
# the library: spawn-started workers, progress
# ---------------------------------------------------------------------------


def test_spawned_workers_give_the_same_bytes_as_forked_ones(tmp_path):
    import multiprocessing

    from audition.plan import presets

    src = tmp_path / "src"
    for i in range(2):
        make_clip(src / f"s{i}.wav", seed=60 + i, subtype="PCM_24")
    spec = presets.FilterSpec("options", f0_hz=7000.0, q=0.9)
    outs = {}
    for how in ("spawn", "fork"):
        jobs = batch.plan_jobs([str(src)], str(tmp_path / how), spec=spec, filter_label="options")
        res = batch.run_batch(jobs, workers=1, mp_context=multiprocessing.get_context(how))
        assert [r["status"] for r in res.rows] == ["done", "done"]
        outs[how] = [open(j.output, "rb").read() for j in jobs]
    assert outs["spawn"] == outs["fork"]


def _crashing_render_job(in_path, out_path, **kw):
    """Stands in for a crash inside a library on one file: its worker process dies at once."""
    if os.path.basename(in_path) == "crash.wav":
        os._exit(70)
    return _real_render_job(in_path, out_path, **kw)


def test_a_worker_process_that_dies_fails_only_its_clip(tmp_path, monkeypatch):
    import multiprocessing

    from audition.plan import presets

    src = tmp_path / "src"
    for i, name in enumerate(("a.wav", "b.wav", "crash.wav", "d.wav", "e.wav")):
        make_clip(src / name, seconds=0.6, seed=80 + i)
    monkeypatch.setattr(pipeline, "render_job", _crashing_render_job)  # forked workers inherit the stand-in
    jobs = batch.plan_jobs([str(src)], str(tmp_path / "out"), spec=presets.FilterSpec("options", f0_hz=F0))
    res = batch.run_batch(jobs, workers=2, mp_context=multiprocessing.get_context("fork"))
    status = {os.path.basename(r["input"]): (r["status"], r["reason"]) for r in res.rows}
    assert status.pop("crash.wav")[0] == "failed"
    assert "worker process died" in res.rows[2]["reason"]
    assert {s for s, _ in status.values()} == {"done"}, status
    for name in status:
        x, _ = reader.read_clip(src / name)
        y, _ = reader.read_clip(tmp_path / "out" / name)
        np.testing.assert_allclose(y, butter_reference(x), rtol=0, atol=2e-7)  # scipy.signal.butter, as above


def _slow_to_report_render_job(in_path, out_path, **kw):
    """b.wav finishes its output, then is slow to report; crash.wav's worker dies meanwhile."""
    if os.path.basename(in_path) == "crash.wav":
        time.sleep(0.3)
        os._exit(70)
    r = _real_render_job(in_path, out_path, **kw)
    if os.path.basename(in_path) == "b.wav":
        time.sleep(3.0)  # the pool breaks and kills this worker before its row comes back
    return r


def test_a_clip_finished_by_a_worker_killed_with_its_pool_is_kept(tmp_path, monkeypatch):
    # The CI failure this guards: the pool kills every worker when one dies, perhaps after another
    # worker's render was complete; its second attempt found the output there and refused it.
    import multiprocessing

    from audition.plan import presets

    src = tmp_path / "src"
    for i, name in enumerate(("b.wav", "crash.wav")):
        make_clip(src / name, seconds=0.6, seed=95 + i)
    monkeypatch.setattr(pipeline, "render_job", _slow_to_report_render_job)
    jobs = batch.plan_jobs([str(src)], str(tmp_path / "out"), spec=presets.FilterSpec("options", f0_hz=F0))
    res = batch.run_batch(jobs, workers=2, mp_context=multiprocessing.get_context("fork"))
    status = {os.path.basename(r["input"]): (r["status"], r["reason"]) for r in res.rows}
    assert status["b.wav"] == ("done", ""), status
    assert status["crash.wav"][0] == "failed"
    x, _ = reader.read_clip(src / "b.wav")
    y, _ = reader.read_clip(tmp_path / "out" / "b.wav")
    np.testing.assert_allclose(y, butter_reference(x), rtol=0, atol=2e-7)  # scipy.signal.butter, as above


def test_a_second_attempt_of_a_run_keeps_what_its_first_finished_and_redoes_the_rest(tmp_path):
    # A worker that dies takes the rows of others with it (a local pool kills its workers, Dask
    # re-runs a lost worker's tasks). A second attempt of the same run must not refuse its own work.
    import dataclasses

    from audition.plan import presets

    src = tmp_path / "src"
    make_clip(src / "a.wav", seconds=1.0, seed=90)
    make_clip(src / "b.wav", seconds=1.0, seed=91)
    jobs = batch.plan_jobs([str(src)], str(tmp_path / "out"), spec=presets.FilterSpec("options", f0_hz=F0),
                           noise=pipeline.NoiseReference(spans=((0.0, 0.5),)))
    run1 = [dataclasses.replace(j, run="run-1") for j in jobs]
    first = [batch.run_job(j) for j in run1]
    assert [r["status"] for r in first] == ["done", "done"]
    kept = open(jobs[0].output, "rb").read()
    before = os.stat(jobs[0].output).st_mtime_ns
    # b's first attempt was killed between its render and its measurement
    side_b = sidecar.sidecar_path(jobs[1].output)
    rec = json.load(open(side_b))
    assert rec["batch_run"] == "run-1" and rec["measured"]
    measured = rec.pop("measured")
    sidecar.write_sidecar(side_b, rec)
    again = [batch.run_job(j) for j in run1]
    assert [(r["status"], r["reason"]) for r in again] == [("done", ""), ("done", "")]
    assert os.stat(jobs[0].output).st_mtime_ns == before and open(jobs[0].output, "rb").read() == kept
    assert again[0]["true_peak_dbtp"] == first[0]["true_peak_dbtp"]
    assert json.load(open(side_b))["measured"] == measured  # measured again: same input, same render
    # another run is not this one: refused without --resume (as the batch promised before it
    # began), skipped with it
    other = dataclasses.replace(jobs[0], run="run-2")
    plain = batch.run_job(other)
    assert plain["status"] == "failed" and "exist" in plain["reason"]
    assert batch.run_job(dataclasses.replace(other, resume=True))["status"] == "skipped"
    # a first attempt killed between renaming its output into place and renaming its sidecar: the
    # output is there without a sidecar (the batch refused existing outputs before it began, so this
    # one is its own); and one killed in its clean-up leaves the sidecar alone
    b_bytes = open(jobs[1].output, "rb").read()
    for leftover in (side_b, jobs[1].output):
        os.remove(leftover)
        redo = batch.run_job(run1[1])
        assert (redo["status"], redo["reason"]) == ("done", "")
        assert open(jobs[1].output, "rb").read() == b_bytes  # the same render (seeded dither), finished
        again_rec = json.load(open(side_b))
        assert again_rec["batch_run"] == "run-1" and again_rec["measured"] == measured


@pytest.mark.parametrize("cores, clips, expected", [
    (2, 8, (2, False)), (1, 8, (1, False)), (4, 4, (4, False)),  # a worker per core, each one thread
    (2, 1, (1, True)), (4, 2, (2, True)),  # spare cores: the workers read ahead and write behind
    (3, 2, (2, False)), (8, 3, (3, True)),
])
def test_one_worker_process_per_core_and_helper_threads_only_on_spare_cores(cores, clips, expected):
    # The rule of this project (no outside source): --workers N keeps N cores busy and no more.
    assert batch.local_workers(cores, clips) == expected


# ---------------------------------------------------------------------------
# a Dask cluster (kept last: it leaves dask's threads in this process)
# ---------------------------------------------------------------------------


def test_cluster_gives_the_same_outputs_and_report_as_local_workers(tmp_path):
    distributed = pytest.importorskip("distributed")
    src = tmp_path / "src"
    make_clip(src / "a.wav", seed=70, subtype="PCM_16")
    make_clip(src / "d" / "b.wav", seed=71, channels=2, subtype="PCM_16")
    (src / "broken.wav").write_bytes(b"RIFF\x00\x00")
    common = ["--f0", "6000", "--noise-span", "0:0.45", "--quiet"]
    assert main(["batch", str(src), str(tmp_path / "local"), "--workers", "2", *common]) == 1
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, host="127.0.0.1",
                                  protocol="tcp", dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        rc = main(["batch", str(src), str(tmp_path / "remote"), "--cluster", cluster.scheduler_address, *common])
    assert rc == 1
    for rel in ("a.wav", os.path.join("d", "b.wav")):
        assert (tmp_path / "remote" / rel).read_bytes() == (tmp_path / "local" / rel).read_bytes()
    local = json.loads((tmp_path / "local" / "batch-report.json").read_text())
    remote = json.loads((tmp_path / "remote" / "batch-report.json").read_text())
    assert remote["columns"] == local["columns"]
    assert remote["summary"]["counts"] == local["summary"]["counts"] == {"done": 2, "no_filter": 0, "skipped": 0, "failed": 1,
                                                                          "not_run": 0}
    assert remote["summary"]["runner"].startswith("dask cluster tcp://127.0.0.1:")
    timing = {"seconds", "realtime_factor", "output"}
    for lr, rr in zip(local["rows"], remote["rows"]):
        assert {k: v for k, v in lr.items() if k not in timing} == {k: v for k, v in rr.items() if k not in timing}
