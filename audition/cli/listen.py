"""``audition listen``: hear the original against a filtered version (or two candidates), level-matched."""

from __future__ import annotations

import json
import os
import sys

from audition.cli.filteropts import add_filter_options, add_source_options

HELP = "play the original and filtered versions through the sound card, switching instantly, loudness-matched"

DESCRIPTION = """\
Play a region of IN as A (the original) and B (IN through the filter, the plan or the preset), and with
--against as C (a second candidate), switching between them at the same point in the music with a short
equal-power crossfade. Every version is rendered in memory before playback (a region may be up to
5 minutes of stereo at 48 kHz, 10 of mono) and, unless --no-level-match, given the gain that makes its
ITU-R BS.1770-4 integrated loudness over the region equal to the quietest one's, because a louder version
sounds better. Playback starts 20 dB down and ramps up over --ramp-seconds; a limiter holds the output
below --ceiling. Keep monitoring at a moderate level: prolonged loud listening damages hearing; follow
your workplace's noise-at-work rules.

Keys: a/b/c hear that version, tab the next, space pause, left/right 2 s back/on, 0 loop start,
+/- volume 1 dB, h key list, q quit. --blind runs ABX trials instead: a/b/x to hear A, B or the hidden X,
1 to answer "X is A", 2 "X is B"; at the end the number right, the one-sided binomial p-value and a JSON
log of the session (in $XDG_DATA_HOME/audition, by default ~/.local/share/audition, or at --log).
--script plays a timed sequence without keys and exits.

Sample rates: the stream opens at the file's rate when the device takes it. A sound server (PulseAudio,
PipeWire) takes any rate and converts to the rate its output runs at with its own converter; PulseAudio
16's default one (speex-float-1), going from 44.1 to 48 kHz, takes about 2.5 dB at 18 kHz and 8 dB at
20 kHz off every version, the original included. --device-rate HZ (the server's rate) converts the region here
instead, flat to 20 kHz, before playback. A device that refuses the file's rate gets its own default rate,
converted here the same way.
Needs PortAudio (Debian/Ubuntu: apt-get install libportaudio2)."""


def add_parser(sub) -> None:
    import argparse

    p = sub.add_parser("listen", help=HELP, description=DESCRIPTION,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("input", metavar="IN", nargs="?", help="the sound file (only read)")
    add_filter_options(p, title="filter of B")
    src = add_source_options(p, title="where the filter of B comes from")
    src.add_argument("--against", metavar="FILTER", help="C, a second candidate: F0 or F0:Q (second-order "
                     "low-pass, same --method), a plan file, or a preset name; with --blind, B and C are compared")
    reg = p.add_argument_group("region and playback")
    reg.add_argument("--start", type=float, metavar="S", help="loop start, seconds into IN (default 0)")
    reg.add_argument("--end", type=float, metavar="S", help="loop end, seconds (default: the end of IN)")
    reg.add_argument("--no-level-match", dest="level_match", action="store_false",
                     help="play every version at its own level (the louder one will tend to sound better)")
    reg.add_argument("--device", metavar="NAME", help="output device: index or part of its name; "
                     "'list' lists the output devices and exits")
    reg.add_argument("--device-rate", type=float, metavar="HZ",
                     help="open the device at HZ, converting the region here first when the file's rate differs "
                     "(default: the file's rate; see Sample rates above)")
    reg.add_argument("--block", type=int, default=512, metavar="FRAMES",
                     help="frames per block (default 512, 11.6 ms at 44.1 kHz): a switch lands within one block")
    reg.add_argument("--volume", type=float, default=0.0, metavar="DB",
                     help="volume setting at the start, dB, at most 0 (default 0 = the matched level)")
    reg.add_argument("--ceiling", type=float, default=-1.0, metavar="DBFS",
                     help="limiter ceiling, dBFS sample peak (default -1)")
    reg.add_argument("--ramp-seconds", type=float, default=1.0, metavar="S",
                     help="time to ramp up from 20 dB below the volume at the start (default 1)")
    reg.add_argument("--script", metavar="SEQUENCE", help="play a timed sequence and exit, e.g. \"A:2,B:2,A:2\" "
                     "(letter:seconds; no keys needed)")
    bl = p.add_argument_group("blind test (ABX)")
    bl.add_argument("--blind", action="store_true", help="ABX trials: X is A or B at random; say which")
    bl.add_argument("--trials", type=int, default=16, metavar="N", help="number of trials (default 16)")
    bl.add_argument("--seed", type=int, metavar="N", help="seed of the draw of X (default: from the clock; "
                    "it is written to the log)")
    bl.add_argument("--log", metavar="FILE.json", help="session log (default: listen-abx-<UTC time>.json in "
                    "$XDG_DATA_HOME/audition, i.e. ~/.local/share/audition unless XDG_DATA_HOME is set)")
    p.set_defaults(run=run)


def describe_design(d) -> str:
    from audition.cli.presets import describe
    from audition.plan.presets import FilterSpec

    return "low-pass " + describe(FilterSpec.from_design(d, "b"))


def design_b(args, rate_hz):
    """(name, design) of B from the filter options, --plan or --preset."""
    from audition.plan import presets
    from audition.cli.filteropts import filter_source, no_filter

    spec, _ = filter_source(args)
    if spec is None:
        raise no_filter(what="B a filter")
    d = presets.check_design(spec, rate_hz, args.input)
    if args.plan:
        return f"plan {os.path.basename(args.plan)} ({describe_design(d)})", d
    if args.preset:
        return f"preset {spec.name} ({describe_design(d)})", d
    return describe_design(d), d


def design_against(text: str, args, rate_hz):
    """(name, design) of C from ``--against``: F0[:Q], a plan file or a preset name."""
    from audition import design
    from audition.plan import presets
    from audition.errors import BadParameter

    t = text.strip()
    if t.endswith(".toml") or os.path.isfile(t):
        d = presets.check_design(presets.load(t), rate_hz)
        return f"plan {os.path.basename(t)} ({describe_design(d)})", d
    if t[:1].isdigit():
        f0_text, _, q_text = t.partition(":")
        try:
            f0, q = float(f0_text), (float(q_text) if q_text else None)
        except ValueError:
            raise BadParameter(f"--against {t!r}: F0 or F0:Q in Hz and a plain number (e.g. 7000:0.8), "
                               "a plan file or a preset name") from None
        try:
            d = design.lowpass(f0, rate_hz, q=q, method=args.method or "bilinear")
        except BadParameter as exc:
            raise BadParameter(f"--against {t!r} at {rate_hz:g} Hz: {exc}") from None
        return describe_design(d), d
    spec = presets.find(t)
    d = presets.check_design(spec, rate_hz)
    return f"preset {spec.name} ({describe_design(d)})", d


def check_options(args) -> None:
    from audition.errors import BadParameter

    if args.input is None:
        raise BadParameter("give the sound file IN (only --device list works without one)")
    if args.blind and args.script:
        raise BadParameter("--blind and --script exclude each other: a blind test needs a listener's answers")
    if not -60.0 <= args.ceiling <= 0.0:
        raise BadParameter(f"--ceiling {args.ceiling:g}: must lie in -60 ... 0 dBFS")
    if not -60.0 <= args.volume <= 0.0:
        raise BadParameter(f"--volume {args.volume:g}: must lie in -60 ... 0 dB (0 = the matched level)")
    if not 0.0 <= args.ramp_seconds <= 30.0:
        raise BadParameter(f"--ramp-seconds {args.ramp_seconds:g}: must lie in 0 ... 30 s")
    if not 1 <= args.trials <= 1000:
        raise BadParameter(f"--trials {args.trials}: must be 1 ... 1000")
    if args.device_rate is not None and not 8000.0 <= args.device_rate <= 768000.0:
        raise BadParameter(f"--device-rate {args.device_rate:g}: must lie in 8,000 ... 768,000 Hz")


def list_devices(sd) -> int:
    from audition.listen.device import default_output, output_devices

    devices = output_devices(sd)
    default = default_output(sd)
    if not devices:
        print("no output devices")
    for d in devices:
        mark = "*" if d["index"] == default else " "
        print(f"{mark}{d['index']:>3}  {d['name']}  ({d['hostapi']}, {d['channels']} out, "
              f"{d['default_rate_hz']:g} Hz)")
    if devices:
        print("* the default; give --device INDEX or a part of the name")
    return 0


def output_note(region) -> str:
    """How the region reaches the device: the stream's rate and who converts it."""
    if region.converted:
        return f"stream {region.rate_hz:g} Hz, converted here from {region.file_rate_hz:g} Hz"
    return f"stream {region.rate_hz:g} Hz, the file's rate"


def summary_lines(region, mixer, device) -> list[str]:
    from audition.listen.screen import CAUTION

    lines = [f"{region.path}: loop {region.start_seconds:.3f} s + {region.seconds:.3f} s, "
             f"{region.file_rate_hz:g} Hz, {region.channels} ch -> device {device['index']} ({device['name']}), "
             f"{output_note(region)}",
             f"  block {mixer.max_block} frames = {mixer.block_ms:.1f} ms, crossfade {mixer.fade_ms:.1f} ms, "
             f"limiter ceiling {mixer.ceiling_dbfs:g} dBFS"]
    for v in region.versions:
        lines.append(f"  {v.label}: {v.name}   {v.loudness_lkfs:.2f} LKFS, gain {v.gain_db:+.2f} dB"
                     + ("" if region.level_matched else " (level matching off)"))
    lines.append(CAUTION)
    return lines


def data_folder() -> str:
    """The per-user folder for audition's own records: $XDG_DATA_HOME/audition, else ~/.local/share/audition.

    The XDG Base Directory Specification: a relative or empty XDG_DATA_HOME is ignored.
    """
    base = os.environ.get("XDG_DATA_HOME", "")
    if not os.path.isabs(base):
        base = os.path.join(os.path.expanduser("~"), ".local", "share")
    return os.path.join(base, "audition")


def default_log_name() -> str:
    import datetime as dt

    return os.path.join(data_folder(),
                        "listen-abx-" + dt.datetime.now(dt.timezone.utc).strftime("%Y%m%dT%H%M%SZ") + ".json")


def write_log(path: str, data: dict) -> None:
    """Write the session log atomically (a temporary file renamed into place)."""
    import tempfile

    from audition.errors import OutputRefused

    folder = os.path.dirname(os.path.abspath(path))
    try:
        os.makedirs(folder, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".listen-", suffix=".json", dir=folder)
        with os.fdopen(fd, "w") as f:
            json.dump(data, f, indent=2)
            f.write("\n")
        os.replace(tmp, path)
    except OSError as exc:
        raise OutputRefused(f"{path!r}: cannot write the session log ({exc.strerror})") from None


def has_terminal() -> bool:
    """True when keys can be read and the screen drawn (standard input and output are a terminal)."""
    return sys.stdin.isatty() and sys.stdout.isatty()


def run(args) -> int:
    from audition.errors import OutputRefused
    from audition.io import reader
    from audition.listen.device import check_block, load_sounddevice, output_rate, pick_output
    from audition.listen.engine import Mixer, parse_script, script_schedule
    from audition.listen.sources import build_region, region_frames_for

    if args.device is not None and args.device.strip().lower() == "list":
        return list_devices(load_sounddevice())
    check_options(args)
    check_block(args.block)
    # The sound stack first: no point rendering when nothing can be heard.
    sd = load_sounddevice()
    device = pick_output(sd, args.device)
    info = reader.info(args.input)
    candidates = [("original", None), design_b(args, info.rate_hz)]
    if args.against:
        candidates.append(design_against(args.against, args, info.rate_hz))
    if args.blind and args.against:
        candidates = candidates[1:]  # the two candidates against each other
    log_path = None
    if args.blind:
        from audition.listen.abx import too_few_trials

        few = too_few_trials(args.trials)
        if few:
            print(f"warning: --trials {args.trials}: {few}", file=sys.stderr, flush=True)
        log_path = os.path.abspath(args.log or default_log_name())
        if os.path.exists(log_path):
            raise OutputRefused(f"{log_path!r}: exists; give another --log")
    region_frames_for(info, args.start, args.end)  # a bad region is said before anything else
    if not args.script and not has_terminal():
        from audition.errors import BadParameter

        raise BadParameter("the listening screen needs a terminal for its keys; use --script SEQUENCE to play "
                           "without one")
    out_channels = max(info.channels, min(2, device["channels"]))
    rate_hz = output_rate(sd, device, info.rate_hz, out_channels, args.device_rate)
    region = build_region(args.input, candidates, start_seconds=args.start, end_seconds=args.end,
                          level_match=args.level_match, labels="ABC", out_rate_hz=rate_hz)
    common = dict(region_frames=region.region_frames, out_channels=out_channels, ceiling_dbfs=args.ceiling,
                  ramp_seconds=args.ramp_seconds, max_block=args.block)
    sources = [v.samples for v in region.versions]
    gains = [v.gain_db for v in region.versions]

    if args.script:
        steps = parse_script(args.script, [v.label for v in region.versions])
        probe = Mixer(sources, gains, region.rate_hz, **common)
        initial, events = script_schedule(steps, region.rate_hz, probe.fade_frames)
        mixer = Mixer(sources, gains, region.rate_hz, initial=initial, schedule=events, **common)
        mixer.volume_db = args.volume
        for line in summary_lines(region, mixer, device):
            print(line)
        print(f"  script: {', '.join(f'{region.versions[s].label} {t:g} s' for s, t in steps)}", flush=True)
        from audition.listen.device import play_until_finished

        play_until_finished(sd, mixer, device)
        print(f"played {mixer.clock / region.rate_hz:.3f} s in {mixer.blocks} blocks; underruns: {mixer.underruns}")
        return 0

    from audition.listen.abx import AbxSession
    from audition.listen.screen import Screen, run_terminal

    mixer = Mixer(sources, gains, region.rate_hz, blind=args.blind, **common)
    mixer.volume_db = args.volume
    abx = None
    if args.blind:
        import time

        seed = args.seed if args.seed is not None else int(time.time()) % (2 ** 31)
        settings = {"input": os.path.abspath(args.input), "start_seconds": region.start_seconds,
                    "region_seconds": region.seconds, "rate_hz": region.file_rate_hz,
                    "stream_rate_hz": region.rate_hz, "converted_here": region.converted,
                    "channels": region.channels,
                    "level_matched": region.level_matched, "versions": [v.to_dict() for v in region.versions],
                    "device": device["name"], "block_frames": mixer.max_block, "crossfade_ms": mixer.fade_ms,
                    "ceiling_dbfs": mixer.ceiling_dbfs}
        abx = AbxSession(args.trials, seed, settings)
    screen = Screen(region, mixer, abx, device_name=f"{device['index']} {device['name']}",
                    output_note=output_note(region), log_path=log_path)
    try:
        run_terminal(sd, screen, device)
    finally:
        if abx is not None:
            log = abx.to_dict()
            log["completed"] = abx.done
            log["underruns"] = mixer.underruns
            write_log(log_path, log)
    if abx is not None:
        print(f"blind test: {abx.verdict()}")
        few = too_few_trials(abx.trials)
        if few:
            print(f"warning: {few}")
        print(f"session log written to {log_path}")
    print(f"underruns: {mixer.underruns}")
    return 0
