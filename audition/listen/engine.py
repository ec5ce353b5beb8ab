"""The playback engine: a deterministic callback mixer of pre-rendered versions of one region.

:class:`Mixer` holds every version ("source") of the looped region, already
filtered, and fills whatever output buffer it is handed, block by block, from
:meth:`Mixer.callback` (the signature python-sounddevice calls). It knows
nothing of devices, so the tests drive it exactly as the sound card would, and
the same calls give the same samples.

Callback discipline
-------------------
* ``outdata[:]`` is filled whole on every call (silence when paused or done).
* No array is allocated in the callback: every sample buffer is made in
  ``__init__`` and sliced; only small numpy view objects are created.
  No I/O, no locks, no printing.
* The main thread only *writes* the request fields (:attr:`want`,
  :attr:`paused`, :attr:`volume_db`, :meth:`seek`) and *reads* the meter
  fields; the callback only reads the former and writes the latter. A seek is
  a (serial, frame) pair, so a request is never lost or applied twice.

What a block goes through
-------------------------
1. **Voices.** The playing source at the region position; during a
   crossfade, also the one being left (another source at the same position for
   a switch, the same source at the old position for a seek or a loop wrap).
2. **Equal-power crossfade** over ``fade_ms`` (default 5 ms):
   ``g_in = sin(pi/2 k/F)``, ``g_out = cos(pi/2 k/F)``, so
   ``g_in^2 + g_out^2 = 1`` (common practice, no source): two uncorrelated
   signals, or two tones in quadrature, keep their power through the fade;
   correlated ones (the same music, lightly filtered) swell by up to
   +3.01 dB at mid-fade and never dip. In blind mode (ABX) a switch is a
   fade-out then fade-in instead, made even when the source does not change,
   so the switch itself gives nothing away.
3. **Loudness gains** per source (linear, from the dB the caller measured).
4. **Level**: the applied level chases the volume setting, upwards at
   ``start_cut_db / ramp_seconds`` dB/s (so playback starts ``start_cut_db``
   below the setting and ramps up), downwards at 200 dB/s. Pause and the end
   of a script fade the output out over ``fade_ms``.
5. **Limiter**, linked across channels, instantaneous attack, release of
   ``release_db_per_s``: ``g[n] = min(need[n], g[n-1] + r)`` with
   ``need[n] = min(0, ceiling_db - 20 log10 peak[n])``, computed as a running
   minimum (``g[n] = r n + min_k (need[k] - r k)``), so the output never
   exceeds the ceiling (default -1 dBFS sample peak).

Switching
---------
A switch asked from the keyboard starts its crossfade at the beginning of the
next block the device asks for: the reaction time is one block
(:attr:`Mixer.block_ms`) plus the device's latency. A scripted switch
(``schedule``) starts its crossfade on the exact frame asked for, wherever it
falls in a block.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter

#: Default length of a crossfade (switch, seek, loop wrap, pause), ms.
FADE_MS = 5.0
#: Default ceiling of the limiter, dBFS (sample peak, full scale = 0 dBFS).
CEILING_DBFS = -1.0
#: Playback starts this many dB below the volume setting ...
START_CUT_DB = 20.0
#: ... and reaches it after this many seconds.
RAMP_SECONDS = 1.0
#: Fall rate of the applied level when the volume is turned down, dB/s.
LEVEL_FALL_DB_PER_S = 200.0
#: Release of the limiter, dB/s.
RELEASE_DB_PER_S = 40.0
#: The largest block the engine accepts, frames.
MAX_BLOCK_FRAMES = 8192
#: A schedule action that ends playback (fade out, then silence and ``finished``).
END = -1

_LN10_OVER_20 = math.log(10.0) / 20.0


@dataclass(frozen=True)
class Event:
    """At played frame ``frame``, switch to source ``source`` (or :data:`END`)."""

    frame: int
    source: int


class Mixer:
    """A callback mixer of several versions of one region.

    Parameters
    ----------
    sources : sequence of ndarray, each (frames, channels), float
        The versions, all of the same shape. The first ``region_frames`` frames
        are the loop; frames after that are the continuation of the audio past
        the loop end (at least ``fade_ms`` long is best: it is what fades out
        at the wrap; missing frames read as silence).
    gains_db : sequence of float
        Gain of each source, dB (loudness matching).
    rate_hz : float
    region_frames : int, optional
        Length of the loop, frames (default: the whole of each source).
    out_channels : int, optional
        Channels of the output; a mono source goes to every output channel.
        Default: the sources' channel count.
    initial : int
        Source playing at the start.
    fade_ms, ceiling_dbfs, start_cut_db, ramp_seconds, release_db_per_s : float
        See the module notes.
    max_block : int
        The largest ``frames`` a callback may ask for.
    schedule : sequence of Event, optional
        Switches at exact played frames, and an :data:`END`. The played-frame
        clock counts every frame output while not paused.
    blind : bool
        For ABX: every :meth:`select` switches, even to the source playing, and a
        switch fades out then in (a dip of ``fade_ms``) instead of crossfading, so
        the switch itself sounds the same whether X changed or not.

    Attributes (main thread writes)
    -------------------------------
    want : int
        The source to play; a change starts a crossfade at the next block
        (:meth:`select` sets it; in blind mode only :meth:`select` counts).
    paused : bool
    volume_db : float
        Volume setting, dB (<= 0 is sensible; the limiter holds the ceiling anyway).

    Attributes (callback writes, main thread reads)
    -----------------------------------------------
    playing, position, clock, peak (per output channel, last block),
    limiter_db (deepest gain reduction in the last block, <= 0), level_db,
    underruns, finished.
    """

    def __init__(self, sources, gains_db, rate_hz: float, *, region_frames: int | None = None,
                 out_channels: int | None = None, initial: int = 0, fade_ms: float = FADE_MS,
                 ceiling_dbfs: float = CEILING_DBFS, start_cut_db: float = START_CUT_DB,
                 ramp_seconds: float = RAMP_SECONDS, release_db_per_s: float = RELEASE_DB_PER_S,
                 max_block: int = MAX_BLOCK_FRAMES, schedule=(), blind: bool = False):
        srcs = [np.ascontiguousarray(s, dtype=np.float32) for s in sources]
        if not srcs:
            raise BadParameter("sources: need at least one version to play")
        srcs = [s[:, None] if s.ndim == 1 else s for s in srcs]
        shape = srcs[0].shape
        if any(s.shape != shape or s.ndim != 2 for s in srcs) or shape[0] < 1:
            raise BadParameter(f"sources of shapes {[s.shape for s in srcs]!r}: need equal (frames, channels)")
        gains = [float(g) for g in gains_db]
        if len(gains) != len(srcs) or not all(math.isfinite(g) for g in gains):
            raise BadParameter(f"gains_db={gains_db!r}: need one finite gain (dB) per source")
        self.rate_hz = float(rate_hz)
        if not (self.rate_hz > 0 and math.isfinite(self.rate_hz)):
            raise BadParameter(f"rate_hz={rate_hz!r}: must be a positive number of Hz")
        self.channels = shape[1]
        self.out_channels = self.channels if out_channels is None else int(out_channels)
        if self.channels not in (1, self.out_channels):
            raise BadParameter(f"out_channels={out_channels!r}: a {self.channels}-channel source needs "
                               f"{self.channels} output channels (a mono one goes to any number)")
        self.region_frames = shape[0] if region_frames is None else int(region_frames)
        if not 1 <= self.region_frames <= shape[0]:
            raise BadParameter(f"region_frames={region_frames!r}: must be 1 ... {shape[0]} (the source length)")
        self.fade_frames = max(1, int(round(fade_ms * 1e-3 * self.rate_hz)))
        if self.fade_frames * 2 > self.region_frames:
            raise BadParameter(f"fade_ms={fade_ms!r}: the loop ({self.region_frames} frames) must hold two fades")
        if not -60.0 <= ceiling_dbfs <= 0.0:
            raise BadParameter(f"ceiling_dbfs={ceiling_dbfs!r}: must lie in -60 ... 0 dBFS")
        if start_cut_db < 0 or ramp_seconds < 0:
            raise BadParameter("start_cut_db and ramp_seconds must be >= 0")
        if not 1 <= max_block <= 1 << 16:
            raise BadParameter(f"max_block={max_block!r}: must be 1 ... 65536 frames")
        self.sources = srcs
        self.gains_db = gains
        self._gain_lin = [10.0 ** (g / 20.0) for g in gains]
        self.max_block = int(max_block)
        self.ceiling_dbfs = float(ceiling_dbfs)
        ceiling = 10.0 ** (self.ceiling_dbfs / 20.0)
        # The bound actually applied: the largest float32 not above the ceiling, so the
        # float32 output cannot round above it.
        c32 = np.float32(ceiling)
        self._clip = float(c32 if float(c32) <= ceiling else np.nextafter(c32, np.float32(0)))
        self._rise = (start_cut_db / ramp_seconds if ramp_seconds > 0 else math.inf) / self.rate_hz  # dB/frame
        self._fall = LEVEL_FALL_DB_PER_S / self.rate_hz
        self._release = float(release_db_per_s) / self.rate_hz
        self.schedule = sorted((Event(int(e.frame), int(e.source)) for e in schedule), key=lambda e: e.frame)
        for e in self.schedule:
            if e.source != END and not 0 <= e.source < len(srcs):
                raise BadParameter(f"schedule: source {e.source} does not exist (0 ... {len(srcs) - 1})")
            if e.frame < 0:
                raise BadParameter(f"schedule: frame {e.frame} is before the start")
        if not 0 <= initial < len(srcs):
            raise BadParameter(f"initial={initial!r}: no such source")

        self.blind = bool(blind)
        # -- requests: written by the main thread, read by the callback ----------------
        self.want = int(initial)
        self._want_serial = 0
        self.paused = False
        self.volume_db = 0.0
        self._seek_serial = 0
        self._seek_frame = 0

        # -- state: written by the callback ---------------------------------------------
        self.playing = int(initial)
        self.position = 0  # of the playing voice in the region, frames
        self._old_src = int(initial)
        self._old_pos = 0
        self._fade_k = self.fade_frames  # >= fade_frames: no crossfade running
        self._seek_done = 0
        self._want_done = 0
        self._run = 1.0  # pause/end fade gain, 0 ... 1
        self._ending = False
        self._next_event = 0
        self.clock = 0
        self.level_db = -float(start_cut_db)  # relative to volume_db at the start
        self._level_abs = None  # applied level in dB, set on the first block
        self._start_cut = float(start_cut_db)
        self._lim_db = 0.0
        self.limiter_db = 0.0
        self.peak = np.zeros(self.out_channels, dtype=np.float32)
        self.underruns = 0
        self.finished = False
        self.blocks = 0

        # -- preallocated buffers -------------------------------------------------------
        n, c, o = self.max_block, self.channels, self.out_channels
        self._j = np.arange(n, dtype=np.int64)
        self._jf = np.arange(n, dtype=np.float32)
        self._j1 = self._jf + 1.0
        self._idx = np.zeros(n, dtype=np.int64)
        self._k = np.zeros(n, dtype=np.int64)
        self._voice = np.zeros((n, c), dtype=np.float32)
        # Everything in float32, the device's format: a mixed-type ufunc would allocate
        # a casting buffer on every call (and float32 keeps 24 bits, -144 dB, to spare).
        self._mix = np.zeros((n, o), dtype=np.float32)
        self._src_mix = self._mix if c == o else np.zeros((n, 1), dtype=np.float32)
        self._tmp = np.zeros((n, c), dtype=np.float32)
        self._g = np.zeros(n, dtype=np.float32)
        self._g2 = np.zeros(n, dtype=np.float32)
        self._abs = np.zeros((n, o), dtype=np.float32)
        self._pk = np.zeros(n, dtype=np.float32)
        u = np.arange(self.fade_frames + 1) / self.fade_frames
        if self.blind:
            # out, then in: the two never overlap, so a switch sounds the same whether the
            # source changes or not (a crossfade of a version with itself would swell)
            fade_in = np.sin(0.5 * math.pi * np.clip(2 * u - 1, 0, 1))
            fade_out = np.where(2 * u < 1, np.cos(0.5 * math.pi * np.clip(2 * u, 0, 1)), 0.0)
        else:
            fade_in, fade_out = np.sin(0.5 * math.pi * u), np.cos(0.5 * math.pi * u)  # sin^2 + cos^2 = 1
        self._fade_in = fade_in.astype(np.float32)
        self._fade_out = fade_out.astype(np.float32)
        self._fade_in[-1], self._fade_out[-1] = 1.0, 0.0

    # ------------------------------------------------------------------ main thread
    @property
    def block_ms(self) -> float:
        """Duration of the largest block, ms (the reaction time of a key press)."""
        return 1e3 * self.max_block / self.rate_hz

    @property
    def fade_ms(self) -> float:
        return 1e3 * self.fade_frames / self.rate_hz

    def select(self, source: int) -> None:
        """Ask for ``source``; in blind mode every call makes a switch, even to the one playing."""
        self.want = int(source)
        self._want_serial += 1

    def seek(self, frame: int) -> None:
        """Ask to continue from ``frame`` of the region (wrapped into it), with a crossfade."""
        self._seek_frame = int(frame) % self.region_frames
        self._seek_serial += 1

    # ------------------------------------------------------------------ callback
    def callback(self, outdata, frames, time=None, status=None) -> None:
        """Fill ``outdata[:frames]`` (float32, (frames, out_channels)): the sounddevice callback."""
        if status and getattr(status, "output_underflow", False):
            self.underruns += 1
        self.blocks += 1
        if frames > self.max_block:
            # A device that ignores the block size it was opened with: play silence, count it.
            outdata.fill(0)
            self.underruns += 1
            return
        mix = self._mix[:frames]
        if self.finished:
            outdata.fill(0)
            self.peak.fill(0.0)
            return
        self._take_requests()
        start = 0
        while start < frames:
            stop = frames
            # scripted events inside this block split it
            while self._next_event < len(self.schedule):
                e = self.schedule[self._next_event]
                if e.frame > self.clock:
                    stop = min(stop, start + (e.frame - self.clock))
                    break
                self._apply_event(e)
                self._next_event += 1
            if not self._silent():
                # the loop wrap splits it too (only when the voices move) ...
                stop = min(stop, start + (self.region_frames - self.position))
                # ... and the end of a pause/end fade, so nothing moves once it is silent
                target = 0.0 if (self.paused or self._ending) else 1.0
                if self._run != target:
                    left = math.ceil(abs(target - self._run) * self.fade_frames - 1e-9)
                    stop = min(stop, start + max(left, 1))
            self._segment(start, stop)
            start = stop
            if self.position >= self.region_frames:
                self._start_fade(self.playing, self.position, self.playing, 0)
        self._level(frames)
        self._limit(frames)
        np.copyto(outdata[:frames], mix, casting="same_kind")
        if outdata.shape[0] > frames:
            outdata[frames:].fill(0)

    # -- the pieces of a block --------------------------------------------------------
    def _take_requests(self) -> None:
        if self._fade_k < self.fade_frames:
            return  # one crossfade at a time; the request waits one block
        if self._seek_serial != self._seek_done:
            self._seek_done = self._seek_serial
            self._start_fade(self.playing, self.position, self.playing, self._seek_frame)
        elif not self.schedule:
            want = self.want
            if self.blind:
                if self._want_serial == self._want_done:
                    return
                self._want_done = self._want_serial
            elif want == self.playing:
                return
            if 0 <= want < len(self.sources):
                self._start_fade(self.playing, self.position, want, self.position)

    def _apply_event(self, e: Event) -> None:
        if e.source == END:
            self._ending = True
        elif e.source != self.playing:
            self._start_fade(self.playing, self.position, e.source, self.position)

    def _start_fade(self, old_src: int, old_pos: int, new_src: int, new_pos: int) -> None:
        self._old_src, self._old_pos = old_src, old_pos
        self.playing, self.position = new_src, new_pos
        self._fade_k = 0

    def _silent(self) -> bool:
        return self._run == 0.0 and (self.paused or self._ending)

    def _segment(self, a: int, b: int) -> None:
        """Mix frames [a, b) of the block: voices, crossfade, source gains, pause fade."""
        m = b - a
        out = self._src_mix[a:b]
        if self._silent():
            out.fill(0.0)
            if self._ending:
                self.finished = True
            return
        voice, idx, g = self._voice[:m], self._idx[:m], self._g[:m]
        # the playing voice (never past the loop end: the block was split there)
        np.add(self._j[:m], self.position, out=idx)
        np.take(self.sources[self.playing], idx, axis=0, out=voice, mode="clip")
        if self._fade_k < self.fade_frames:
            # out = new * g_in + old * g_out, with the gains per frame of the fade
            k, tmp = self._k[:m], self._tmp[:m]
            np.add(self._j[:m], self._fade_k, out=k)
            np.minimum(k, self.fade_frames, out=k)
            np.take(self._fade_in, k, out=g, mode="clip")
            g *= self._gain_lin[self.playing]
            _scale(voice, g, out)
            # the voice being left reads on past the loop end, into the continuation
            np.add(self._j[:m], self._old_pos, out=idx)
            np.take(self.sources[self._old_src], idx, axis=0, out=voice, mode="clip")
            beyond = len(self.sources[0]) - self._old_pos
            if beyond < m:
                voice[max(0, beyond):] = 0.0  # no continuation there: silence
            np.take(self._fade_out, k, out=g, mode="clip")
            g *= self._gain_lin[self._old_src]
            _scale(voice, g, tmp)
            out += tmp
            self._fade_k += m
            self._old_pos += m
        else:
            np.multiply(voice, self._gain_lin[self.playing], out=out)
        # pause / end: a linear fade of the whole output over fade_frames
        target = 0.0 if (self.paused or self._ending) else 1.0
        if self._run != target:
            step = 1.0 / self.fade_frames
            run = self._g2[:m]
            np.multiply(self._j1[:m], step if target > self._run else -step, out=run)
            run += self._run
            np.clip(run, 0.0, 1.0, out=run)
            _scale(out, run, out)
            last = float(run[-1])
            self._run = target if abs(last - target) < 1e-9 else last
        self.position += m
        self.clock += m

    def _level(self, n: int) -> None:
        """Apply the volume with its start ramp (and the mono fan-out) to mix[:n]."""
        mix = self._mix[:n]
        if self._src_mix is not self._mix:
            np.copyto(mix, self._src_mix[:n])  # broadcast mono to every output channel
        target = float(self.volume_db)
        if self._level_abs is None:
            self._level_abs = target - self._start_cut
        lvl = self._g[:n]
        if self._level_abs < target:
            np.multiply(self._j1[:n], self._rise, out=lvl)
            lvl += self._level_abs
            np.minimum(lvl, target, out=lvl)
        elif self._level_abs > target:
            np.multiply(self._j1[:n], -self._fall, out=lvl)
            lvl += self._level_abs
            np.maximum(lvl, target, out=lvl)
        else:
            lvl.fill(target)
        self._level_abs = float(lvl[-1])
        self.level_db = self._level_abs
        lvl *= _LN10_OVER_20
        np.exp(lvl, out=lvl)
        _scale(mix, lvl, mix)

    def _limit(self, n: int) -> None:
        """Hard limiter at the ceiling on mix[:n], linked across channels."""
        mix, ab, pk, need = self._mix[:n], self._abs[:n], self._pk[:n], self._g[:n]
        np.abs(mix, out=ab)
        np.max(ab, axis=1, out=pk)
        pk += 1e-30  # log of silence
        np.log10(pk, out=need)
        need *= -20.0
        need += self.ceiling_dbfs
        np.minimum(need, 0.0, out=need)  # need[n] = min(0, ceiling - 20 log10 peak[n])
        # g[n] = min(need[n], g[n-1] + r) as a running minimum of need[k] - r k
        r = self._release
        ramp = self._g2[:n]
        np.multiply(self._jf[:n], r, out=ramp)
        need -= ramp
        need[0] = min(need[0], self._lim_db + r)
        np.minimum.accumulate(need, out=need)
        need += ramp
        self._lim_db = float(need[-1])
        self.limiter_db = float(need.min())
        need *= _LN10_OVER_20
        np.exp(need, out=need)
        _scale(mix, need, mix)
        # exp/log rounding may leave an ulp above the ceiling: the clip only ever touches that
        np.clip(mix, -self._clip, self._clip, out=mix)
        np.max(np.abs(mix, out=ab), axis=0, out=self.peak)


def _scale(x, g, out) -> None:
    """out[:, c] = x[:, c] * g for every channel c.

    One channel at a time: numpy allocates a buffer for an in-place product
    broadcast over (frames, 1), not for two 1-D strided views.
    """
    for c in range(x.shape[1]):
        np.multiply(x[:, c], g, out=out[:, c])


def parse_script(text: str, labels) -> list[tuple[int, float]]:
    """``"A:2,B:2,A:2"`` -> [(0, 2.0), (1, 2.0), (0, 2.0)]: source index and seconds.

    ``labels`` are the source letters in order (e.g. ``"AB"`` or ``"ABC"``).
    """
    labels = [str(x).upper() for x in labels]
    steps = []
    for part in str(text).split(","):
        label, sep, secs = part.strip().partition(":")
        label = label.strip().upper()
        try:
            seconds = float(secs)
        except ValueError:
            seconds = math.nan
        if not sep or label not in labels or not (math.isfinite(seconds) and seconds > 0):
            raise BadParameter(f"script={text!r}: each step is LETTER:SECONDS with LETTER one of "
                               f"{', '.join(labels)} and SECONDS > 0 (e.g. \"A:2,B:2,A:2\"); {part.strip()!r} is not")
        steps.append((labels.index(label), seconds))
    return steps


def script_schedule(steps, rate_hz: float, fade_frames: int = 0) -> tuple[int, list[Event]]:
    """(initial source, events) for :class:`Mixer` from :func:`parse_script` steps.

    Each step starts on frame ``round(rate * seconds so far)``; the END event is
    placed one fade before the total, so the output has faded out exactly at it.
    """
    events, t = [], 0.0
    for source, seconds in steps:
        frame = int(round(t * rate_hz))
        if events and frame - events[-1].frame < 2 * fade_frames:
            raise BadParameter(f"script: a step of {seconds:g} s is shorter than two crossfades")
        events.append(Event(frame, source))
        t += seconds
    total = int(round(t * rate_hz))
    events.append(Event(max(events[-1].frame, total - fade_frames), END))
    return events[0].source, events[1:]
