"""Real recordings with hiss of known colour and level, and their truth, for checking the planner.

Outside the repository by default: the clean programmes go to ``/work/corpus/clean`` and the
mixes, hiss stems and manifest to the folder given (default ``/work/corpus/mixes``).

Sources (Debian packages; nothing else is fetched)
--------------------------------------------------
- ``voice``: real speech, the eight spoken channel names of ``alsa-utils``
  (``/usr/share/sounds/alsa/{Front,Rear,Side}_*.wav``, 48 kHz mono, 16-bit), joined with
  0.35 s of digital silence between them.
- ``piano``: a piano piece of our own (``piano.mid``, written by this script), rendered by
  FluidSynth with the sampled FluidR3 General MIDI sound font (``fluid-soundfont-gm``).
- ``ensemble``: strings, piano, double bass and a drum kit (kick, snare, closed and open
  hi-hat, ride, crash) of our own (``ensemble.mid``), rendered the same way.
- ``band``: a real band recording, "Armygeddon" by Muldjord (CC BY-SA 3.0, from
  ``fretsonfire-songs-muldjord``): its backing track and guitar track summed, 30 s from
  60 s in. Ogg Vorbis coded (lossy), so its top octave is the encoder's, not the band's.

Packages installed for it, and the exact commands used (Debian 12, as root)::

    apt-get update
    DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends \\
        alsa-utils fluidsynth fluid-soundfont-gm fretsonfire-songs-muldjord
    # installed: alsa-utils 1.2.8-1, fluidsynth 2.3.1-2, fluid-soundfont-gm 3.1-5.3,
    #            fretsonfire-songs-muldjord 2.dfsg-2.1
    python benchmarks/real_clips.py /work/corpus/mixes

FluidSynth runs as ``fluidsynth -n -i -q -r 44100 -O float -g 0.5 -F OUT.wav
/usr/share/sounds/sf2/FluidR3_GM.sf2 IN.mid`` (reverb and chorus at their defaults).

Mixes
-----
Each programme is mixed with hiss of three colours at three levels: 20, 30 and 40 dB under
the programme's RMS (channel-mean power over the whole clean clip, silences included).
Colours, by power spectral density S(f): ``white`` flat; ``pink`` S ∝ 1/f (equal power per
octave) above a 10 Hz high-pass; ``tape`` white through a first-order treble shelf rising
from 1326 Hz (120 µs) to 5305 Hz (30 µs), +12.04 dB, flat above (a tape-like rising treble,
before head losses; our own shape). The hiss is Gaussian, independent per channel, made in the
frequency domain with the exact density (complex Gaussian bins, inverse real FFT), from
``numpy.random.SeedSequence(seed, spawn_key=(programme, colour))``, and scaled to the exact
RMS asked; the three levels of one (programme, colour) are the same noise scaled. Written:
``clean/<programme>.wav`` (32-bit float), ``<mix>.hiss.wav`` and ``<mix>.mix.wav`` (32-bit
float, so mix = clean + hiss to float32 rounding, about 2^-24 of a sample). The samples are the
same from run to run (checked); the files' bytes are not, as libsndfile stamps the time into
the PEAK chunk of a float WAV.

Truth (manifest.json)
---------------------
Per mix and per one-third-octave band (IEC 61260-1:2014 base-10 centres 1000·10^(n/10), from
20 Hz up to the last band whose upper edge 10^(1/20)·f lies under Nyquist), through a
6th-order Butterworth band-pass on the band edges (scipy.signal.butter, sosfilt):

- ``programme_loud_dbfs``: the clean programme's level in its loudest 10 % of 0.17 s frames
  (the band's frames sorted by power, the mean power of the top 10 %, at least one frame);
- ``programme_mean_dbfs``: the clean programme's level over the whole clip (all frames);
- ``hiss_dbfs``: the hiss stem's level over the whole clip;
- ``f_c_hz``: where the programme sinks into the hiss: the centre of the lowest band from
  which the programme's loud-time level stays under the hiss level in every band up to the
  last one (null if the programme stands over the hiss in the top band);
- ``f_c_mean_hz``: the same with the programme's whole-clip level (a lower, stricter figure).

Levels are dBFS as 10·log10 of the channel-mean power (a full-scale sine reads -3.01 dBFS).
Only numpy, scipy and soundfile are imported (and the standard library), so the script does
not depend on how the package is laid out.

Usage: ``python benchmarks/real_clips.py [OUT_DIR] [--clean-dir DIR] [--seed N]``.
Exit status 2, with the install command, when a package is missing.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import struct
import subprocess
import sys
import tempfile

import numpy as np
import soundfile as sf
from scipy import signal

ALSA_DIR = "/usr/share/sounds/alsa"
ALSA_VOICES = ("Front_Left", "Front_Center", "Front_Right", "Side_Left", "Side_Right", "Rear_Left",
               "Rear_Center", "Rear_Right")
SOUNDFONT = "/usr/share/sounds/sf2/FluidR3_GM.sf2"
MULDJORD = "/usr/share/games/fretsonfire/data/songs/muldjord/armygeddon"
NEEDS = [  # (path that must exist, package that brings it)
    (os.path.join(ALSA_DIR, "Front_Center.wav"), "alsa-utils"),
    ("fluidsynth", "fluidsynth"),
    (SOUNDFONT, "fluid-soundfont-gm"),
    (os.path.join(MULDJORD, "song.ogg"), "fretsonfire-songs-muldjord"),
]
COLOURS = ("white", "pink", "tape")
UNDER_DB = (20.0, 30.0, 40.0)
FRAME_SECONDS = 0.17
LOUD_SHARE = 0.10
SEED = 2026
TAPE_SHELF_HZ = (1.0 / (2 * math.pi * 120e-6), 1.0 / (2 * math.pi * 30e-6))


# ---------------------------------------------------------------------------
# a small MIDI writer (standard MIDI file, format 0)
# ---------------------------------------------------------------------------

PPQ = 480


def _vlq(n: int) -> bytes:
    out = [n & 0x7F]
    n >>= 7
    while n:
        out.append(0x80 | (n & 0x7F))
        n >>= 7
    return bytes(reversed(out))


def write_midi(path: str, bpm: float, programs: dict, notes: list, controls: list = ()) -> None:
    """Write a format-0 MIDI file: ``programs`` {channel: GM program}, ``notes`` (beat, ch, key, vel, beats)."""
    ev = []  # (tick, order, bytes): note-offs before note-ons at the same tick
    for ch, prog in programs.items():
        ev.append((0, 0, bytes([0xC0 | ch, prog])))
    for beat, ch, cc, value in controls:
        ev.append((int(round(beat * PPQ)), 1, bytes([0xB0 | ch, cc, value])))
    for beat, ch, key, vel, dur in notes:
        on = int(round(beat * PPQ))
        off = on + max(1, int(round(dur * PPQ)))
        ev.append((on, 2, bytes([0x90 | ch, key, vel])))
        ev.append((off, 0, bytes([0x80 | ch, key, 0])))
    ev.sort(key=lambda e: (e[0], e[1]))
    tempo = int(round(60e6 / bpm))
    track = b"\x00\xff\x51\x03" + tempo.to_bytes(3, "big")
    now = 0
    for tick, _, data in ev:
        track += _vlq(tick - now) + data
        now = tick
    track += _vlq(PPQ) + b"\xff\x2f\x00"
    with open(path, "wb") as f:
        f.write(b"MThd" + struct.pack(">IHHH", 6, 0, 1, PPQ) + b"MTrk" + struct.pack(">I", len(track)) + track)


def piano_piece() -> tuple:
    """About 20 s at 84 bpm: a I-vi-IV-V progression twice, arpeggiated left hand, a melody above."""
    notes, controls = [], []
    chords = [(48, 52, 55), (45, 48, 52), (41, 45, 48), (43, 47, 50)] * 2
    melody = [72, 74, 76, 79, 76, 74, 72, 69, 72, 69, 65, 69, 67, 71, 74, 79,
              76, 79, 84, 83, 81, 79, 76, 72, 77, 76, 74, 72, 74, 71, 67, 72]
    for bar, chord in enumerate(chords):
        t0 = 4 * bar
        loud = 60 + 40 * math.sin(math.pi * bar / 8)      # a swell over the piece
        controls += [(t0, 0, 64, 127), (t0 + 3.95, 0, 64, 0)]  # sustain pedal per bar
        c0, c1, c2 = chord
        for i, key in enumerate((c0, c2, c1 + 12, c2, c0 + 12, c2, c1 + 12, c2)):   # broken chord in eighths
            notes.append((t0 + i * 0.5, 0, key, int(loud * 0.7), 0.5))
        for k in range(4):
            notes.append((t0 + k, 0, melody[(4 * bar + k) % len(melody)], int(min(120, loud + 10 * (k == 0))), 0.9))
    notes.append((32, 0, 36, 90, 4))
    notes += [(32, 0, k, 80, 4) for k in (48, 55, 64, 72)]
    return 84.0, {0: 0}, notes, controls


def ensemble_piece() -> tuple:
    """About 24 s at 100 bpm: strings, piano, bass and drums (channel 10), ten bars."""
    notes = []
    prog = [(57, 60, 64), (53, 57, 60), (48, 52, 55), (55, 59, 62)] * 3
    bass = [45, 41, 36, 43] * 3
    bars = 10
    for bar in range(bars):
        t0 = 4 * bar
        chord = prog[bar]
        for key in chord:
            notes.append((t0, 0, key + 12, 70, 3.9))          # strings, sustained
        for k in (0, 1.5, 2, 3.5):
            for key in chord:
                notes.append((t0 + k, 1, key, 72 if k in (0, 2) else 58, 0.4))   # piano comping
        notes.append((t0, 2, bass[bar], 100, 1.8))
        notes.append((t0 + 2, 2, bass[bar] + 7, 90, 1.8))
        # drums (channel 10 = index 9): kick 36, snare 38, closed hat 42, open hat 46, crash 49, ride 51
        notes += [(t0, 9, 36, 110, 0.25), (t0 + 2, 9, 36, 105, 0.25), (t0 + 2.5, 9, 36, 80, 0.25),
                  (t0 + 1, 9, 38, 105, 0.25), (t0 + 3, 9, 38, 110, 0.25)]
        ride = 4 <= bar < 8
        for e in range(8):
            if e == 7 and bar % 2 == 1 and not ride:
                notes.append((t0 + e / 2, 9, 46, 90, 0.5))
            else:
                notes.append((t0 + e / 2, 9, 51 if ride else 42, 85 if e % 2 == 0 else 62, 0.25))
        if bar in (0, 4, 8):
            notes.append((t0, 9, 49, 115, 2.0))
    notes.append((4 * bars, 9, 49, 110, 2.0))
    notes += [(4 * bars, 0, k + 12, 80, 3.0) for k in prog[0]] + [(4 * bars, 2, 45, 100, 3.0)]
    return 100.0, {0: 48, 1: 0, 2: 32}, notes, []


# ---------------------------------------------------------------------------
# clean programmes
# ---------------------------------------------------------------------------


def missing_packages() -> list:
    out = []
    for path, package in NEEDS:
        ok = shutil.which(path) if os.sep not in path else os.path.exists(path)
        if not ok:
            out.append(package)
    return out


def render_midi(mid: str, wav: str, rate: int) -> None:
    cmd = ["fluidsynth", "-n", "-i", "-q", "-r", str(rate), "-O", "float", "-g", "0.5", "-F", wav, SOUNDFONT, mid]
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def trim_tail(x: np.ndarray, rate: int, floor_dbfs: float = -90.0, keep_seconds: float = 0.5) -> np.ndarray:
    """Drop the silence after the last sample louder than ``floor_dbfs``, keeping ``keep_seconds``."""
    loud = np.flatnonzero(np.max(np.abs(x), axis=1) > 10 ** (floor_dbfs / 20))
    end = min(len(x), (loud[-1] + 1 if loud.size else 0) + int(keep_seconds * rate))
    return x[:end]


def build_clean(clean_dir: str) -> dict:
    """Make the four clean programmes; return {name: description}."""
    os.makedirs(clean_dir, exist_ok=True)
    out = {}
    # voice
    parts, rate = [], None
    for name in ALSA_VOICES:
        x, r = sf.read(os.path.join(ALSA_DIR, name + ".wav"), always_2d=True)
        rate = rate or r
        if r != rate:
            raise SystemExit(f"{name}.wav: rate {r} Hz, the others {rate} Hz")
        parts += [x, np.zeros((int(0.35 * rate), x.shape[1]))]
    out["voice"] = (np.concatenate(parts[:-1]), rate,
                    "alsa-utils: " + ", ".join(n + ".wav" for n in ALSA_VOICES) + " joined with 0.35 s of silence")
    # piano and ensemble
    with tempfile.TemporaryDirectory() as tmp:
        for name, piece in (("piano", piano_piece), ("ensemble", ensemble_piece)):
            bpm, programs, notes, controls = piece()
            mid = os.path.join(clean_dir, name + ".mid")
            write_midi(mid, bpm, programs, notes, controls)
            wav = os.path.join(tmp, name + ".wav")
            render_midi(mid, wav, 44100)
            x, r = sf.read(wav, always_2d=True)
            source = f"{name}.mid (ours, {bpm:g} bpm) rendered by fluidsynth with FluidR3_GM.sf2 (fluid-soundfont-gm)"
            out[name] = (trim_tail(x, r), r, source)
    # band
    song, r = sf.read(os.path.join(MULDJORD, "song.ogg"), always_2d=True, start=60 * 44100, frames=30 * 44100)
    guitar, _ = sf.read(os.path.join(MULDJORD, "guitar.ogg"), always_2d=True, start=60 * 44100, frames=30 * 44100)
    band = song + guitar
    gain = min(1.0, 0.9 / float(np.max(np.abs(band))))
    source = ("fretsonfire-songs-muldjord: Muldjord, 'Armygeddon' (CC BY-SA 3.0), song.ogg + guitar.ogg, 60-90 s, "
              f"gain {20 * math.log10(gain):.2f} dB (Ogg Vorbis source)")
    out["band"] = (band * gain, r, source)
    desc = {}
    for name, (x, rate, source) in out.items():
        path = os.path.join(clean_dir, name + ".wav")
        sf.write(path, x.astype(np.float32), rate, subtype="FLOAT")
        desc[name] = {"path": path, "source": source, "rate_hz": rate, "channels": int(x.shape[1]),
                      "seconds": round(len(x) / rate, 3), "rms_dbfs": round(10 * math.log10(np.mean(x ** 2)), 2),
                      "peak_dbfs": round(20 * math.log10(np.max(np.abs(x))), 2)}
    return desc


# ---------------------------------------------------------------------------
# hiss and truth
# ---------------------------------------------------------------------------


def hiss_psd(colour: str, f: np.ndarray) -> np.ndarray:
    """Unnormalised one-sided density of a hiss colour (module notes)."""
    if colour == "white":
        return np.ones_like(f)
    if colour == "pink":
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(f > 0, (1.0 / f) * f ** 2 / (f ** 2 + 10.0 ** 2), 0.0)
    f1, f2 = TAPE_SHELF_HZ
    return np.abs((1 + 1j * f / f1) / (1 + 1j * f / f2)) ** 2


def make_hiss(colour: str, frames: int, channels: int, rate: int, seed: int, key: tuple) -> np.ndarray:
    """Unit-RMS Gaussian hiss of ``colour``, independent per channel, exact density (module notes)."""
    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=key))
    f = np.fft.rfftfreq(frames, 1.0 / rate)
    amp = np.sqrt(hiss_psd(colour, f))
    amp[0] = 0.0
    z = rng.standard_normal((2, f.size, channels))
    x = np.fft.irfft(amp[:, None] * (z[0] + 1j * z[1]), frames, axis=0)
    return x / math.sqrt(float(np.mean(x ** 2)))


def band_centres(rate: int) -> np.ndarray:
    c = 1000.0 * 10.0 ** (np.arange(-17, 14) / 10.0)
    return c[c * 10 ** 0.05 < rate / 2]


def band_frame_powers(x: np.ndarray, rate: int, centres: np.ndarray) -> np.ndarray:
    """(bands, frames) channel-mean power of each 0.17 s frame in each one-third-octave band."""
    n = int(round(FRAME_SECONDS * rate))
    frames = len(x) // n
    out = np.empty((len(centres), frames))
    for i, c in enumerate(centres):
        sos = signal.butter(3, [c * 10 ** -0.05, c * 10 ** 0.05], btype="bandpass", fs=rate, output="sos")
        y = signal.sosfilt(sos, x, axis=0)[:frames * n]
        out[i] = np.mean(y.reshape(frames, n, -1) ** 2, axis=(1, 2))
    return out


def loud_level_db(p: np.ndarray) -> np.ndarray:
    """Per band: mean power of the loudest 10 % of frames (at least one), in dB."""
    k = max(1, int(math.ceil(LOUD_SHARE * p.shape[1])))
    top = np.sort(p, axis=1)[:, -k:]
    with np.errstate(divide="ignore"):
        return 10 * np.log10(np.mean(top, axis=1))


def sink_frequency(centres, prog_db, hiss_db):
    """Centre of the lowest band from which the programme stays under the hiss to the top band."""
    below = prog_db < hiss_db
    if not below[-1]:
        return None
    i = len(below) - 1
    while i > 0 and below[i - 1]:
        i -= 1
    return float(centres[i])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out", nargs="?", default="/work/corpus/mixes", help="folder of the mixes and manifest.json")
    ap.add_argument("--clean-dir", default="/work/corpus/clean", help="folder of the clean programmes")
    ap.add_argument("--seed", type=int, default=SEED, help=f"seed of the hiss (default {SEED})")
    args = ap.parse_args(argv)
    missing = missing_packages()
    if missing:
        print("real_clips: missing Debian packages: " + " ".join(missing) + "; install them with:\n"
              "  apt-get update && apt-get install -y --no-install-recommends " + " ".join(missing), file=sys.stderr)
        return 2
    os.makedirs(args.out, exist_ok=True)
    programmes = build_clean(args.clean_dir)
    manifest = {"seed": args.seed, "frame_seconds": FRAME_SECONDS, "loud_share": LOUD_SHARE,
                "level_convention": "dBFS = 10*log10(channel-mean power); a full-scale sine reads -3.01",
                "bands": "IEC 61260-1 base-10 one-third-octave, 6th-order Butterworth band-pass, scipy sosfilt",
                "programmes": programmes, "mixes": []}
    for pi, (name, d) in enumerate(programmes.items()):
        clean, rate = sf.read(d["path"], always_2d=True)
        centres = band_centres(rate)
        prog_frames = band_frame_powers(clean, rate, centres)
        prog_loud = loud_level_db(prog_frames)
        with np.errstate(divide="ignore"):
            prog_mean = 10 * np.log10(np.mean(prog_frames, axis=1))
        rms = math.sqrt(float(np.mean(clean ** 2)))
        for ci, colour in enumerate(COLOURS):
            unit = make_hiss(colour, len(clean), clean.shape[1], rate, args.seed, (pi, ci))
            unit_db = 10 * np.log10(np.mean(band_frame_powers(unit, rate, centres), axis=1))
            for under in UNDER_DB:
                g = rms * 10 ** (-under / 20)
                hiss = unit * g
                mix_name = f"{name}.{colour}.{int(under)}db"
                paths = {"clean": d["path"], "hiss": os.path.join(args.out, mix_name + ".hiss.wav"),
                         "mix": os.path.join(args.out, mix_name + ".mix.wav")}
                sf.write(paths["hiss"], hiss.astype(np.float32), rate, subtype="FLOAT")
                sf.write(paths["mix"], (clean + hiss).astype(np.float32), rate, subtype="FLOAT")
                hiss_db = unit_db + 20 * math.log10(g)
                fc = sink_frequency(centres, prog_loud, hiss_db)
                fc_mean = sink_frequency(centres, prog_mean, hiss_db)
                manifest["mixes"].append({
                    "name": mix_name, "programme": name, "hiss_colour": colour, "hiss_under_programme_db": under,
                    "hiss_rms_dbfs": round(20 * math.log10(g), 2), "paths": paths, "f_c_hz": fc,
                    "f_c_mean_hz": fc_mean,
                    "bands": [{"centre_hz": round(float(c), 2), "programme_loud_dbfs": round(float(p), 2),
                               "programme_mean_dbfs": round(float(m), 2), "hiss_dbfs": round(float(h), 2)}
                              for c, p, m, h in zip(centres, prog_loud, prog_mean, hiss_db)]})
                def hz(v):
                    return f"{v:6.0f} Hz" if v is not None else "  none   "
                print(f"{mix_name:22s} hiss {20 * math.log10(g):7.2f} dBFS   f_c {hz(fc)}   f_c (whole-clip "
                      f"level) {hz(fc_mean)}")
    with open(os.path.join(args.out, "manifest.json"), "w") as f:
        json.dump(manifest, f, indent=1)
    for name, d in programmes.items():
        print(f"{name}: {d['seconds']} s, {d['rate_hz']} Hz, {d['channels']} ch, RMS {d['rms_dbfs']} dBFS, "
              f"peak {d['peak_dbfs']} dBFS; {d['source']}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
