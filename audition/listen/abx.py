"""ABX blind trials: is the difference between A and B really audible?

In each trial X is A or B, drawn at random (a seeded generator, so a session
can be replayed); the listener may hear A, B and X as often as they like and
then says whether X is A or B. Guessing gets each answer right with
probability 1/2, so after k right answers out of n the one-sided p-value is

.. math:: p = P(K \\ge k \\mid K \\sim \\mathrm{Bin}(n, 1/2)) = 2^{-n} \\sum_{i=k}^{n} \\binom{n}{i}

the chance of doing at least that well by guessing. A small p (0.05 is the
usual line, common practice) says the listener heard a difference.

:class:`AbxSession` is pure bookkeeping (no sound, no terminal): the screen
asks it for the current X and hands it the answers; :meth:`AbxSession.to_dict`
is the JSON session log.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from audition.errors import BadParameter

#: Default number of trials.
TRIALS = 16
#: The p-value below which the screen says a difference was heard (common practice).
ALPHA = 0.05


def binomial_p_value(correct: int, trials: int) -> float:
    """One-sided p-value of ``correct`` right answers out of ``trials`` by guessing (p = 1/2).

    Exact: ``sum(comb(n, i) for i in range(k, n + 1)) / 2**n``.

    >>> binomial_p_value(12, 16)
    0.0384063720703125
    """
    if not (isinstance(trials, (int, np.integer)) and trials >= 0 and isinstance(correct, (int, np.integer))
            and 0 <= correct <= trials):
        raise BadParameter(f"correct={correct!r}, trials={trials!r}: need whole numbers 0 <= correct <= trials")
    if trials == 0:
        return 1.0
    return math.fsum(math.comb(trials, i) for i in range(correct, trials + 1)) / 2.0 ** trials


def correct_needed(trials: int, alpha: float = ALPHA) -> int | None:
    """The fewest right answers out of ``trials`` with p < ``alpha`` (None if none suffices)."""
    for k in range(trials + 1):
        if binomial_p_value(k, trials) < alpha:
            return k
    return None


def trials_needed(alpha: float = ALPHA) -> int:
    """The fewest trials in which some score reaches p < ``alpha``: all right, p = 2**-n < alpha.

    >>> trials_needed(0.05)
    5
    """
    if not 0.0 < alpha < 1.0:
        raise BadParameter(f"alpha={alpha!r}: must lie between 0 and 1")
    return max(1, math.floor(math.log2(1.0 / alpha)) + 1)


def too_few_trials(trials: int, alpha: float = ALPHA) -> str | None:
    """One line saying that ``trials`` can never reach p < ``alpha`` and how many can; None if they can.

    >>> too_few_trials(4)  # doctest: +ELLIPSIS
    '4 trials can never show a difference: even 4 of 4 right gives p = 0.0625, not below 0.05; 5 trials...'
    """
    if correct_needed(trials, alpha) is not None:
        return None
    best = binomial_p_value(trials, trials)
    return (f"{trials} trial{'s' if trials != 1 else ''} can never show a difference: even {trials} of {trials} "
            f"right gives p = {best:.4g}, not below {alpha:g}; {trials_needed(alpha)} trials are the fewest that can")


@dataclass
class Answer:
    trial: int
    x_is: str
    answer: str
    correct: bool
    started_utc: str
    answered_utc: str
    seconds: float
    listens: dict
    underruns: int = 0


class AbxSession:
    """The trials of one ABX session.

    Parameters
    ----------
    trials : int
        Number of trials (>= 1).
    seed : int
        Seed of the draw of X.
    settings : dict
        What is being compared (written to the log as is).
    clock : callable
        Seconds (monotonic); injectable for tests.
    """

    def __init__(self, trials: int = TRIALS, seed: int = 0, settings: dict | None = None, clock=time.monotonic):
        if not (isinstance(trials, (int, np.integer)) and 1 <= trials <= 1000):
            raise BadParameter(f"trials={trials!r}: need a whole number 1 ... 1000")
        self.trials = int(trials)
        self.seed = int(seed)
        self.settings = dict(settings or {})
        self._clock = clock
        # The whole sequence of X is drawn up front, so it does not depend on the listener.
        self.sequence = tuple("AB"[int(i)] for i in np.random.default_rng(self.seed).integers(0, 2, self.trials))
        self.answers: list[Answer] = []
        self.started_utc = _utc()
        self._t0 = clock()
        self._trial_t0 = self._t0
        self._trial_utc = self.started_utc
        self._listens = {"A": 0, "B": 0, "X": 0}

    @property
    def done(self) -> bool:
        return len(self.answers) >= self.trials

    @property
    def trial(self) -> int:
        """Number of the current trial, from 1."""
        return min(len(self.answers) + 1, self.trials)

    @property
    def x(self) -> str:
        """What X is in the current trial ("A" or "B")."""
        return self.sequence[min(len(self.answers), self.trials - 1)]

    def listened(self, which: str) -> None:
        """Count a listen to A, B or X in the current trial (for the log)."""
        if which in self._listens:
            self._listens[which] += 1

    def answer(self, says: str, underruns: int = 0) -> bool:
        """Record the listener's answer for the current trial ("A" or "B"); True when right.

        ``underruns`` is the number of output underruns (dropouts) heard during
        the trial, for the log: a trial with a dropout may deserve a second look.
        """
        says = str(says).upper()
        if says not in ("A", "B"):
            raise BadParameter(f"answer={says!r}: X is either 'A' or 'B'")
        if self.done:
            raise BadParameter(f"all {self.trials} trials are answered")
        now, utc = self._clock(), _utc()
        ok = says == self.x
        self.answers.append(Answer(len(self.answers) + 1, self.x, says, ok, self._trial_utc, utc,
                                   round(now - self._trial_t0, 3), dict(self._listens), int(underruns)))
        self._trial_t0, self._trial_utc = now, utc
        self._listens = {"A": 0, "B": 0, "X": 0}
        return ok

    @property
    def correct(self) -> int:
        return sum(a.correct for a in self.answers)

    @property
    def p_value(self) -> float:
        return binomial_p_value(self.correct, len(self.answers))

    def verdict(self) -> str:
        n, k = len(self.answers), self.correct
        if n == 0:
            return "no answers"
        p = self.p_value
        heard = ("a difference was heard" if p < ALPHA else
                 "no evidence of an audible difference (guessing does as well this often)")
        return f"{k} of {n} right, one-sided binomial p = {p:.4f}: {heard}"

    def to_dict(self) -> dict:
        """The JSON session log: settings, every answer with its times, the result."""
        return {
            "kind": "abx",
            "started_utc": self.started_utc,
            "finished_utc": _utc(),
            "seconds": round(self._clock() - self._t0, 3),
            "seed": self.seed,
            "trials_planned": self.trials,
            "settings": self.settings,
            "answers": [a.__dict__ for a in self.answers],
            "result": {"trials": len(self.answers), "correct": self.correct, "p_value": self.p_value,
                       "alpha": ALPHA, "verdict": self.verdict()},
        }


def _utc() -> str:
    import datetime as dt

    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")
