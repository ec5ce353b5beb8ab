"""Faults a hostile but realistic user meets: side outputs against inputs, racing writers, nonsense values.

Every refusal must be one line on stderr with exit status 2, and every input must
come out byte-identical. The rules themselves are common practice for archive
tools (never write over the material being read; no source); the operating-system
behaviour relied on is POSIX: link(2) fails with EEXIST on an existing name, and
Linux renameat2(2) with RENAME_NOREPLACE does the same (Linux man-pages).
"""

from __future__ import annotations

import errno
import hashlib
import os
import subprocess
import sys

import numpy as np
import pytest
import soundfile as sf

from audition.cli import main
from audition.errors import OutputRefused

RATE = 44100


def _sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def _clip(path, seconds=2.0, seed=0, rate=RATE, level=0.1):
    """Hiss with a louder tone burst in the middle (so a noise reference can be found)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    x = rng.normal(0.0, 0.003, n)
    t = np.arange(n) / rate
    mid = (t > seconds * 0.4) & (t < seconds * 0.9)
    x[mid] += level * np.sin(2 * np.pi * 440.0 * t[mid])
    sf.write(path, x[:, None], rate, subtype="PCM_16")
    return str(path)


@pytest.fixture
def files(tmp_path):
    """A recording, a noise clip and a plan file, with their SHA-256 to compare afterwards."""
    rec = _clip(tmp_path / "t.wav")
    noise = tmp_path / "n.wav"
    sf.write(noise, np.random.default_rng(1).normal(0.0, 0.003, (RATE, 1)), RATE, subtype="PCM_16")
    plan = tmp_path / "p.toml"
    plan.write_text('[lowpass]\nf0_hz = 9000.0\nq = 0.7071\n')
    paths = {"t": rec, "n": str(noise), "p": str(plan)}
    return paths, {k: _sha(v) for k, v in paths.items()}


def _one_line_exit_2(capsys, argv) -> str:
    try:
        rc = main(argv)
    except SystemExit as exc:  # argparse's own refusals exit from the parser
        rc = exc.code
    err = capsys.readouterr().err
    assert rc == 2, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def _unchanged(hashes, paths):
    for k, h in hashes.items():
        assert _sha(paths[k]) == h, f"{paths[k]} was changed"


# ---------------------------------------------------------------------------
# Item 1: a side output never replaces an input, nor an existing file without --overwrite
# ---------------------------------------------------------------------------

SIDE_CASES = {
    "survey --plot the input": (lambda d: ["survey", d["t"], "--plot", d["t"]], "is the input"),
    "plan --plot the input": (lambda d: ["plan", d["t"], "--plot", d["t"]], "is the input"),
    "plan --save the noise clip": (lambda d: ["plan", d["t"], "--noise-clip", d["n"], "--save", d["n"]],
                                   "is the input"),
    "plan --save the noise clip, --overwrite": (
        lambda d: ["plan", d["t"], "--noise-clip", d["n"], "--save", d["n"], "--overwrite"], "is the input"),
    "render OUT the noise clip": (lambda d: ["render", d["t"], d["n"], "--f0", "9000", "--noise-clip", d["n"],
                                             "--overwrite"], "is the input"),
    "render --report the noise clip": (lambda d: ["render", d["t"], d["t"] + ".out.wav", "--f0", "9000",
                                                  "--noise-clip", d["n"], "--report", d["n"], "--overwrite"],
                                       "is the input"),
    "render OUT the plan file": (lambda d: ["render", d["t"], d["p"], "--plan", d["p"], "--overwrite"],
                                 "is the input"),
    "response --plot the plan file": (lambda d: ["response", "--plan", d["p"], "--plot", d["p"], "--overwrite"],
                                      "is the input"),
    "realize --header the plan file": (lambda d: ["realize", "--plan", d["p"], "--as", "coefficients",
                                                  "--header", d["p"][:-5] + ".h", "--overwrite"], None),
    "plan --save over an existing file": (lambda d: ["plan", d["t"], "--save", d["p"]], "exists; give --overwrite"),
    "response --plot over an existing file": (lambda d: ["response", "--f0", "9000", "--plot", d["p"]],
                                              "exists; give --overwrite"),
}


@pytest.mark.parametrize("case", sorted(SIDE_CASES))
def test_side_output_never_replaces_an_input_or_an_existing_file(files, capsys, case):
    paths, hashes = files
    argv, needle = SIDE_CASES[case]
    if case == "realize --header the plan file":  # the plan file itself, through a hard link named .h
        os.link(paths["p"], paths["p"][:-5] + ".h")
        needle = "is the input"
    line = _one_line_exit_2(capsys, argv(paths))
    assert needle in line
    _unchanged(hashes, paths)


def test_symlink_and_hard_link_to_the_input_are_the_input(files, capsys, tmp_path):
    paths, hashes = files
    os.symlink(paths["t"], tmp_path / "sym.png")
    os.link(paths["t"], tmp_path / "hard.png")
    for name in ("sym.png", "hard.png"):
        line = _one_line_exit_2(capsys, ["survey", paths["t"], "--plot", str(tmp_path / name), "--overwrite"])
        assert "is the input" in line
    other = str(tmp_path / "sub" / ".." / "t.wav")  # another spelling
    os.mkdir(tmp_path / "sub")
    assert "is the input" in _one_line_exit_2(capsys, ["plan", paths["t"], "--save", other, "--overwrite"])
    _unchanged(hashes, paths)


def test_batch_plot_over_a_source_clip_is_refused(tmp_path, capsys):
    src = tmp_path / "src"
    src.mkdir()
    clip = _clip(src / "b.wav")
    before = _sha(clip)
    line = _one_line_exit_2(capsys, ["batch", str(src), str(tmp_path / "out"), "--f0", "9000", "--plot", clip])
    assert "is the input" in line
    assert _sha(clip) == before and not (tmp_path / "out").exists()


@pytest.mark.parametrize("kind", ["fifo", "folder"])
def test_an_existing_path_that_is_not_a_regular_file_is_never_replaced(files, capsys, tmp_path, kind):
    """A FIFO (device nodes need root to make; the check is the same S_ISREG test) or a folder."""
    paths, hashes = files
    node = tmp_path / "node"
    os.mkfifo(node) if kind == "fifo" else node.mkdir()
    for argv in (["render", paths["t"], str(node), "--f0", "9000", "--overwrite"],
                 ["survey", paths["t"], "--plot", str(node), "--overwrite"],
                 ["response", "--f0", "9000", "--plot", str(node), "--overwrite"]):
        line = _one_line_exit_2(capsys, argv)
        assert ("not a regular file" if kind == "fifo" else "is a folder") in line
    assert (node.is_fifo() if kind == "fifo" else node.is_dir())
    _unchanged(hashes, paths)


def test_device_node_refused_even_with_overwrite(files, capsys, tmp_path):
    paths, hashes = files
    dev = tmp_path / "nulldev"
    os.symlink("/dev/null", dev)  # a link to a character device: the path resolves to a device node
    line = _one_line_exit_2(capsys, ["render", paths["t"], str(dev), "--f0", "9000", "--overwrite"])
    assert "not a regular file" in line
    assert os.path.islink(dev)


def test_side_outputs_replace_an_existing_file_with_overwrite(files, capsys, tmp_path):
    paths, _ = files
    png = tmp_path / "r.png"
    png.write_bytes(b"old")
    assert main(["response", "--f0", "9000", "--plot", str(png), "--overwrite"]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    capsys.readouterr()


# ---------------------------------------------------------------------------
# Item 6: the final rename of a new file never replaces one that appeared meanwhile
# ---------------------------------------------------------------------------

def test_new_file_is_not_renamed_over_one_that_appeared_meanwhile(tmp_path):
    from audition.io.sidecar import PreparedText

    target = tmp_path / "r.txt"
    w = PreparedText(target, "mine\n", "report")  # target did not exist: a new file
    target.write_text("another run's\n")           # ... and then it appears
    with pytest.raises(OutputRefused, match="appeared while it was being written"):
        w.commit()
    assert target.read_text() == "another run's\n"
    assert os.listdir(tmp_path) == ["r.txt"]  # no temporary file left


def test_rename_no_replace_falls_back_to_a_hard_link(tmp_path, monkeypatch):
    from audition.io import tempfiles

    monkeypatch.setattr(tempfiles, "_libc_renameat2", lambda: None)  # as where glibc has no renameat2
    a, b = tmp_path / "a", tmp_path / "b"
    a.write_text("a")
    b.write_text("b")
    with pytest.raises(FileExistsError):
        tempfiles.rename_no_replace(str(a), str(b))
    assert b.read_text() == "b"
    b.unlink()
    tempfiles.rename_no_replace(str(a), str(b))
    assert b.read_text() == "a" and not a.exists()


def test_existing_file_is_replaced_with_overwrite(tmp_path):
    from audition.io.guard import Target
    from audition.io.sidecar import write_text

    target = tmp_path / "r.txt"
    target.write_text("old\n")
    write_text(Target(target, overwrite=True), "new\n")
    assert target.read_text() == "new\n"
    with pytest.raises(OutputRefused, match="exists; give --overwrite"):
        write_text(Target(target, overwrite=False, check=False), "newer\n")  # checked again as it is written
    assert target.read_text() == "new\n"


def test_two_concurrent_renders_to_one_new_output_one_refuses(tmp_path):
    """Two processes race to one new output without --overwrite: exactly one writes it, the other exits 2."""
    src = _clip(tmp_path / "in.wav", seconds=20.0)
    before = _sha(src)
    for trial in range(3):
        out = tmp_path / f"o{trial}.wav"
        procs = [subprocess.Popen([sys.executable, "-m", "audition", "render", src, str(out), "--f0", "9000",
                                   "--quiet"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
                 for _ in range(2)]
        results = [(p.wait(timeout=300), p.stderr.read()) for p in procs]
        codes = sorted(rc for rc, _ in results)
        assert codes == [0, 2], results
        err = [e for rc, e in results if rc == 2][0]
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
        assert sf.info(str(out)).frames == sf.info(src).frames
        leftovers = [f for f in os.listdir(tmp_path) if f.endswith(".part")]
        assert leftovers == []
    assert _sha(src) == before


# ---------------------------------------------------------------------------
# Item 10: never a traceback
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("argv,needle", [
    (["render", "{t}", "{o}", "--f0", "9000", "--gain-db", "1e6"], "60 dB"),
    (["render", "{t}", "{o}", "--f0", "9000", "--gain-db", "nan"], "--gain-db"),
    (["render", "{t}", "{o}", "--f0", "9000", "--gain-db", "inf"], "--gain-db"),
    (["render", "{t}", "{o}", "--f0", "9000", "--gain-db=-1e6"], "60 dB"),
    (["survey", "{t}", "--f0", "9000", "--gain-db", "1e6"], "60 dB"),
    (["survey", "{t}", "--f0", "9000", "--gain-db", "nan"], "--gain-db"),
    (["response", "--f0", "9000", "--gain-db", "1e6"], "60 dB"),
    (["response", "--f0", "9000", "--gain-db", "nan"], "--gain-db"),
    (["realize", "--as", "coefficients", "--f0", "9000", "--gain-db", "1e6"], "60 dB"),
    (["realize", "--as", "coefficients", "--f0", "9000", "--gain-db", "inf"], "--gain-db"),
    (["render", "{t}", "{o}", "--plan", "{big}"], "60 dB"),
    (["response", "--plan", "{big}"], "60 dB"),
    (["render", "{t}", "{o}", "--f0", "9000", "--seed", "-1"], "--seed"),
    (["response", "--f0", "9000", "--rate=1e300"], "768000"),
    (["response", "--f0", "9000", "--q", "1e-12"], "Q must satisfy"),
    (["response", "--f0", "9000", "--q", "1e-12", "--method", "matched"], "Q must satisfy"),
    (["response", "--f0", "9000", "--plot", "{dir}"], "is a folder"),
    (["survey", "{t}", "--plot", "{dir}"], "is a folder"),
    (["plan", "{t}", "--plot", "{dir}"], "is a folder"),
    (["realize", "--as", "coefficients", "--f0", "9000", "--plot", "{dir}/x.png/"], "x.png"),
    (["batch", "{t}", "{dir}/out", "--f0", "9000", "--cluster", "tcp://127.0.0.1:9", "--cluster-timeout", "-1"],
     "--cluster-timeout"),
    (["plan", "{t}", "--margin-db", "nan"], "--margin-db"),
    (["plan", "{t}", "--listening-level", "inf"], "--listening-level"),
    (["plan", "{t}", "--noise-span", "nan:1"], "noise span"),
])
def test_nonsense_values_one_line_exit_2(files, capsys, tmp_path, argv, needle):
    paths, hashes = files
    big = tmp_path / "big.toml"
    big.write_text('[lowpass]\nf0_hz = 9000.0\nq = 0.7\ngain_db = 1e6\n')
    (tmp_path / "dir").mkdir()
    subst = {"t": paths["t"], "o": str(tmp_path / "o.wav"), "big": str(big), "dir": str(tmp_path / "dir")}
    line = _one_line_exit_2(capsys, [a.format(**subst) for a in argv])
    if needle:
        assert needle in line
    assert not (tmp_path / "o.wav").exists()
    _unchanged(hashes, paths)


def _full_disk(monkeypatch):
    """Make every picture write fail as a full disk does (ENOSPC)."""
    import matplotlib.figure

    def full(self, *a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", full)


@pytest.mark.parametrize("argv", [
    ["response", "--f0", "9000", "--plot", "{png}"],
    ["survey", "{t}", "--plot", "{png}"],
    ["realize", "--as", "series-rlc", "--f0", "9000", "--trials", "0", "--plot", "{png}"],
])
def test_plot_on_a_full_disk_is_one_line_and_leaves_nothing(files, capsys, tmp_path, monkeypatch, argv):
    paths, hashes = files
    _full_disk(monkeypatch)
    png = tmp_path / "pic" / "x.png"
    png.parent.mkdir()
    line = _one_line_exit_2(capsys, [a.format(t=paths["t"], png=png) for a in argv])
    assert "no space left" in line
    assert os.listdir(png.parent) == []
    _unchanged(hashes, paths)


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a read-only folder; the check cannot fail as root")
def test_plot_in_a_read_only_folder_is_one_line(files, capsys, tmp_path):
    paths, _ = files
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        line = _one_line_exit_2(capsys, ["response", "--f0", "9000", "--plot", str(ro / "x.png")])
        assert "not writable" in line
    finally:
        ro.chmod(0o755)


def test_plot_where_the_file_system_refuses_is_one_line(files, capsys, tmp_path, monkeypatch):
    """A read-only mount, as the temporary file's creation sees it (EROFS; works as root too)."""
    import tempfile

    def erofs(*a, **k):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))

    monkeypatch.setattr(tempfile, "mkstemp", erofs)
    line = _one_line_exit_2(capsys, ["response", "--f0", "9000", "--plot", str(tmp_path / "x.png")])
    assert "Read-only file system" in line


def test_synth_stems_on_a_read_only_mount_is_one_line_and_leaves_nothing(tmp_path, capsys, monkeypatch):
    real_mkdir = os.mkdir

    def erofs(path, *a, **k):
        if str(path).startswith(str(tmp_path)):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real_mkdir(path, *a, **k)

    monkeypatch.setattr(os, "mkdir", erofs)
    line = _one_line_exit_2(capsys, ["synth", str(tmp_path / "m.wav"), "--seconds", "1", "--lead-in", "0.2",
                                     "--stems", str(tmp_path / "stems")])
    assert "--stems" in line and "Read-only file system" in line
    assert os.listdir(tmp_path) == []


# ---------------------------------------------------------------------------
# Item 11: nonsense accepted, or a misleading diagnosis
# ---------------------------------------------------------------------------

def test_response_gain_nan_is_refused_not_printed(capsys):
    line = _one_line_exit_2(capsys, ["response", "--f0", "9000", "--gain-db", "nan", "--json"])
    assert "--gain-db" in line and "finite" in line


@pytest.mark.parametrize("value", ["nan", "30000"])
def test_plan_highpass_nonsense_names_the_high_pass_not_the_budget(files, capsys, value):
    paths, _ = files
    line = _one_line_exit_2(capsys, ["plan", paths["t"], "--highpass", value])
    assert "highpass" in line and "budget" not in line


def test_plan_treble_from_zero_is_refused_like_render(files, capsys, tmp_path):
    paths, _ = files
    plan_line = _one_line_exit_2(capsys, ["plan", paths["t"], "--treble-from", "0"])
    render_line = _one_line_exit_2(capsys, ["render", paths["t"], str(tmp_path / "o.wav"), "--f0", "9000",
                                            "--treble-from", "0"])
    assert "treble-from" in plan_line and "treble-from" in render_line


def test_plan_and_survey_refuse_a_rate_render_refuses(tmp_path, capsys):
    low = tmp_path / "r4k.wav"
    sf.write(low, np.random.default_rng(0).normal(0, 0.1, (8000, 1)), 4000, subtype="PCM_16")
    render_line = _one_line_exit_2(capsys, ["render", str(low), str(tmp_path / "o.wav"), "--f0", "1000"])
    for cmd in ("plan", "survey"):
        line = _one_line_exit_2(capsys, [cmd, str(low)])
        assert "at least 8000 Hz" in line and "at least 8000 Hz" in render_line


def test_lossy_input_advice_can_work(tmp_path, capsys):
    ogg = tmp_path / "t.ogg"
    try:
        sf.write(ogg, np.random.default_rng(0).normal(0, 0.1, (RATE, 1)), RATE, format="OGG", subtype="VORBIS")
    except Exception:  # a libsndfile built without Ogg Vorbis
        pytest.skip("this libsndfile cannot write OGG VORBIS")
    line = _one_line_exit_2(capsys, ["render", str(ogg), str(tmp_path / "o.ogg"), "--f0", "9000"])
    assert "give --subtype" not in line and "WAV or FLAC" in line


@pytest.mark.parametrize("sep,words", [(-6.4, "6.4 dB above"), (3.25, "only 3.2 dB below"), (0.0, "level with")])
def test_separation_is_never_worded_as_a_negative_distance_below(sep, words):
    from audition.survey.noise import NoiseConfidence, below_words

    assert words in below_words(sep)
    fields = {k: None for k in NoiseConfidence.__dataclass_fields__}
    fields.update(grade="low", separation_db=sep, level_spread_db=0.0, noise_seconds=1.0, shape_spread_db=None)
    conf = NoiseConfidence(**fields)
    assert not any("only -" in d for d in conf.doubts())


def test_constant_dc_file_is_said_to_hold_no_signal(tmp_path, capsys):
    dc = tmp_path / "dc.wav"
    sf.write(dc, np.full((RATE, 1), 0.5), RATE, subtype="PCM_16")
    line = _one_line_exit_2(capsys, ["survey", str(dc)])
    # the message after the file's name: pytest's folder (".../pytest-15/...") is not a level
    message = line.split(f"{str(dc)!r}: ", 1)[1]
    assert "no signal" in message and "DC" in message and "-15" not in message  # not "-157 dBFS"


def test_free_space_is_stated_in_units_that_show_it(tmp_path, monkeypatch):
    """200 KiB free must not read "0 MiB free"."""
    from audition.io import messages, writer

    assert messages.size_text(200 * 1024) == "200 KiB"
    assert messages.size_text(1.5 * 2**20) == "1.5 MiB"
    monkeypatch.setattr(writer, "_free_bytes", lambda folder: 200 * 1024)
    with pytest.raises(OutputRefused, match="200 KiB free"):
        writer.AtomicWriter(tmp_path / "o.wav", RATE, 2, format="WAV", subtype="PCM_16", frames_hint=RATE * 10)
    assert os.listdir(tmp_path) == []


def test_synth_on_a_full_disk_leaves_no_empty_folders(tmp_path, capsys, monkeypatch):
    from audition.io import writer

    monkeypatch.setattr(writer, "_free_bytes", lambda folder: 4096)
    line = _one_line_exit_2(capsys, ["synth", str(tmp_path / "m.wav"), "--seconds", "2", "--lead-in", "0.2",
                                     "--stems", str(tmp_path / "a" / "b" / "stems")])
    assert "free" in line
    assert os.listdir(tmp_path) == []


def test_gain_range_in_the_help_agrees_with_the_design_check():
    from audition.cli import filteropts
    from audition.design import checks

    assert filteropts.MAX_GAIN_DB == checks.MAX_GAIN_DB
