"""The HTML report read as a person reads it: parsed with the standard library's html.parser.

Sources: the binomial p-value is checked against scipy.stats.binomtest (reference library);
the number formats (peaks to 2 decimals, SHA-256 as 64 hex digits, FIPS 180-4) are the
report's stated rules; everything else here is common practice, no source.
"""

import hashlib
import json
import re
from functools import lru_cache
from html.parser import HTMLParser

import pytest
from scipy import stats

from audition import report, synth
from audition.cli import main
from audition.errors import BadInputFile
from audition.io import writer
from audition.listen.abx import AbxSession

RATE = 44100


@lru_cache(maxsize=None)
def clip():
    # Our own scenario, seed stated: 4 s mono, white hiss at -45 dBFS, programme rolling off above 4 kHz.
    return synth.synthesise(seconds=4.0, rate_hz=RATE, channels=1, hiss_dbfs=-45.0, hiss="white",
                            lead_in_seconds=1.2, seed=21, programme_top_hz=4000.0)


class Page(HTMLParser):
    """Visible text per table cell, the header rows, and the CSS."""

    def __init__(self):
        super().__init__()
        self.cells, self.rows, self.style, self.text = [], [], "", []
        self._in, self._cell, self._row, self._thead = None, None, None, False

    def handle_starttag(self, tag, attrs):
        if tag == "style":
            self._in = "style"
        elif tag == "thead":
            self._thead = True
        elif tag == "tr":
            self._row = []
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag == "style":
            self._in = None
        elif tag == "thead":
            self._thead = False
        elif tag in ("td", "th") and self._cell is not None:
            text = "".join(self._cell).strip()
            self.cells.append(text)
            self._row.append((tag, text, self._thead))
            self._cell = None
        elif tag == "tr":
            self.rows.append(self._row)

    def handle_data(self, data):
        if self._in == "style":
            self.style += data
            return
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def parse(text) -> Page:
    p = Page()
    p.feed(text)
    return p


def abx_log(tmp_path, right=12, trials=16, seed=4):
    s = AbxSession(trials, seed=seed, settings={"versions": [{"label": "original"}, {"label": "f0 8 kHz"}]})
    for i in range(trials):
        s.answer(s.x if i < right else ("A" if s.x == "B" else "B"))
    path = tmp_path / "abx.json"
    path.write_text(json.dumps(s.to_dict()))
    return path


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    src = tmp / "take.wav"
    writer.write_clip(src, clip().mix, RATE, "PCM_24")
    log = abx_log(tmp)
    args = ["render", str(src), str(tmp / "out.wav"), "--auto", "--report", str(tmp / "r.html"), "--quiet",
            "--carrier-id", "C-0412 side A", "--operator", "J. Doe", "--playback-chain", "deck 3, 120 µs, ADC 2",
            "--note", "second pass after cleaning the heads", "--abx-log", str(log)]
    assert main(args) == 0
    page = (tmp / "r.html").read_text(encoding="utf-8")
    side = json.loads((tmp / "out.wav.json").read_text())
    return page, side, log


def test_no_raw_json_null_none_or_nan_anywhere_a_person_reads(rendered):
    page, _, _ = rendered
    p = parse(page)
    visible = " ".join(p.text)
    for word in ("null", "None", "nan", "NaN", "inf", "true(?! peak)", "false"):  # "true peak" is a term
        assert not re.search(rf"\b{word}\b", visible), word
    assert "{" not in visible and "}" not in visible and '":' not in visible


def test_who_and_what_reach_the_page_and_the_sidecar(rendered):
    page, side, _ = rendered
    p = parse(page)
    for v in ("C-0412 side A", "J. Doe", "deck 3, 120 µs, ADC 2", "second pass after cleaning the heads"):
        assert v in p.cells
    assert side["transfer"] == {"carrier_id": "C-0412 side A", "operator": "J. Doe",
                                "playback_chain": "deck 3, 120 µs, ADC 2",
                                "note": "second pass after cleaning the heads"}
    assert side["input"]["sha256"] in p.cells


def test_peaks_have_two_decimals_and_match_the_sidecar(rendered):
    page, side, _ = rendered
    p = parse(page)
    row = dict((r[0][1], r[1][1]) for r in p.rows if len(r) == 2)
    assert re.fullmatch(r"-?\d+\.\d{2} dBFS", row["sample peak"])
    assert re.fullmatch(r"-?\d+\.\d{2} dBTP", row["true peak (ITU-R BS.1770-4, 4× oversampled)"])
    assert float(row["sample peak"].split()[0]) == pytest.approx(side["peak_dbfs"], abs=0.005)
    # no long raw floats anywhere on the page (a sidecar float has ~16 digits)
    assert not re.search(r"\d\.\d{5,}", " ".join(p.text))


def test_layout_rules_text_left_no_empty_header_rows_no_words_broken(rendered):
    page, _, _ = rendered
    p = parse(page)
    assert "break-all" not in p.style
    assert re.search(r"\.fixity\s*\{[^}]*overflow-wrap:\s*anywhere", p.style)
    # overflow-wrap: anywhere only on the fixity class (hashes and paths)
    assert len(re.findall(r"overflow-wrap:\s*anywhere", p.style)) == 1
    for r in p.rows:
        heads = [t for tag, t, thead in r if thead]
        if heads:
            assert any(heads), "a header row with no words"
    # numbers are right-aligned by class; nothing else is
    assert re.search(r"th, td \{[^}]*text-align: left", p.style)


def test_abx_summary_counts_again_and_agrees_with_scipy(rendered, tmp_path):
    page, side, log = rendered
    s = side["abx"]
    assert (s["trials"], s["correct"]) == (16, 12)
    # scipy.stats.binomtest (reference library): one-sided, p = 1/2
    assert s["p_value"] == pytest.approx(stats.binomtest(12, 16, 0.5, alternative="greater").pvalue, rel=1e-12)
    assert s["sha256"] == hashlib.sha256(log.read_bytes()).hexdigest()
    p = parse(page)
    assert "0.0384" in p.cells and "12" in p.cells and "16 of 16" in p.cells
    # a log whose own "result" was tampered with is counted from its answers all the same
    data = json.loads(log.read_text())
    data["result"]["correct"] = 16
    bad = tmp_path / "edited.json"
    bad.write_text(json.dumps(data))
    assert report.abx_summary(bad)["correct"] == 12


@pytest.mark.parametrize("content", [b"not json", b'{"kind": "other"}', b'{"kind": "abx", "answers": [{}]}'])
def test_a_bad_abx_log_is_one_line_and_exit_2_before_anything_is_written(tmp_path, capsys, content):
    src = tmp_path / "in.wav"
    writer.write_clip(src, clip().mix, RATE, "PCM_16")
    log = tmp_path / "log.json"
    log.write_bytes(content)
    with pytest.raises(BadInputFile):
        report.abx_summary(log)
    rc = main(["render", str(src), str(tmp_path / "o.wav"), "--f0", "8000", "--abx-log", str(log)])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and str(log) in err
    assert not (tmp_path / "o.wav").exists() and not (tmp_path / "o.wav.json").exists()


def test_output_fixity_is_shown_when_the_record_has_it():
    digest = hashlib.sha256(b"output bytes").hexdigest()
    side = {"input": {"path": "/a/in.wav", "sha256": "0" * 64, "size_bytes": 10},
            "output": {"path": "/a/out.wav", "sha256": digest, "size_bytes": 2048},
            "peak_dbfs": -3.7900694947850915, "true_peak_dbtp": None, "clipped_samples": 0}
    rows = dict(report.record_rows(side, {"input": "/a/in.wav"}))
    assert digest in rows["output SHA-256"] and "2,048 bytes" in rows["output size"]
    assert dict(report.levels_rows(side, {}))["sample peak"] == "-3.79 dBFS"
    assert dict(report.levels_rows(side, {}))["true peak (ITU-R BS.1770-4, 4× oversampled)"] == "digital silence"
    # without it, no empty row
    side["output"] = {"path": "/a/out.wav"}
    assert "output SHA-256" not in dict(report.record_rows(side, {}))


@pytest.mark.parametrize("value, expected", [(None, "—"), (float("nan"), "—"), (True, "yes"), (2000.0, "2,000"),
                                             (0.70710678, "0.7071"), ([1, 2], "1, 2"), ({"a_hz": 1.5}, "a (Hz) 1.5")])
def test_plain_values_for_people(value, expected):
    assert report.plain(value) == expected


def test_number_rounds_without_negative_zero():
    # common practice, no source: "-0.00" reads as a loss where there is none
    assert report.number(-0.001) == "0.00"
    assert report.number(-3.789, 2, " dB", signed=True) == "-3.79 dB"
    assert report.number(1234.4, 0, " Hz") == "1,234 Hz"
