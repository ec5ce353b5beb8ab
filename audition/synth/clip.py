"""The clip: programme plus hiss, streamed in chunks or made whole."""

from __future__ import annotations

from typing import Iterator

import numpy as np

from audition.synth.params import CHUNK_FRAMES, Clip, ClipBlock, DEFAULT_HISS_DBFS, DEFAULT_PROGRAMME, check_params
from audition.synth.hiss import _Hiss
from audition.synth.dark import _Programme
from audition.synth.broadband import _Broadband


# ---------------------------------------------------------------------------
# Public entry points
# ---------------------------------------------------------------------------


def synth_blocks(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
                 lead_in_seconds=1.0, seed=0, programme_top_hz=None,
                 programme=DEFAULT_PROGRAMME) -> Iterator[ClipBlock]:
    """Yield the clip in chunks of :data:`CHUNK_FRAMES` frames (flat memory for long clips).

    The parameters are those of :func:`synthesise`, checked before the first
    chunk. Concatenating the chunks gives :func:`synthesise`'s arrays exactly.
    """
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz, programme)
    return _blocks(p)


def _blocks(p: dict) -> Iterator[ClipBlock]:
    frames = int(round(p["seconds"] * p["rate_hz"]))
    noise = _Hiss(p)
    prog = _Programme(p) if p.get("programme", DEFAULT_PROGRAMME) == "dark" else _Broadband(p)
    for index, start in enumerate(range(0, frames, CHUNK_FRAMES)):
        n = min(CHUNK_FRAMES, frames - start)
        x, h = prog.chunk(start, n), noise.chunk(index, n)
        yield ClipBlock(start, x + h, x, h)


def synthesise(seconds=10.0, rate_hz=44100, channels=2, hiss_dbfs=DEFAULT_HISS_DBFS, hiss="tape",
               lead_in_seconds=1.0, seed=0, programme_top_hz=None, programme=DEFAULT_PROGRAMME) -> Clip:
    """Synthesise a programme-plus-hiss clip with its truth (in memory).

    Parameters
    ----------
    seconds : float
        Length, 0 < seconds <= 86400.
    rate_hz : int
        Sample rate, 8000 .. 768000 Hz.
    channels : int
        1 .. 32; hiss independent per channel, programme partly panned.
    hiss_dbfs : float
        Expected hiss RMS per channel, dBFS as 20·log10(rms), -140 .. -30.
    hiss : {"white", "pink", "tape"}
        Colour of the hiss (see the module notes).
    lead_in_seconds : float
        Hiss alone before the programme (0 <= lead-in < seconds).
    seed : int
        Seed of every random choice; the same arguments give the same bytes.
    programme_top_hz : float or None
        Where the programme begins to roll off at 24 dB/octave (50 Hz .. Nyquist); None
        takes the programme's default (broadband: min(16000, 0.45·rate); dark: 5000).
    programme : {"broadband", "dark"}
        ``"broadband"`` (default): voices, hi-hats, crash cymbals and sibilants whose long-term
        spectrum follows IEC 60268-1's simulated programme signal; ``"dark"``: the four voices
        alone, rolling off above ``programme_top_hz`` (the former default).

    Returns
    -------
    Clip
        ``mix = programme + hiss``, each (frames, channels) float64.

    Raises
    ------
    BadParameter
        Any argument outside its range (the message names it and the range).

    Notes
    -----
    Memory is three arrays of the clip; for long clips use :func:`synth_blocks`.
    """
    p = check_params(seconds, rate_hz, channels, hiss_dbfs, hiss, lead_in_seconds, seed, programme_top_hz, programme)
    frames = int(round(p["seconds"] * p["rate_hz"]))
    arrays = [np.empty((frames, p["channels"])) for _ in range(3)]
    for b in _blocks(p):
        for a, x in zip(arrays, (b.mix, b.programme, b.hiss)):
            a[b.start_frame:b.start_frame + len(x)] = x
    for a in arrays:
        a.setflags(write=False)
    return Clip(*arrays, rate_hz=p["rate_hz"], seconds=p["seconds"], channels=p["channels"],
                hiss_dbfs=p["hiss_dbfs"], hiss_colour=p["hiss"], lead_in_seconds=p["lead_in_seconds"],
                seed=p["seed"], programme_top_hz=p["programme_top_hz"], programme_kind=p["programme"])
