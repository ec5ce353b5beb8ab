"""The main job in one go: audition.pipeline.render_job and `audition render --auto/--plan/--preset/--report`.

Measured figures are checked against truth computed here from the clip's stems,
filtered with scipy.signal.sosfilt and estimated with scipy.signal.welch
(reference library), and against the noise-bandwidth result of the second-order
low-pass (analog-electronics handbooks; from memory).
"""

import base64
import json
import math
import os
import re
import threading
from functools import lru_cache

import numpy as np
import pytest
from scipy import signal

from audition import design, pipeline, synth
from audition.io import writer
from audition.plan import presets
from audition.cli import main
from audition.errors import BadInputFile, BadParameter, OutputRefused
from audition.weighting import power_gain

RATE = 44100
LEAD_IN = 1.5


@lru_cache(maxsize=None)
def clip():
    # Our own scenario, seed stated: 6 s mono, white hiss at -45 dBFS, programme rolling off above 4 kHz.
    return synth.synthesise(seconds=6.0, rate_hz=RATE, channels=1, hiss_dbfs=-45.0, hiss="white",
                            lead_in_seconds=LEAD_IN, seed=5, programme_top_hz=4000.0)


@pytest.fixture
def mix(tmp_path):
    path = tmp_path / "mix.wav"
    writer.write_clip(path, clip().mix, RATE, "FLOAT")
    return str(path)


def listing(folder):
    return sorted(os.listdir(folder))


def weighted_power(x, weighting):
    f, p = signal.welch(x, fs=RATE, nperseg=8192)
    return float(np.sum(p * power_gain(weighting, f)))


def test_auto_job_measures_what_the_stems_say(mix, tmp_path):
    out = tmp_path / "out.wav"
    j = pipeline.render_job(mix, out, auto=pipeline.PlanSettings(), noise=pipeline.NoiseReference(spans=((0.1, 1.4),)))
    d = design.Design.from_dict(json.loads((tmp_path / "out.wav.json").read_text())["design"])
    c = clip()
    # Truth (scipy.signal.sosfilt, scipy.signal.welch): the hiss stem over the noise span, filtered alone.
    a, b = int(0.1 * RATE), int(1.4 * RATE)
    hiss_out = signal.sosfilt(d.sos, c.hiss[:, 0])
    for w in ("flat", "a", "itu468"):
        true_nr = 10 * math.log10(weighted_power(c.hiss[a:b, 0], w) / weighted_power(hiss_out[a:b], w))
        assert j["measured"]["noise_reduction_db"][w] == pytest.approx(true_nr, abs=0.5), w
    # Truth: the programme stem's cut-only treble loss above 2 kHz, from its own spectra before and after.
    start = int(LEAD_IN * RATE)
    f, pin = signal.welch(c.programme[start:, 0], fs=RATE, nperseg=8192)
    _, pout = signal.welch(signal.sosfilt(d.sos, c.programme[:, 0])[start:], fs=RATE, nperseg=8192)
    t = f >= 2000
    lost = np.sum(pin[t] * np.maximum(0.0, 1.0 - pout[t] / pin[t]))
    true_loss = -10 * math.log10(1 - lost / np.sum(pin[t]))
    assert j["measured"]["treble_loss_db"] == pytest.approx(true_loss, abs=0.5)
    # The plan's budget held, and predicted agrees with measured.
    assert j["plan"]["choice"]["predicted"]["treble_loss_db"] <= 1.0
    for w in ("flat", "a", "itu468"):
        assert j["measured"]["snr_gain_db"][w] == pytest.approx(j["predicted"]["snr_gain_db"][w], abs=0.5)


def test_a_job_in_one_thread_starts_no_thread_and_gives_the_same_bytes_and_figures(mix, tmp_path, monkeypatch):
    # Project convention: threads only overlap the work, they never change it (a batch worker runs without).
    noise = pipeline.NoiseReference(spans=((0.1, 1.4),))
    a = pipeline.render_job(mix, tmp_path / "a.wav", auto=pipeline.PlanSettings(), noise=noise, subtype="PCM_24")
    started = []
    start = threading.Thread.start
    monkeypatch.setattr(threading.Thread, "start", lambda self: (started.append(self.name), start(self))[1])
    b = pipeline.render_job(mix, tmp_path / "b.wav", auto=pipeline.PlanSettings(), noise=noise, subtype="PCM_24",
                            threads=False)
    assert started == []
    assert (tmp_path / "a.wav").read_bytes() == (tmp_path / "b.wav").read_bytes()
    for key in ("plan", "predicted", "measured", "survey", "peak_dbfs", "true_peak_dbtp"):
        assert a[key] == b[key], key
    # and the threaded run does start its helpers (else the check above proves nothing)
    pipeline.render_job(mix, tmp_path / "c.wav", auto=pipeline.PlanSettings(), noise=noise)
    assert "audition-write" in started and "audition-read" in started


def test_sidecar_holds_settings_plan_predicted_measured(mix, tmp_path):
    out = tmp_path / "out.wav"
    auto = pipeline.PlanSettings(budget_db=1.5, orders=(2,))
    j = pipeline.render_job(mix, out, auto=auto)
    side = json.loads((tmp_path / "out.wav.json").read_text())
    assert side["settings"] == pipeline.job_settings(auto=auto, noise=pipeline.NoiseReference())
    assert side["settings"] == j["settings"]
    for key in ("plan", "predicted", "measured", "survey"):
        assert side[key] == j[key], key
    assert side["plan"]["choice"]["order"] == 2 and side["plan"]["budget_db"] == 1.5
    assert side["design"]["f0_hz"] == pytest.approx(side["plan"]["choice"]["f0_hz"])
    # Every key of the plain render summary is still there.
    for key in ("input", "output", "sidecar", "rate", "frames", "sections", "dither", "peak_dbfs", "input_sha256"):
        assert key in j


def test_job_settings_json_and_comparable():
    spec = presets.find("cassette-ferric")
    a = pipeline.job_settings(spec=spec, noise=pipeline.NoiseReference(spans=((0.0, 1.0),)), seed=3)
    assert json.loads(json.dumps(a)) == a
    assert a == pipeline.job_settings(spec=spec, noise=pipeline.NoiseReference(spans=((0.0, 1.0),)), seed=3)
    assert a != pipeline.job_settings(spec=spec, noise=pipeline.NoiseReference(spans=((0.0, 1.0),)), seed=4)
    assert a["filter"]["f0_hz"] == spec.f0_hz and a["auto"] is None
    with pytest.raises(BadParameter):
        pipeline.job_settings()
    with pytest.raises(BadParameter):
        pipeline.job_settings(spec=spec, auto=pipeline.PlanSettings())


def test_noise_clip_measurement_equals_noise_bandwidth(tmp_path):
    # White noise through a second-order low-pass falls by 10 log10(((pi/2) Q f0)/(rate/2)) (noise-bandwidth
    # result, analog-electronics handbooks, from memory), here measured on a separate noise clip.
    rng = np.random.default_rng(17)
    noise = rng.standard_normal((RATE * 6, 1)) * 10 ** (-45 / 20)
    writer.write_clip(tmp_path / "leader.wav", noise, RATE, "FLOAT")
    c = clip()
    writer.write_clip(tmp_path / "prog.wav", c.programme[int(LEAD_IN * RATE):] + noise[:len(c.mix) - int(LEAD_IN * RATE)],
                      RATE, "FLOAT")
    f0, q = 3000.0, 0.7071
    spec = presets.FilterSpec("t", f0_hz=f0, q=q)
    j = pipeline.render_job(tmp_path / "prog.wav", tmp_path / "out.wav", spec=spec,
                            noise=pipeline.NoiseReference(clip=str(tmp_path / "leader.wav")))
    expected = -10 * math.log10((math.pi / 2) * q * f0 / (RATE / 2))
    assert j["measured"]["noise_reduction_db"]["flat"] == pytest.approx(expected, abs=0.2)
    assert "plan" not in j


def test_no_noise_reference_no_figures(mix, tmp_path):
    j = pipeline.render_job(mix, tmp_path / "o.wav", spec=presets.FilterSpec("t", f0_hz=8000.0, q=0.7071))
    assert "measured" not in j and "predicted" not in j
    assert j["settings"]["noise"] is None


def test_failures_leave_nothing_behind(mix, tmp_path):
    before = listing(tmp_path)
    with pytest.raises(OutputRefused):
        pipeline.render_job(mix, tmp_path / "o.wav", auto=pipeline.PlanSettings(),
                            report_path=tmp_path / "no-such-folder" / "r.html")
    # Hiss alone, nowhere quieter: the automatic noise reference has nothing to find.
    steady = tmp_path / "steady.wav"
    writer.write_clip(steady, clip().hiss, RATE, "FLOAT")
    before = listing(tmp_path)
    with pytest.raises(BadInputFile, match="no quiet frames"):
        pipeline.render_job(steady, tmp_path / "o.wav", auto=pipeline.PlanSettings())
    with pytest.raises(BadParameter, match="budget-db"):
        pipeline.render_job(mix, tmp_path / "o.wav", auto=pipeline.PlanSettings(budget_db=-1.0))
    with pytest.raises(BadParameter, match="noise-span"):
        pipeline.render_job(mix, tmp_path / "o.wav", spec=presets.FilterSpec("t", f0_hz=8000.0),
                            noise=pipeline.NoiseReference(spans=((5.0, 9.0),)))
    with pytest.raises(BadParameter):
        pipeline.render_job(mix, tmp_path / "o.wav")
    assert listing(tmp_path) == before


def test_report_failure_takes_the_render_back(mix, tmp_path, monkeypatch):
    from audition.io import sidecar

    real = sidecar.PreparedText

    def broken(path, text, what="file"):
        if what == "report":
            raise OutputRefused("disk full (simulated)")
        return real(path, text, what)

    monkeypatch.setattr(sidecar, "PreparedText", broken)
    before = listing(tmp_path)
    with pytest.raises(OutputRefused):
        pipeline.render_job(mix, tmp_path / "o.wav", auto=pipeline.PlanSettings(), report_path=tmp_path / "r.html")
    assert listing(tmp_path) == before


def test_cli_auto_report_is_self_contained(tmp_path, capsys):
    src = tmp_path / "in.wav"
    writer.write_clip(src, clip().mix, RATE, "PCM_16")
    rc = main(["render", str(src), str(tmp_path / "out.wav"), "--auto", "--report", str(tmp_path / "r.html"), "--json"])
    assert rc == 0
    j = json.loads(capsys.readouterr().out)
    page = (tmp_path / "r.html").read_text()
    assert j["report"] == str(tmp_path / "r.html")
    # No network: nothing fetched from elsewhere; every picture inline.
    assert not re.search(r"(src|href)=['\"](?!data:)", page)
    assert "http://" not in page and "https://" not in page
    pngs = re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", page)
    assert len(pngs) == 3 and all(base64.b64decode(p)[:8] == b"\x89PNG\r\n\x1a\n" for p in pngs)
    for text in ("Survey", "Trade-off", "Predicted and measured", "Provenance", j["input_sha256"],
                 j["plan"]["explanation"].split(".")[0]):
        assert text in page


def test_cli_plan_save_round_trips_into_render(tmp_path, capsys):
    # `plan --save` then `render --plan`: the rendered sections are the plan's choice.
    src = tmp_path / "in.wav"
    writer.write_clip(src, clip().mix, RATE, "FLOAT")
    assert main(["plan", str(src), "--save", str(tmp_path / "p.toml"), "--json"]) == 0
    chosen = json.loads(capsys.readouterr().out)["choice"]
    assert main(["render", str(src), str(tmp_path / "o.wav"), "--plan", str(tmp_path / "p.toml"), "--json"]) == 0
    j = json.loads(capsys.readouterr().out)
    np.testing.assert_allclose([s["b"] + s["a"] for s in j["sections"]],
                               [s["b"] + s["a"] for s in chosen["sections"]], rtol=1e-12)
    assert j["settings"]["filter"]["name"] == "p"


@pytest.mark.parametrize("name", sorted(p.stem for p in presets.bundled_folder().glob("*.toml")))
def test_cli_every_bundled_preset_renders(name, tmp_path, capsys):
    src = tmp_path / "in.wav"
    writer.write_clip(src, clip().mix[:RATE * 2], RATE, "PCM_16")
    assert main(["render", str(src), str(tmp_path / "o.wav"), "--preset", name, "--json"]) == 0
    j = json.loads(capsys.readouterr().out)
    spec = presets.find(name)
    np.testing.assert_allclose([s["b"] + s["a"] for s in j["sections"]], spec.design(RATE).sos, rtol=1e-12)
    assert json.loads((tmp_path / "o.wav.json").read_text())["filter_source"]["name"] == name


@pytest.mark.parametrize("args,needle", [
    (["--plan", "BAD"], "'lowpass.alignment'"),
    (["--f0", "9000", "--auto"], "one way only"),
    (["--preset", "cassette-ferric", "--q", "0.5"], "--q"),
    (["--budget-db", "2", "--f0", "9000"], "--auto only"),
    ([], "give a filter"),
])
def test_cli_errors_one_line_exit_2_nothing_written(args, needle, tmp_path, capsys):
    src = tmp_path / "in.wav"
    writer.write_clip(src, clip().mix[:RATE * 2], RATE, "PCM_16")
    bad = tmp_path / "bad.toml"
    bad.write_text('[lowpass]\nf0_hz = 9000.0\norder = 4\nalignment = "elliptic"\n')
    args = [str(bad) if a == "BAD" else a for a in args]
    before = listing(tmp_path)
    assert main(["render", str(src), str(tmp_path / "o.wav"), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and needle in err[0]
    if "BAD" in args or str(bad) in args:
        # The preset/plan error names the file, the field and what is allowed (issue 5, item 5).
        assert str(bad) in err[0] and "allowed are butterworth, bessel, linkwitz-riley" in err[0]
    assert listing(tmp_path) == before


def test_planned_candidates_have_alignment_section_values(mix):
    # Every fourth-order shape the planner searches comes with its alignment's section values, and keeps
    # them through a plan file. Coefficients a_i, b_i of the normalised sections b_i s^2 + a_i s + 1 from the
    # tables of R. Mancini (ed.), "Op Amps for Everyone", Texas Instruments SLOD006, ch. 16 (Butterworth and
    # Bessel, -3 dB at the cutoff; from memory): Q_i = sqrt(b_i)/a_i, section f0 = f0 / sqrt(b_i).
    # Second order: Butterworth Q = 1/sqrt(2) (alignment definition).
    tables = {"butterworth": [(1.8478, 1.0), (0.7654, 1.0)], "bessel": [(1.3397, 0.4889), (0.7743, 0.3890)],
              None: [(math.sqrt(2), 1.0)]}
    from audition.plan import shapes

    seen = set()
    for shape in shapes.shapes((2, 4)):
        if shape.free:
            continue  # a cascade of free Qs has no table
        d = shape.design(6000.0, RATE)
        if d.order == 2 and abs(d.q - 1 / math.sqrt(2)) > 1e-9:
            continue  # a second-order candidate of another Q
        if d.alignment not in tables:
            continue
        seen.add(d.alignment)
        back = presets.FilterSpec.from_design(d, "x").design(RATE)
        for sec, (a, b) in zip(sorted(back.sections, key=lambda s: s.q), tables[d.alignment]):
            assert sec.q == pytest.approx(math.sqrt(b) / a, abs=6e-4), d.alignment
            assert sec.f0_hz == pytest.approx(d.f0_hz / math.sqrt(b), rel=6e-4), d.alignment
    assert {"butterworth", "bessel"} <= seen
