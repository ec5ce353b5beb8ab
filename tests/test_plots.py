"""The pictures checked as a reader sees them: nothing overlaps, the words are the trade's, the marks sit right.

Overlap is measured on the drawn figure (matplotlib text and legend extents from
fig.canvas.get_renderer()). References: scipy.signal.sosfreqz (reference library) for
the -3.01 dB point; circuit theory of the loaded series RLC (H0 = RL / (RL + R), see
audition/realize/stages.py) for the flat loss; the rest is common practice, no source.
"""

import math
import os
from functools import lru_cache

import numpy as np
import pytest
from scipy import signal

from audition import pipeline, realize, synth
from audition.io import writer

RATE = 44100
BANNED = ("itu468", "a weighted", "treble edge")


@lru_cache(maxsize=None)
def clip():
    # Our own scenario, seed stated: 5 s mono, tape hiss at -48 dBFS, programme rolling off above 5 kHz.
    return synth.synthesise(seconds=5.0, rate_hz=RATE, channels=1, hiss_dbfs=-48.0, hiss="tape",
                            lead_in_seconds=1.2, seed=33, programme_top_hz=5000.0)


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    path = tmp_path_factory.mktemp("plots") / "take.wav"
    writer.write_clip(path, clip().mix, RATE, "FLOAT")
    return pipeline.survey_path(path, pipeline.NoiseReference())


def drawn(fig):
    r = fig.canvas.get_renderer()
    fig.draw(r)
    return r


def texts_of(fig):
    """Every visible text artist of the figure with words in it (tick labels aside)."""
    out = []
    for ax in fig.axes:
        out += [t for t in ax.texts if t.get_visible() and t.get_text().strip()]
    out += [t for t in fig.texts if t.get_text().strip()]
    return out


def all_words(fig):
    words = [t.get_text() for t in texts_of(fig)]
    for ax in fig.axes:
        words += [ax.get_title(), ax.get_xlabel(), ax.get_ylabel()]
        leg = ax.get_legend()
        if leg:
            words += [t.get_text() for t in leg.get_texts()]
    words.append(fig._suptitle.get_text() if fig._suptitle else "")
    return " | ".join(words)


def assert_no_overlaps(fig):
    r = drawn(fig)
    boxes = [(t.get_text(), t.get_window_extent(r)) for t in texts_of(fig)]
    legends = [ax.get_legend().get_window_extent(r) for ax in fig.axes if ax.get_legend()]
    for i, (a, ba) in enumerate(boxes):
        for b, bb in boxes[i + 1:]:
            assert not ba.overlaps(bb), f"{a!r} overlaps {b!r}"
        for lb in legends:
            assert not ba.overlaps(lb), f"{a!r} is under a legend"


def assert_line_labels_clear(ax, fig):
    """No label of a vertical line crosses another vertical line of the same axes."""
    r = drawn(fig)
    xs = [ax.transData.transform((line.get_xdata()[0], 0))[0] for line in ax.lines
          if len(set(np.atleast_1d(line.get_xdata()))) == 1 and len(line.get_xdata()) == 2]
    for t in ax.texts:
        bb = t.get_window_extent(r)
        crossed = [x for x in xs if bb.x0 < x < bb.x1]
        assert not crossed, f"{t.get_text()!r} crosses a line at {crossed}"


def test_survey_picture_f0_close_to_the_crossover(survey):
    from audition.plots.survey import survey_figure

    # f0 just above the crossover: the two labels must not lie across each other's lines
    f0 = (survey.crossover_hz or 6000.0) * 1.07
    d = _spec(f0, q=0.7071)
    fig = survey_figure(survey, d, "take.wav")
    ax = fig.axes[0]
    assert len(ax.texts) == (2 if survey.crossover_hz else 1)
    assert_line_labels_clear(ax, fig)
    assert_no_overlaps(fig)
    words = all_words(fig).lower()
    assert not any(b in words for b in BANNED)


def test_plan_picture_has_no_overlaps_and_the_trade_words(survey):
    from audition.plots.plan import plan_figure

    pl = pipeline.plan_survey(survey, pipeline.NoiseReference(), pipeline.PlanSettings())
    fig = plan_figure(survey, pl, "take.wav")
    assert_no_overlaps(fig)
    assert_line_labels_clear(fig.axes[2], fig)
    words = all_words(fig).lower()
    assert not any(b in words for b in BANNED)


def _spec(f0, q=None, order=None, alignment=None, ripple_db=None):
    from audition.plan import presets

    kw = {"f0_hz": f0}
    if q is not None:
        kw["q"] = q
    if order is not None:
        kw.update(order=order, alignment=alignment)
    if ripple_db is not None:
        kw["ripple_db"] = ripple_db
    return presets.check_design(presets.FilterSpec("t", **kw), RATE)


@pytest.mark.parametrize("kw", [dict(f0=9000.0, q=0.7071), dict(f0=7000.0, order=4, alignment="bessel"),
                                dict(f0=8500.0, order=3, alignment="chebyshev", ripple_db=0.5)])
def test_response_picture_marks_the_half_power_point_and_reads_the_passband(kw):
    from audition.plots.response import response_figure

    d = _spec(**kw)
    fig = response_figure(d)
    ax1, axp, axd, _ = fig.axes
    point = next(line for line in ax1.lines if line.get_label().startswith("digital half-power point"))
    f3 = float(point.get_xdata()[0])
    # scipy.signal.sosfreqz (reference library): the digital sections at that frequency read -3.01 dB
    sos = np.array([list(s["b"]) + list(s["a"]) for s in d.to_dict()["sections"]])
    _, h = signal.sosfreqz(sos, worN=[f3], fs=RATE)
    assert 20 * math.log10(abs(h[0])) == pytest.approx(-3.01, abs=0.02)
    # the passband panel is a close-up: a few dB, so a 0.5 dB ripple is many pixels tall
    lo, hi = axp.get_ylim()
    assert lo == pytest.approx(-4.0) and hi <= 2.5
    # the shaded deviation band stops where the analog response leaves the passband
    right = axd.patches[0].get_bbox().x1  # the span's right edge, data units
    _, ha = signal.freqs(*signal.zpk2tf(*d_analog_zpk(d)), worN=[2 * math.pi * right])
    assert 20 * math.log10(abs(ha[0])) == pytest.approx(-3.01, abs=0.05)
    assert_no_overlaps(fig)


@pytest.mark.parametrize("kw", [dict(f0=7000.0, order=4, alignment="bessel"),
                                dict(f0=8500.0, order=3, alignment="chebyshev", ripple_db=0.5)])
def test_report_response_picture_marks_the_half_power_point(kw):
    from audition.plots.plan import response_figure

    d = _spec(**kw)
    fig = response_figure(d, 2000.0)
    ax = fig.axes[0]
    point = next(line for line in ax.lines if line.get_label().startswith("digital -3.01 dB point"))
    f3 = float(point.get_xdata()[0])
    # scipy.signal.sosfreqz (reference library): the digital sections at that frequency read -3.01 dB
    sos = np.array([list(s["b"]) + list(s["a"]) for s in d.to_dict()["sections"]])
    _, h = signal.sosfreqz(sos, worN=[f3], fs=RATE)
    assert 20 * math.log10(abs(h[0])) == pytest.approx(-3.01, abs=0.02)
    assert_no_overlaps(fig)


def d_analog_zpk(d):
    """The analog prototype as (z, p, k), built from its sections' f0 and Q (circuit theory of each section)."""
    z, p, k = [], [], 1.0
    for s in d.to_dict()["analog_sections"]:
        w0 = 2 * math.pi * s["f0_hz"]
        if s["q"] is None:
            p.append(-w0)
            k *= w0
        else:
            p += list(np.roots([1.0, w0 / s["q"], w0 * w0]))
            k *= w0 * w0
    return np.array(z), np.array(p), k


def _batch_result(n=10):
    from audition import batch

    rows, rng = [], np.random.default_rng(7)
    for i in range(n):
        st = "no filter" if i in (3, 7) else "done"
        loss, gain = float(rng.uniform(0.3, 1.1)), float(rng.uniform(0.8, 2.0))
        rows.append({"input": f"/t/in/clip{i}.wav", "output": f"/t/out/clip{i}.wav", "status": st,
                     "reason": "", "f0_hz": 7000.0 + 200 * i if st == "done" else None,
                     "measured_treble_loss_db": loss if st == "done" else None,
                     "measured_snr_gain_db_itu468": gain if st == "done" else None,
                     "predicted_treble_loss_db": loss + 0.1, "predicted_snr_gain_db_itu468": gain + 0.2,
                     "measured_hiss_heard_reduction_pct": 20.0 * gain if st == "done" else None,
                     "predicted_hiss_heard_reduction_pct": 20.0 * gain + 3.0,
                     "true_peak_dbtp": -6.0 - i, "clipped_samples": 0})
    summary = {"files": n, "counts": {"done": n - 2, "no_filter": 2, "skipped": 0, "failed": 0, "not_run": 0},
               "rendered_audio_seconds": 60.0 * n, "wall_seconds": 12.0}
    return batch.BatchResult(rows, summary, False)


def test_batch_picture_of_ten_clips_names_each_with_its_f0():
    from audition.plots.batch import batch_figure

    result = _batch_result()
    fig = batch_figure(result, "itu468", budget_db=1.0)
    gain_ax = fig.axes[0]
    numbers = sorted(int(t.get_text()) for t in gain_ax.texts if t.get_text().isdigit())
    assert numbers == list(range(1, 9))  # the 8 rendered clips, each numbered
    key = next(t.get_text() for t in fig.texts if "clip" in t.get_text() and " f0" in t.get_text())
    for r in result.rows:
        if r["status"] == "done":
            assert f"{r['f0_hz'] / 1000:.2f} kHz" in key
    assert "clip3.wav" in key and "clip7.wav" in key  # no filter, listed as such
    assert_no_overlaps(fig)
    assert_line_labels_clear(gain_ax, fig)
    words = all_words(fig)
    assert "ITU-R 468-weighted" in words and not any(b in words.lower() for b in BANNED)


def test_batch_picture_judges_in_hiss_heard_when_the_clips_were_planned_by_it():
    from audition.plots.batch import batch_figure

    result = _batch_result()
    fig = batch_figure(result, "itu468", budget_db=1.0, measure="heard")
    ax = fig.axes[0]
    done = [r for r in result.rows if r["status"] == "done"]
    measured = next(line for line in ax.lines if line.get_label() == "rendered: measured on the output")
    predicted = next(line for line in ax.lines if line.get_label() == "rendered: predicted from the survey")
    np.testing.assert_array_equal(measured.get_ydata(), [r["measured_hiss_heard_reduction_pct"] for r in done])
    np.testing.assert_array_equal(predicted.get_ydata(), [r["predicted_hiss_heard_reduction_pct"] for r in done])
    assert ax.get_ylabel() == "hiss heard taken away (%, ISO 532-1)"
    key = next(t.get_text() for t in fig.texts if "clip" in t.get_text() and " f0" in t.get_text())
    assert f"-{done[0]['measured_hiss_heard_reduction_pct']:.0f} %" in key
    assert_no_overlaps(fig)


def test_realize_picture_shows_the_flat_loss_of_the_load_as_a_level_offset():
    from audition.plots.realize import realisation_figure

    d = _spec(9000.0, q=0.8)
    load = 10000.0
    real = realize.realise(d, "series-rlc", load_ohm=load, source_ohm=600.0)
    fig = realisation_figure(real, None)
    ax2 = fig.axes[1]
    line = next(x for x in ax2.lines if x.get_label().startswith("flat loss from the load"))
    st = real.stages[0]
    rt = st.parts["r_ohm"] + 600.0
    # circuit theory: H0 = RL / (RL + Rt) with the load across C (audition/realize/stages.py, series_rlc)
    assert line.get_ydata()[0] == pytest.approx(20 * math.log10(load / (load + rt)), abs=1e-6)
    note = next(t.get_text() for t in ax2.texts if "audio band" in t.get_text())
    assert "beyond the flat loss" in note
    assert_no_overlaps(fig)


def test_every_frequency_axis_reads_20_50_100_to_20k(survey):
    # What a technician reads on a log-frequency axis: 20, 50, 100 ... 1k ... 10k, 20k, never 10^3
    # (common practice of audio measurement charts, no source).
    from audition.plots.plan import plan_figure, response_figure as report_response
    from audition.plots.realize import coefficients_figure, realisation_figure
    from audition.plots.response import response_figure
    from audition.plots.survey import survey_figure

    d = _spec(8000.0, order=4, alignment="butterworth")
    pl = pipeline.plan_survey(survey, pipeline.NoiseReference(), pipeline.PlanSettings())
    figures = {"survey": survey_figure(survey, d, "take.wav"), "plan": plan_figure(survey, pl, "take.wav"),
               "response": response_figure(d), "report response": report_response(d),
               "realize": realisation_figure(realize.realise(d, "sallen-key"), None),
               "coefficients": coefficients_figure(realize.quantise(d))}
    readable = {"20", "50", "100", "200", "500", "1k", "2k", "5k", "10k", "20k"}
    for name, fig in figures.items():
        drawn(fig)
        logs = [ax for ax in fig.axes if ax.get_xscale() == "log"]
        shown = [[t.get_text() for t in ax.get_xticklabels() if t.get_visible() and t.get_text()] for ax in logs]
        assert any(shown), name  # axes sharing x with the one below show none of their own
        for labels in shown:
            assert set(labels) <= readable, (name, labels)


@pytest.mark.parametrize("target", ["series-rlc", "sallen-key"])
def test_circuit_drawing_names_every_part_with_its_value(tmp_path, target):
    pytest.importorskip("schemdraw")
    from audition.plots.circuit import eng, figure, write_circuit

    d = _spec(7000.0, order=3, alignment="butterworth")
    real = realize.realise(d, target, load_ohm=10000.0 if target == "series-rlc" else None)
    fig = figure(real)
    words = " ".join(t.get_text() for ax in fig.axes for t in ax.texts)
    units = {"_ohm": "Ω", "_henry": "H", "_farad": "F"}
    for st in real.stages:
        for k, v in st.parts.items():
            unit = next(u for s, u in units.items() if k.endswith(s))
            assert eng(v, unit) in words, (k, v)
    for ext in ("png", "svg"):
        path = tmp_path / f"c.{ext}"
        write_circuit(real, path)
        head = path.read_bytes()[:200]
        assert head.startswith(b"\x89PNG") if ext == "png" else b"<svg" in head or b"<?xml" in head
    assert [p for p in os.listdir(tmp_path) if p.startswith(".")] == []
