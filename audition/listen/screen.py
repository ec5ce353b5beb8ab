"""The listening screen: plain ANSI text in an ordinary terminal (works over ssh), driven by keys.

:class:`Screen` keeps the display state and turns key presses into requests
to the :class:`~audition.listen.engine.Mixer` (it only writes the mixer's
request fields); :meth:`Screen.lines` builds the text from the current state
and is pure, so tests can read it. :func:`run_terminal` is the loop that puts
the terminal in cbreak mode, reads keys with ``select`` and redraws ten times
a second, and restores the terminal whatever happens.

Keys (our own choice)
---------------------
Comparing:  ``a`` ``b`` ``c`` play that version, ``Tab`` the next one.
Blind:      ``a`` ``b`` ``x`` play A, B or the unknown X; ``1`` answers "X is A",
            ``2`` answers "X is B".
Always:     ``Space`` pause/resume, ``Left``/``Right`` (or ``,``/``.``) 2 s back/on,
            ``0`` (or ``Home``) to the loop start, ``+``/``-`` volume up/down 1 dB,
            ``h`` the key list, ``q`` quit.
"""

from __future__ import annotations

import math
import os
import sys
import textwrap

from audition.listen.abx import correct_needed

CAUTION = ("caution: keep monitoring at a moderate level; prolonged loud listening damages hearing; "
           "follow your workplace's noise-at-work rules")
SEEK_SECONDS = 2.0
VOLUME_STEP_DB = 1.0
VOLUME_MIN_DB = -60.0
VOLUME_MAX_DB = 0.0
METER_FLOOR_DBFS = -60.0
METER_WIDTH = 30
#: Meter fall-back after a peak, dB per second (common practice for peak meters, about 20 dB/1.7 s).
METER_FALL_DB_PER_S = 12.0

KEYS = {
    "\x1b[C": "right", "\x1bOC": "right", "\x1b[D": "left", "\x1bOD": "left",
    "\x1b[H": "home", "\x1bOH": "home", "\x1b[1~": "home", "\t": "tab", " ": "space",
}


def split_keys(data: str) -> list[str]:
    """A burst of terminal input as key names (escape sequences kept whole)."""
    keys, i = [], 0
    while i < len(data):
        for seq in sorted(KEYS, key=len, reverse=True):
            if data.startswith(seq, i):
                keys.append(KEYS[seq])
                i += len(seq)
                break
        else:
            keys.append(data[i])
            i += 1
    return keys


def clock_text(seconds: float) -> str:
    m, s = divmod(max(seconds, 0.0), 60.0)
    return f"{int(m)}:{s:06.3f}"


def bar(fraction: float, width: int) -> str:
    n = int(round(min(max(fraction, 0.0), 1.0) * width))
    return "#" * n + "." * (width - n)


class Screen:
    """Display state and key handling of one listening session.

    Parameters
    ----------
    region : audition.listen.sources.Region
    mixer : audition.listen.engine.Mixer
    abx : audition.listen.abx.AbxSession, optional
        Blind mode: the region's two versions are A and B, and X is hidden.
    device_name : str
    """

    def __init__(self, region, mixer, abx=None, device_name: str = ""):
        self.region, self.mixer, self.abx = region, mixer, abx
        self.device_name = device_name
        self.selected = "A"
        self.show_help = False
        self.message = ""
        self.quit = False
        self._meter = [METER_FLOOR_DBFS] * mixer.out_channels
        self.labels = [v.label for v in region.versions]

    # -- keys -------------------------------------------------------------
    def handle(self, key: str) -> None:
        m = self.mixer
        self.message = ""
        if key in ("q", "Q"):
            self.quit = True
        elif key in ("h", "?"):
            self.show_help = not self.show_help
        elif key == "space":
            m.paused = not m.paused
        elif key in ("right", "."):
            m.seek(self._position_frames() + int(SEEK_SECONDS * m.rate_hz))
        elif key in ("left", ","):
            m.seek(self._position_frames() - int(SEEK_SECONDS * m.rate_hz))
        elif key in ("home", "0"):
            m.seek(0)
        elif key in ("+", "="):
            m.volume_db = min(VOLUME_MAX_DB, m.volume_db + VOLUME_STEP_DB)
        elif key in ("-", "_"):
            m.volume_db = max(VOLUME_MIN_DB, m.volume_db - VOLUME_STEP_DB)
        elif self.abx is not None:
            self._handle_blind(key)
        elif key == "tab":
            i = self.labels.index(self.selected)
            self.select(self.labels[(i + 1) % len(self.labels)])
        elif key.upper() in self.labels:
            self.select(key.upper())

    def _handle_blind(self, key: str) -> None:
        abx = self.abx
        if key.upper() in ("A", "B", "X"):
            self.select(key.upper())
        elif key in ("1", "2") and not abx.done:
            abx.answer("A" if key == "1" else "B")
            self.message = (f"answer {len(abx.answers)} recorded: X is {abx.answers[-1].answer}"
                            if not abx.done else "all trials answered")
            self.select(self.selected)  # X may now be the other one
        elif key == "tab":
            order = ["A", "B", "X"]
            self.select(order[(order.index(self.selected) + 1) % 3])

    def select(self, label: str) -> None:
        """Play version ``label`` (in blind mode "X" plays the hidden one)."""
        self.selected = label
        if self.abx is not None:
            self.abx.listened(label)
            actual = self.abx.x if label == "X" else label
        else:
            actual = label
        self.mixer.select(self.labels.index(actual))

    def _position_frames(self) -> int:
        return int(self.mixer.position) % self.mixer.region_frames

    # -- text ---------------------------------------------------------------
    def tick(self, seconds: float) -> None:
        """Let the peak meters fall back by ``seconds`` and take the new peaks."""
        for i, p in enumerate(self.mixer.peak):
            db = 20.0 * math.log10(p) if p > 0 else METER_FLOOR_DBFS
            self._meter[i] = max(db, self._meter[i] - METER_FALL_DB_PER_S * seconds, METER_FLOOR_DBFS)

    def lines(self, width: int = 100) -> list[str]:
        r, m = self.region, self.mixer
        pos = self._position_frames() / r.rate_hz
        loop = f"{clock_text(r.start_seconds)} - {clock_text(r.start_seconds + r.seconds)}"
        out = [
            f"audition listen   {os.path.basename(r.path)}   {r.rate_hz:g} Hz, {r.channels} ch   "
            f"out: {self.device_name}",
            f"loop {loop} ({r.seconds:.1f} s)  block {m.max_block} frames = {m.block_ms:.1f} ms  "
            f"crossfade {m.fade_ms:.1f} ms",
            "",
        ]
        match = "loudness-matched (BS.1770-4 over the loop)" if r.level_matched else "NOT level-matched"
        if self.abx is None:
            out.append(f"versions, {match}:")
            for i, v in enumerate(r.versions):
                mark = ">" if i == m.playing else " "
                out.append(f" {mark} [{v.label}] {v.name:<40.40} {v.gain_db:+6.2f} dB  {v.loudness_lkfs:6.1f} LKFS")
        else:
            abx = self.abx
            out.append(f"blind test (ABX), {match}:")
            for v in r.versions:
                mark = ">" if self.selected == v.label else " "
                out.append(f" {mark} [{v.label}] {v.name:<40.40} {v.gain_db:+6.2f} dB")
            mark = ">" if self.selected == "X" else " "
            out.append(f" {mark} [X] A or B, hidden")
            if abx.done:
                out.append(f"   result: {abx.verdict()}")
            else:
                need = correct_needed(abx.trials)
                out.append(f"   trial {abx.trial} of {abx.trials}: is X A (key 1) or B (key 2)?"
                           + (f"   ({need} right of {abx.trials} give p < 0.05)" if need is not None else ""))
        out.append("")
        state = "paused" if m.paused else "playing"
        now = self.selected if self.abx is not None else r.versions[m.playing].label
        out.append(f"{state} {now}   {clock_text(r.start_seconds + pos)}  [{bar(pos / r.seconds, 40)}]")
        if self.abx is None:
            names = ["L", "R"] if m.out_channels == 2 else [str(i + 1) for i in range(m.out_channels)]
            for name, db in list(zip(names, self._meter))[:8]:
                frac = (db - METER_FLOOR_DBFS) / -METER_FLOOR_DBFS
                out.append(f"  {name:>2} [{bar(frac, METER_WIDTH)}] {db:6.1f} dBFS peak")
            limiter = f"{m.limiter_db:+.1f} dB"
        else:
            # peaks and gain reduction differ between A and B: they would give X away
            out.append("  (level meters hidden during the blind test)")
            limiter = "on"
        out.append(f"volume {m.volume_db:+.0f} dB (now {m.level_db:+.1f})   limiter at {m.ceiling_dbfs:g} dBFS: "
                   f"{limiter}   underruns {m.underruns}")
        out.append("")
        if self.show_help:
            out += self.help_lines()
        else:
            pick = "a b x hear  1: X is A  2: X is B" if self.abx is not None else \
                f"{' '.join(v.label.lower() for v in r.versions)} version  tab next"
            out.append(f"keys: {pick}  space pause  <- -> 2 s  +/- vol  h more  q quit")
        out.append(self.message)
        out = [line[:width] for line in out]
        # the caution is never cut: wrapped to the width instead
        return out + textwrap.wrap(CAUTION, width, subsequent_indent="  ")

    def help_lines(self) -> list[str]:
        if self.abx is not None:
            pick = ["  a, b, x     hear A, B, or X (which is A or B, hidden)",
                    "  1           answer: X is A",
                    "  2           answer: X is B",
                    "  tab         next of A, B, X"]
        else:
            pick = [f"  {', '.join(v.label.lower() for v in self.region.versions)}"
                    f"{' ' * max(1, 12 - 3 * len(self.region.versions))}hear that version (switches at the next block)",
                    "  tab         the next version"]
        return pick + ["  space       pause / resume",
                       "  <- ->  , .  2 s back / on (the loop wraps)",
                       "  0  home     back to the loop start",
                       "  + -         volume up / down 1 dB (ramps up slowly; never above 0 dB)",
                       "  h ?         this list on/off",
                       "  q           quit"]


def run_terminal(sd, screen: Screen, device: dict, stdin=None, stdout=None, frame_seconds: float = 0.1) -> None:
    """Play and draw until the listener quits; the terminal is restored on any exit."""
    import select
    import termios
    import tty

    from audition.listen.device import open_stream

    stdin = stdin or sys.stdin
    stdout = stdout or sys.stdout
    fd = stdin.fileno()
    saved = termios.tcgetattr(fd)
    stream = open_stream(sd, screen.mixer, device)
    try:
        tty.setcbreak(fd)
        stdout.write("\x1b[?25l\x1b[H\x1b[2J")
        with stream:
            while not screen.quit:
                ready, _, _ = select.select([fd], [], [], frame_seconds)
                if ready:
                    data = os.read(fd, 64).decode("utf-8", "replace")
                    for key in split_keys(data):
                        screen.handle(key)
                screen.tick(frame_seconds)
                width = os.get_terminal_size(stdout.fileno()).columns if stdout.isatty() else 100
                text = "".join(line + "\x1b[K\n" for line in screen.lines(max(40, width - 1)))
                stdout.write("\x1b[H" + text + "\x1b[J")
                stdout.flush()
    finally:
        termios.tcsetattr(fd, termios.TCSADRAIN, saved)
        stdout.write("\x1b[?25h\n")
        stdout.flush()
