"""Plan and preset files: loading, validation messages, round trips, user overrides."""

import json
import math

import numpy as np
import pytest

from audition import design
from audition.plan import presets
from audition.cli import main
from audition.errors import AuditionError, BadInputFile, BadParameter

BUNDLED = sorted(p.stem for p in presets.bundled_folder().glob("*.toml"))


def test_bundled_presets_exist():
    assert len(BUNDLED) >= 6


@pytest.mark.parametrize("name", BUNDLED)
def test_bundled_preset_loads_designs_and_round_trips(name, tmp_path):
    spec = presets.find(name)
    assert spec.name == name
    # Each note says it is a starting point, not a rule (the preset issue's requirement).
    assert "starting point" in spec.note and "not a rule" in spec.note
    for rate in (44100, 48000, 96000):
        d = spec.design(rate)
        assert np.all(np.abs(np.concatenate([np.roots(r[3:]) for r in d.sos])) < 1)
    path = tmp_path / f"{name}.toml"
    path.write_text(spec.to_toml())
    back = presets.load(path)
    np.testing.assert_array_equal(back.design(48000).sos, spec.design(48000).sos)


def test_from_design_round_trip_for_each_kind(tmp_path):
    cases = [
        design.lowpass(9000, 48000, q=0.9, highpass_hz=30),
        design.lowpass(7000, 48000, order=4, alignment="bessel", method="matched"),
        design.from_sections([(9000, 0.54), (9000, 1.31), (12000, None)], 48000),
    ]
    for i, d in enumerate(cases):
        spec = presets.FilterSpec.from_design(d, f"case{i}", "a note with \"quotes\"\nand a newline")
        p = tmp_path / f"c{i}.toml"
        p.write_text(spec.to_toml(predicted={"snr_gain_db": {"a": 3.0}, "treble_loss_db": 0.9}))
        back = presets.load(p)
        assert back.note == spec.note
        np.testing.assert_array_equal(back.design(48000).sos, d.sos)
        assert back.extra["predicted"]["treble_loss_db"] == 0.9


@pytest.mark.parametrize("text,field,allowed", [
    ('name = "x"\n', "lowpass", "[lowpass] table"),
    ('[lowpass]\nq = 0.7\n', "lowpass.f0_hz", "is missing"),
    ('[lowpass]\nf0_hz = -5.0\n', "lowpass.f0_hz", "positive number"),
    ('[lowpass]\nf0_hz = "fast"\n', "lowpass.f0_hz", "positive number"),
    ('[lowpass]\nf0_hz = 9000.0\nalignment = "elliptic"\norder = 4\n', "lowpass.alignment", "allowed are butterworth"),
    ('[lowpass]\nf0_hz = 9000.0\nalignment = "chebyshev"\norder = 4\n', "lowpass.ripple_db", "goes with alignment"),
    ('[lowpass]\nf0_hz = 9000.0\nalignment = "bessel"\norder = 4\nripple_db = 0.5\n', "lowpass.ripple_db", "goes with"),
    ('[lowpass]\nf0_hz = 9000.0\nmethod = "impulse"\n', "lowpass.method", "allowed are bilinear, matched"),
    ('[lowpass]\nf0_hz = 9000.0\ncutoff = 3\n', "lowpass.cutoff", "allowed are"),
    ('[lowpass]\nf0_hz = 9000.0\norder = 2.5\n', "lowpass.order", "integer from 1 to 12"),
    ('[lowpass]\nf0_hz = 9000.0\nq = 0.7\norder = 4\n', "lowpass.q", "one second-order section"),
    ('[lowpass]\nsections = []\n', "lowpass.sections", "non-empty list"),
    ('[lowpass]\nsections = [{ q = 0.7 }]\n', "lowpass.sections[0]", "f0_hz = HZ"),
    ('[lowpass]\nf0_hz = 9000.0\n[highpass]\nq = 3.0\n', "highpass", "f0_hz only"),
    ('speed = 3\n[lowpass]\nf0_hz = 9000.0\n', "speed", "allowed top-level fields"),
])
def test_bad_field_names_file_field_and_allowed(tmp_path, text, field, allowed):
    p = tmp_path / "bad.toml"
    p.write_text(text)
    with pytest.raises(BadInputFile) as info:
        presets.load(p)
    msg = str(info.value)
    assert msg.startswith(str(p)) and repr(field) in msg and allowed in msg


def test_not_toml_and_missing(tmp_path):
    p = tmp_path / "x.toml"
    p.write_text("[lowpass\n")
    with pytest.raises(BadInputFile, match="not a valid TOML"):
        presets.load(p)
    with pytest.raises(BadInputFile, match="no such plan"):
        presets.load(tmp_path / "missing.toml")


def test_f0_above_nyquist_names_file(tmp_path):
    p = tmp_path / "hi.toml"
    p.write_text('[lowpass]\nf0_hz = 30000.0\nq = 0.7\n')
    spec = presets.load(p)
    with pytest.raises(BadParameter) as info:
        presets.check_design(spec, 44100)
    assert str(p) in str(info.value) and "rate=44100 -> 22050 Hz" in str(info.value)


def test_user_presets_override_bundled(tmp_path, monkeypatch):
    monkeypatch.setenv("AUDITION_PRESETS", str(tmp_path))
    (tmp_path / "mine.toml").write_text('name = "cassette-ferric"\nnote = "my own"\n[lowpass]\nf0_hz = 7000.0\nq = 0.6\n')
    spec = presets.find("cassette-ferric")
    assert spec.note == "my own" and spec.f0_hz == 7000.0
    with pytest.raises(AuditionError, match="available are"):
        presets.find("no-such-thing")


def test_cli_presets_json(capsys):
    assert main(["presets", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    names = [p["name"] for p in out["presets"]]
    assert set(BUNDLED) <= set(names)
    assert all(p["note"] for p in out["presets"])


def test_second_order_butterworth_spec_has_q_of_alignment():
    # Alignment definition: second-order Butterworth Q = 1/sqrt(2) (common practice, no source).
    spec = presets.FilterSpec.from_design(design.lowpass(9000, 48000), "b2")
    assert spec.q == pytest.approx(1 / math.sqrt(2), abs=1e-12)


def test_bessel_preset_note_states_what_the_digital_filter_keeps():
    # The open-reel preset's note gives the digital step overshoot at 44.1 and 48 kHz and the spread of its
    # delay from 0 to 10 kHz. Recomputed here: the overshoot from the sections' step response through
    # scipy.signal.sosfilt, the delay from scipy.signal.group_delay (reference library).
    import re

    import scipy.signal as ss

    spec = presets.load(presets.bundled_folder() / "open-reel-19cms.toml")
    assert "transients clean" not in spec.note
    stated = {float(r): float(p) for p, r in re.findall(r"([\d.]+) % at ([\d.]+) kHz", spec.note)}
    assert set(stated) == {44.1, 48.0, 96.0}
    for khz, pct in stated.items():
        d = presets.check_design(spec, khz * 1000.0)
        step = ss.sosfilt(d.sos, np.ones(4096))
        assert (step.max() / step[-1] - 1) * 100 == pytest.approx(pct, abs=0.05), khz
    limit_us = float(re.search(r"within (\d+) microseconds from 0 to 10 kHz", spec.note).group(1))
    for rate in (44100.0, 48000.0):
        d = presets.check_design(spec, rate)
        f = np.linspace(1.0, 10000.0, 2000)
        _, gd = ss.group_delay(ss.sos2tf(d.sos), w=f, fs=rate)
        assert (gd.max() - gd.min()) / rate * 1e6 <= limit_us, rate
