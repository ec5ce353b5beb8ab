"""The sound card: the only module that imports sounddevice (PortAudio), and only when asked.

Without the PortAudio system library, or without an output device, every
other command of audition works; ``listen`` raises :class:`NoSound` with one
line saying what to install or which devices exist.
"""

from __future__ import annotations

import time

from audition.errors import AuditionError, BadParameter


class NoSound(AuditionError):
    """No way to play: PortAudio missing, no output device, or the device refused the stream."""


#: The output latency asked of PortAudio, s. Through the ALSA "pulse" device a stream starts
#: once one period is buffered, and an underrun then makes PortAudio's ALSA layer restart the
#: stream, which the plug-in does by opening a new server stream that starts from one period
#: again; now and then that repeats, for up to seconds of silence. Measured with PulseAudio
#: 16 and a 44.1 kHz stream on a 48 kHz null sink, 3 s each: PortAudio's "high" default
#: (35 ms) lost 0.2 and 1.4 s in 2 of 25 starts; 0.1 s (a 105 ms buffer) lost nothing in 50.
#: A key's reaction time grows by the same amount.
LATENCY_SECONDS = 0.1

INSTALL_HINT = ("PortAudio, the system sound library, is not installed; on Debian/Ubuntu: "
                "sudo apt-get install libportaudio2 (every other audition command works without it)")


def load_sounddevice():
    """The sounddevice module, or :class:`NoSound` saying what to install."""
    try:
        import sounddevice
    except OSError:  # sounddevice is there but cannot find libportaudio
        raise NoSound(INSTALL_HINT) from None
    except ImportError:
        raise NoSound("the Python package sounddevice is missing: pip install sounddevice "
                      "(and on Debian/Ubuntu: sudo apt-get install libportaudio2)") from None
    return sounddevice


def output_devices(sd) -> list[dict]:
    """Every device with output channels: index, name, host API, channels, default rate."""
    try:
        devices = sd.query_devices()
        apis = sd.query_hostapis()
    except Exception as exc:  # PortAudio errors come in several kinds
        raise NoSound(f"PortAudio cannot list the sound devices ({exc})") from None
    return [{"index": d["index"], "name": d["name"], "hostapi": apis[d["hostapi"]]["name"],
             "channels": d["max_output_channels"], "default_rate_hz": d["default_samplerate"]}
            for d in devices if d["max_output_channels"] > 0]


def default_output(sd) -> int | None:
    try:
        idx = sd.default.device[1]
    except Exception:
        return None
    return idx if isinstance(idx, int) and idx >= 0 else None


def _names(devices) -> str:
    return "; ".join(f"{d['index']}: {d['name']}" for d in devices) or "none"


def pick_output(sd, spec: str | None) -> dict:
    """The output device ``spec`` names: None (the default), an index, or a part of a name."""
    devices = output_devices(sd)
    if not devices:
        raise NoSound("no sound output device found (PortAudio lists none); check the sound card, "
                      "or the sound server (PulseAudio/PipeWire) and its ALSA plugin")
    if spec is None:
        idx = default_output(sd)
        found = [d for d in devices if d["index"] == idx] or devices[:1]
        return found[0]
    text = str(spec).strip()
    if text.lstrip("-").isdigit():
        found = [d for d in devices if d["index"] == int(text)]
        if not found:
            raise NoSound(f"--device {text}: no output device with that index; output devices: {_names(devices)}")
        return found[0]
    exact = [d for d in devices if d["name"].lower() == text.lower()]
    found = exact or [d for d in devices if text.lower() in d["name"].lower()]
    if not found:
        raise NoSound(f"--device {text!r}: no output device name contains it; output devices: {_names(devices)}")
    if len(found) > 1:
        raise NoSound(f"--device {text!r}: several output devices match ({_names(found)}); give the index")
    return found[0]


def accepts_rate(sd, device: dict, rate_hz: float, channels: int) -> bool:
    """True when PortAudio says ``device`` can play ``channels`` of float32 at ``rate_hz``."""
    try:
        sd.check_output_settings(device=device["index"], samplerate=rate_hz, channels=channels, dtype="float32")
    except Exception:  # sd.PortAudioError, ValueError
        return False
    return True


def output_rate(sd, device: dict, file_rate_hz: float, channels: int, asked_hz: float | None = None) -> float:
    """The rate to open ``device`` at: ``asked_hz`` (``--device-rate``), else the file's own rate.

    A device that refuses the file's rate (a sound card driven directly, at
    48 kHz only, say) gets its default rate, and the caller converts the region
    to it before playback. A sound server (PulseAudio, PipeWire) takes any rate
    and converts it itself, with its own converter, to the rate its output runs at.
    """
    if asked_hz is not None:
        if not accepts_rate(sd, device, asked_hz, channels):
            raise NoSound(f"device {device['index']} ({device['name']}) refuses {channels} channel(s) at "
                          f"--device-rate {asked_hz:g} Hz")
        return float(asked_hz)
    if accepts_rate(sd, device, file_rate_hz, channels):
        return float(file_rate_hz)
    default = float(device.get("default_rate_hz") or 0.0)
    if default > 0 and accepts_rate(sd, device, default, channels):
        return default
    raise NoSound(f"device {device['index']} ({device['name']}) refuses {channels} channel(s) at the file's "
                  f"{file_rate_hz:g} Hz and at its own {default:g} Hz; try --device-rate 48000 or another --device")


def open_stream(sd, mixer, device: dict, latency_seconds: float | None = None):
    """An output stream for ``mixer`` on ``device`` (not started).

    ``latency_seconds`` (default :data:`LATENCY_SECONDS`) is the output buffer
    asked of PortAudio: see that constant for why it is not PortAudio's smallest.
    """
    latency = LATENCY_SECONDS if latency_seconds is None else float(latency_seconds)
    try:
        return sd.OutputStream(device=device["index"], samplerate=mixer.rate_hz, channels=mixer.out_channels,
                               dtype="float32", blocksize=mixer.max_block, callback=mixer.callback,
                               latency=latency)
    except Exception as exc:  # sd.PortAudioError, ValueError from bad settings
        raise NoSound(f"device {device['index']} ({device['name']}) refused {mixer.out_channels} channel(s) at "
                      f"{mixer.rate_hz:g} Hz: {exc}".replace("\n", " ")) from None


def play_until_finished(sd, mixer, device: dict, on_tick=None, tick_seconds: float = 0.05) -> float:
    """Play ``mixer`` (a scripted one, with an END) until it has finished; return the output latency, s.

    The main thread only polls ``mixer.finished``; the stream's ``stop()``
    then lets what is queued play out.
    """
    stream = open_stream(sd, mixer, device)
    with stream:
        while not mixer.finished:
            time.sleep(tick_seconds)
            if on_tick is not None:
                on_tick(mixer)
        # what is still in the device's buffers, then a margin
        time.sleep(float(stream.latency) + 0.05)
        latency = float(stream.latency)
    return latency


def check_block(block: int) -> int:
    if not (isinstance(block, int) and 16 <= block <= 8192):
        raise BadParameter(f"--block {block!r}: must be 16 ... 8192 frames")
    return block
