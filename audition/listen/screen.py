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

from audition.listen.abx import ALPHA, correct_needed, too_few_trials

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
#: The terminal the screen is laid out for: 80 x 24, drawn one column short of the
#: width (a character in the last column makes some terminals wrap).
SCREEN_WIDTH = 79
SCREEN_HEIGHT = 24
MIN_WIDTH = 40

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
    output_note : str
        How the region reaches the device (its rate, and who converts it), shown under the title.
    log_path : str, optional
        Where the ABX session log will be written (shown, so the listener knows).
    """

    def __init__(self, region, mixer, abx=None, device_name: str = "", output_note: str = "",
                 log_path: str | None = None):
        self.region, self.mixer, self.abx = region, mixer, abx
        self.device_name = device_name
        self.output_note = output_note
        self.log_path = log_path
        self.selected = "A"
        self.show_help = False
        self.message = ""
        self.quit = False
        self._meter = [METER_FLOOR_DBFS] * mixer.out_channels
        self.labels = [v.label for v in region.versions]
        self._trial_underruns = 0  # the mixer's count when the current ABX trial began

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
        elif key.upper() == "C":
            self.message = ("no C version in this session: start with --against F0[:Q], a plan file or a "
                            "preset name to compare a second filter")

    def _handle_blind(self, key: str) -> None:
        abx = self.abx
        if key.upper() in ("A", "B", "X"):
            self.select(key.upper())
        elif key in ("1", "2") and not abx.done:
            underruns = self.mixer.underruns
            abx.answer("A" if key == "1" else "B", underruns=underruns - self._trial_underruns)
            self._trial_underruns = underruns
            self.message = (f"answer {len(abx.answers)} recorded: X is {abx.answers[-1].answer}"
                            if not abx.done else "all trials answered: q to quit and write the log")
            self.select(self.selected)  # X may now be the other one
        elif key == "tab":
            order = ["A", "B", "X"]
            self.select(order[(order.index(self.selected) + 1) % 3])
        elif key.upper() == "C":
            self.message = "in the blind test the versions are A and B (and X, one of them); c plays nothing"

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

    def lines(self, width: int = SCREEN_WIDTH, height: int = SCREEN_HEIGHT) -> list[str]:
        """The screen as lines of at most ``width`` characters, at most ``height`` of them if it can be.

        Nothing is cut: long text wraps (a word longer than the width is broken,
        never dropped). When the lines would not fit ``height``, the blank
        separators go first, then the level meters, then the key list shrinks
        back to one line of hints.
        """
        width = max(int(width), MIN_WIDTH)
        parts = self._parts(width)
        for drop in ("spacer", "meter", "help"):
            if sum(len(ls) for _, ls in parts) <= height:
                break
            if drop == "help" and self.show_help:
                parts = [(k, ls) for k, ls in parts if k != "help"] + [("keys", self._key_lines(width))]
                parts.sort(key=lambda kl: _ORDER.index(kl[0]) if kl[0] in _ORDER else len(_ORDER))
            else:
                parts = [(k, ls) for k, ls in parts if k != drop]
        return [line for _, ls in parts for line in ls]

    def _parts(self, width: int) -> list[tuple[str, list[str]]]:
        """(kind, lines) pieces of the screen, in order, each already wrapped to ``width``."""
        r, m = self.region, self.mixer
        w = lambda text, indent=2: _wrap(text, width, indent)  # noqa: E731
        pos = self._position_frames() / m.rate_hz
        loop = f"{clock_text(r.start_seconds)} - {clock_text(r.start_seconds + r.seconds)}"
        parts = [("head", w(f"audition listen  {os.path.basename(r.path)}")),
                 ("head", w(f"{r.file_rate_hz:g} Hz, {r.channels} ch -> out {self.device_name}"
                            + (f", {self.output_note}" if self.output_note else ""))),
                 ("head", w(f"loop {loop} ({r.seconds:.1f} s)  block {m.max_block} frames = {m.block_ms:.1f} ms  "
                            f"crossfade {m.fade_ms:.1f} ms")),
                 ("spacer", [""])]
        match = "loudness-matched (BS.1770-4 over the loop)" if r.level_matched else "NOT level-matched"
        if self.abx is None:
            parts.append(("versions", w(f"versions, {match}:")))
            for i, v in enumerate(r.versions):
                mark = ">" if i == m.playing else " "
                parts.append(("versions", _wrap(f" {mark} [{v.label}] {v.gain_db:+6.2f} dB {v.loudness_lkfs:6.1f} LKFS"
                                                f"  {v.name}", width, 30)))
        else:
            abx = self.abx
            parts.append(("versions", w(f"blind test (ABX), {match}:")))
            for v in r.versions:
                mark = ">" if self.selected == v.label else " "
                parts.append(("versions", _wrap(f" {mark} [{v.label}] {v.gain_db:+6.2f} dB  {v.name}", width, 18)))
            mark = ">" if self.selected == "X" else " "
            parts.append(("versions", [f" {mark} [X] A or B, hidden"]))
            if abx.done:
                parts.append(("versions", _wrap(f"   result: {abx.verdict()}", width, 5)))
            else:
                need = correct_needed(abx.trials)
                parts.append(("versions", _wrap(
                    f"   trial {abx.trial} of {abx.trials}: is X A (key 1) or B (key 2)?"
                    + (f"  ({need} right of {abx.trials} give p < {ALPHA:g})" if need is not None else ""),
                    width, 5)))
            few = too_few_trials(abx.trials)
            if few:
                parts.append(("versions", _wrap(f"   warning: {few}", width, 5)))
        parts.append(("spacer", [""]))
        state = "paused" if m.paused else "playing"
        now = self.selected if self.abx is not None else r.versions[m.playing].label
        parts.append(("status", [f"{state} {now}   {clock_text(r.start_seconds + pos)}  "
                                 f"[{bar(pos / r.seconds, min(40, width - 25))}]"]))
        if self.abx is None:
            if m.out_channels <= 2:
                names = ["L", "R"] if m.out_channels == 2 else ["1"]
                meter = [f"  {name:>2} [{bar((db - METER_FLOOR_DBFS) / -METER_FLOOR_DBFS, METER_WIDTH)}] "
                         f"{db:6.1f} dBFS peak" for name, db in zip(names, self._meter)]
            else:
                meter = w("  peaks, dBFS: " + "  ".join(f"{i + 1} {db:.1f}" for i, db in enumerate(self._meter)),
                          16)
            parts.append(("meter", meter))
            limiter = f"{m.limiter_db:+.1f} dB"
        else:
            # peaks and gain reduction differ between A and B: they would give X away
            parts.append(("meter", ["  (level meters hidden during the blind test)"]))
            limiter = "on"
        parts.append(("status", w(f"volume {m.volume_db:+.0f} dB (now {m.level_db:+.1f})   limiter at "
                                  f"{m.ceiling_dbfs:g} dBFS: {limiter}   underruns {m.underruns}")))
        if self.log_path:
            home = os.path.expanduser("~")
            shown = "~" + self.log_path[len(home):] if home != "~" and self.log_path.startswith(home + os.sep) \
                else self.log_path
            parts.append(("status", w(f"log: {shown}")))
        parts.append(("spacer", [""]))
        parts.append(("help", self.help_lines(width)) if self.show_help else ("keys", self._key_lines(width)))
        if self.message:
            parts.append(("message", w(self.message)))
        # the caution is never dropped
        parts.append(("caution", w(CAUTION)))
        return parts

    def _key_lines(self, width: int) -> list[str]:
        if self.abx is not None:
            items = ["keys: a b x hear", "1: X is A", "2: X is B"]
        else:
            items = [f"keys: {' '.join(v.label.lower() for v in self.region.versions)} version", "tab next"]
        return _pack(items + ["space pause", "<- -> 2 s", "+/- vol", "h more", "q quit"], width)

    def help_lines(self, width: int = SCREEN_WIDTH) -> list[str]:
        """The key list, in two columns when the width allows."""
        if self.abx is not None:
            pick = [("a b x", "hear A, B or hidden X"), ("1", "answer: X is A"), ("2", "answer: X is B"),
                    ("tab", "next of A, B, X")]
        else:
            pick = [(" ".join(v.label.lower() for v in self.region.versions), "hear that version"),
                    ("tab", "the next version")]
        # short enough for two columns in 79
        rows = pick + [("space", "pause / resume"), ("<- -> , .", "2 s back / on (loops)"),
                       ("0 home", "back to the loop start"), ("+ -", "volume 1 dB (at most 0)"),
                       ("h ?", "this list on / off"), ("q", "quit")]
        cells = [f"  {k:<10}{text}" for k, text in rows]
        col = max(len(c) for c in cells) + 1
        if 2 * col <= width:
            half = (len(cells) + 1) // 2
            return [(a.ljust(col) + b).rstrip() for a, b in zip(cells[:half], cells[half:] + [""])]
        return [line for c in cells for line in _wrap(c, width, 12)]


#: The order of the pieces of the screen (used when the key list is put back in place of the help).
_ORDER = ("head", "spacer", "versions", "status", "meter", "keys", "help", "message", "caution")


def _wrap(text: str, width: int, indent: int = 2) -> list[str]:
    """``text`` wrapped to ``width`` (its leading spaces kept), continuation lines indented."""
    if not text.strip():
        return [""]
    return textwrap.wrap(text, width, subsequent_indent=" " * min(indent, width // 2), break_on_hyphens=False)


def _pack(items: list[str], width: int, sep: str = "  ") -> list[str]:
    """Items on as few lines as fit ``width``, never splitting an item (unless it alone is too long)."""
    lines: list[str] = []
    for item in items:
        if lines and len(lines[-1]) + len(sep) + len(item) <= width:
            lines[-1] += sep + item
        else:
            lines += _wrap(("  " if lines else "") + item, width)
    return lines


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
                size = os.get_terminal_size(stdout.fileno()) if stdout.isatty() else os.terminal_size((80, 24))
                # one column short of the width; no newline after the last line (on the
                # bottom row it would scroll the first line away)
                text = "\x1b[K\n".join(screen.lines(size.columns - 1, size.lines))
                stdout.write("\x1b[H" + text + "\x1b[K\x1b[J")
                stdout.flush()
    finally:
        termios.tcsetattr(fd, termios.TCSADRAIN, saved)
        stdout.write("\x1b[?25h\n")
        stdout.flush()
