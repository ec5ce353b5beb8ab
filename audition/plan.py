"""Choose a hiss filter from the surveyed spectra: candidate search, trade-off and the choice.

Every candidate's prediction comes from the surveyed programme and noise spectra
(:mod:`audition.measure`), never from filtering the audio again, so planning costs
little more than surveying. The search is vectorised: the power response |H(f)|²
of every candidate on the survey's frequency grid forms one matrix, and the weighted
programme, noise and treble powers are three matrix-vector products.

The choice: the candidate with the highest weighted SNR gain whose treble loss stays
within the budget and whose resonant peak stays within ``max_peak_db``. Ties (gains within 0.05 dB) go to the gentler filter (higher f0,
lower order), because a technician would rather keep what cannot be put back.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter

DEFAULT_BUDGET_DB = 1.0
DEFAULT_WEIGHTING = "itu468"
DEFAULT_ORDERS = (2, 4)
#: Second-order Qs searched: from well damped through Bessel (0.5774) and Butterworth
#: (0.7071) to a mild presence peak. Above about 1.2 the peak itself colours the
#: programme more than any hiss saving is worth (engineering judgement).
SECOND_ORDER_QS = (0.5, 1 / math.sqrt(3), 0.65, 1 / math.sqrt(2), 0.8, 0.9, 1.0, 1.2)
#: Alignments searched for orders above two.
HIGHER_ALIGNMENTS = ("butterworth", "bessel", "linkwitz-riley")
#: Points per octave of the f0 grid (1/24 octave: finer than anyone can hear a cutoff move).
F0_POINTS_PER_OCTAVE = 24
F0_LOW_HZ = 1000.0
TIE_DB = 0.05
#: Largest resonant peak allowed by default, dB (engineering judgement: a presence lift
#: beyond about 1.5 dB is heard as colour, and no loss figure counts it).
DEFAULT_MAX_PEAK_DB = 1.5


@dataclass(frozen=True)
class Candidate:
    """One design and what it is predicted to do."""

    design: object
    snr_gain_db: dict
    treble_loss_db: float

    @property
    def label(self) -> str:
        d = self.design
        if d.alignment:
            return f"{d.f0_hz:,.0f} Hz, order {d.order} {d.alignment}"
        return f"{d.f0_hz:,.0f} Hz, order {d.order}, Q {d.q:.3f}"

    def to_dict(self) -> dict:
        d = self.design
        return {
            "f0_hz": d.f0_hz,
            "q": d.q,
            "order": d.order,
            "alignment": d.alignment,
            "method": d.method,
            "sections": d.to_dict()["sections"],
            "analog_sections": d.to_dict()["analog_sections"],
            "predicted": {"snr_gain_db": dict(self.snr_gain_db), "treble_loss_db": self.treble_loss_db},
        }


@dataclass(frozen=True)
class Plan:
    """The outcome of a search: the choice, the trade-off and what to be careful of."""

    choice: Candidate | None
    front: tuple[Candidate, ...]
    alternatives: tuple[Candidate, ...]
    budget_db: float
    weighting: str
    explanation: str
    warnings: tuple[str, ...]
    searched: int
    all_gain_db: np.ndarray = field(repr=False, compare=False)
    all_loss_db: np.ndarray = field(repr=False, compare=False)
    all_allowed: np.ndarray = field(repr=False, compare=False)

    def to_dict(self) -> dict:
        return {
            "choice": None if self.choice is None else self.choice.to_dict(),
            "budget_db": self.budget_db,
            "weighting": self.weighting,
            "explanation": self.explanation,
            "candidates": [c.to_dict() for c in self.front],
            "alternatives": [c.to_dict() for c in self.alternatives],
            "searched": self.searched,
            "warnings": list(self.warnings),
        }


def f0_grid(rate_hz: float, low_hz: float = F0_LOW_HZ, points_per_octave: int = F0_POINTS_PER_OCTAVE) -> np.ndarray:
    """Logarithmic f0 grid from ``low_hz`` up to just below Nyquist (0.95 × rate/2)."""
    top = 0.95 * rate_hz / 2.0
    n = int(math.floor(math.log2(top / low_hz) * points_per_octave)) + 1
    return low_hz * 2.0 ** (np.arange(n) / points_per_octave)


def candidate_designs(rate_hz: float, orders=DEFAULT_ORDERS, method: str = "bilinear", f0s=None,
                      highpass_hz: float | None = None):
    """Every design on the search grid: (f0 × Q) for order 2, (f0 × alignment) above."""
    from audition import design

    f0s = f0_grid(rate_hz) if f0s is None else np.asarray(f0s, dtype=float)
    out = []
    for order in orders:
        if order < 1 or order > 8:
            raise BadParameter(f"orders: {order!r} is outside 1..8")
        for f0 in f0s:
            if order == 2:
                specs = [dict(q=q) for q in SECOND_ORDER_QS]
            elif order == 1:
                specs = [dict(order=1)]
            else:
                specs = [dict(order=order, alignment=a) for a in HIGHER_ALIGNMENTS
                         if not (a == "linkwitz-riley" and order % 2)]
            for spec in specs:
                try:
                    out.append(design.lowpass(float(f0), rate_hz, method=method, highpass_hz=highpass_hz, **spec))
                except BadParameter:
                    continue  # e.g. a Bessel section pushed above Nyquist at the top of the grid
    return out


def power_responses(designs, freqs_hz) -> np.ndarray:
    r"""|H(e^{jω})|² of every design's sections at ``freqs_hz``, as one (n_designs, n_bins) array.

    Notes
    -----
    For one section with b = (b0, b1, b2), |b0 + b1 e^{-jω} + b2 e^{-2jω}|² is real:

    .. math:: (b_0^2 + b_1^2 + b_2^2) + 2(b_0 b_1 + b_1 b_2)\cos ω + 2 b_0 b_2 \cos 2ω
              = (b_0 + b_1 + b_2)^2 - 4(b_0 b_1 + b_1 b_2 + 4 b_0 b_2)\,u + 16 b_0 b_2\,u^2,
              \qquad u = \sin^2(ω/2)

    and likewise the denominator with (1, a1, a2), so the power responses of all
    candidates are products of matrix products with the three rows (1, u, u²),
    without complex arithmetic (ω = 2π f / rate; the candidates share one rate).
    The form in u keeps its accuracy near DC, where a rumble high-pass has its
    zeros and poles close to z = 1 (the cos form loses digits there to cancellation).
    """
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    out = np.ones((len(designs), freqs_hz.size))
    if not designs:
        return out
    rate = designs[0].rate_hz
    w = 2.0 * np.pi * freqs_hz / rate
    u = np.sin(w / 2.0) ** 2
    basis = np.stack([np.ones_like(u), u, u * u])
    n_sec = max(len(d.sos) for d in designs)
    # Missing sections are the identity row [1 0 0 1 0 0].
    sos = np.zeros((len(designs), n_sec, 6))
    sos[:, :, 0] = sos[:, :, 3] = 1.0
    for i, d in enumerate(designs):
        if abs(d.rate_hz - rate) > 1e-9 * rate:
            raise BadParameter("power_responses: the candidates must share one sample rate")
        sos[i, :len(d.sos)] = d.sos
    # Chunks of candidates keep the temporaries in cache. Rounding near a zero of the
    # numerator (the bilinear zero at Nyquist) can leave a tiny negative: floor at zero.
    for c0 in range(0, len(designs), _CHUNK):
        part = out[c0:c0 + _CHUNK]
        for k in range(n_sec):
            num = _power_coefficients(sos[c0:c0 + _CHUNK, k, :3]) @ basis
            den = _power_coefficients(sos[c0:c0 + _CHUNK, k, 3:]) @ basis
            np.maximum(num, 0.0, out=num)
            num /= den
            part *= num
    return out


_CHUNK = 64


def _power_coefficients(c: np.ndarray) -> np.ndarray:
    """(n, 3) polynomial rows -> (n, 3) coefficients of (1, u, u²) in |c0 + c1 z⁻¹ + c2 z⁻²|² (see above)."""
    c0, c1, c2 = c[:, 0], c[:, 1], c[:, 2]
    return np.stack([(c0 + c1 + c2) ** 2, -4.0 * (c0 * c1 + c1 * c2 + 4.0 * c0 * c2), 16.0 * c0 * c2], axis=1)


def evaluate(designs, freqs_hz, programme_psd, noise_psd, weightings, treble_from_hz):
    """Weighted SNR gain (dict of arrays), treble loss and peak gain (arrays, dB) of every design, in one go."""
    from audition.measure import gains_and_losses

    freqs_hz = np.asarray(freqs_hz, dtype=float)
    h2 = power_responses(designs, freqs_hz)
    gains, loss = gains_and_losses(h2, freqs_hz, programme_psd, noise_psd, weightings, treble_from_hz)
    with np.errstate(divide="ignore"):
        peak_db = 10.0 * np.log10(h2.max(axis=1))
    return gains, loss, peak_db


def pareto_front(gain: np.ndarray, loss: np.ndarray) -> np.ndarray:
    """Indices of the candidates no other beats on both counts (more gain and less loss), by loss."""
    order = np.lexsort((-gain, loss))
    front, best = [], -np.inf
    for i in order:
        if gain[i] > best + 1e-9:
            front.append(i)
            best = gain[i]
    return np.array(front, dtype=int)


def choose(designs, gains: dict, loss: np.ndarray, weighting: str, budget_db: float,
           allowed: np.ndarray | None = None) -> int | None:
    """Index of the best candidate within the budget (among ``allowed``); None if none fits."""
    g = gains[weighting]
    ok = (loss <= budget_db) & np.isfinite(g)
    if allowed is not None:
        ok &= allowed
    ok = np.nonzero(ok)[0]
    if ok.size == 0:
        return None
    best = float(np.max(g[ok]))
    near = [i for i in ok if g[i] >= best - TIE_DB]
    # Among near-ties: the gentlest (highest f0, then lowest order).
    return max(near, key=lambda i: (designs[i].f0_hz, -designs[i].order, -loss[i]))


def plan(freqs_hz, programme_psd, noise_psd, rate_hz: float, *, budget_db: float = DEFAULT_BUDGET_DB,
         weighting: str = DEFAULT_WEIGHTING, orders=DEFAULT_ORDERS, method: str = "bilinear",
         treble_from_hz: float = 2000.0, crossover_hz: float | None = None, highpass_hz: float | None = None,
         max_peak_db: float = DEFAULT_MAX_PEAK_DB, extra_warnings=()) -> Plan:
    """Search the candidates and choose one.

    Parameters
    ----------
    freqs_hz, programme_psd, noise_psd : ndarray
        The survey's uniformly spaced frequencies and PSDs (full-scale²/Hz).
    rate_hz : float
        The file's sample rate.
    budget_db : float
        Largest treble loss allowed, dB (positive).
    weighting : {"flat", "a", "itu468"}
        The weighting whose SNR gain is maximised.
    orders : sequence of int
    max_peak_db : float
        Largest resonant peak a candidate may have, dB (default 1.5: Q up to 1.0 at
        second order, whose peak is 1.25 dB).
    crossover_hz : float, optional
        Where the programme meets the floor (from the survey), for the explanation.
    """
    from audition.weighting import WEIGHTINGS, check_name

    check_name(weighting)
    if not (budget_db > 0 and math.isfinite(budget_db)):
        raise BadParameter(f"budget-db={budget_db!r}: the treble-loss budget must be a positive number of dB")
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    programme_psd = np.asarray(programme_psd, dtype=float)
    noise_psd = np.asarray(noise_psd, dtype=float)
    if not (max_peak_db >= 0 and math.isfinite(max_peak_db)):
        raise BadParameter(f"max-peak-db={max_peak_db!r}: must be a non-negative number of dB")
    designs = candidate_designs(rate_hz, orders, method, highpass_hz=highpass_hz)
    gains, loss, peak_db = evaluate(designs, freqs_hz, programme_psd, noise_psd, WEIGHTINGS, treble_from_hz)
    # A resonant peak colours the programme in a way the treble-loss figure does not count.
    allowed = peak_db <= max_peak_db + 1e-9

    def cand(i):
        return Candidate(designs[i], {k: float(v[i]) for k, v in gains.items()}, float(loss[i]))

    g = np.where(np.isfinite(gains[weighting]) & allowed, gains[weighting], -np.inf)
    front_idx = pareto_front(g, loss)
    front = tuple(cand(i) for i in front_idx if np.isfinite(g[i]))
    ci = choose(designs, gains, loss, weighting, budget_db, allowed)
    warnings = list(extra_warnings)
    if ci is None:
        warnings.append(f"no candidate keeps the treble loss within {budget_db:g} dB: the programme's treble "
                        "sits below the hiss; raise --budget-db or leave the treble alone")
        choice, alternatives = None, ()
    else:
        choice = cand(ci)
        alternatives = _alternatives(g, loss, budget_db, ci, cand)
        if choice.snr_gain_db[weighting] < 0.5:
            warnings.append(f"the best filter within budget gains only {choice.snr_gain_db[weighting]:.2f} dB "
                            f"({weighting}): the hiss is too low, or too mixed with the programme, to matter")
    explanation = explain(choice, alternatives, weighting, budget_db, crossover_hz)
    return Plan(choice, front, alternatives, float(budget_db), weighting, explanation, tuple(warnings), len(designs),
                gains[weighting], loss, allowed)


def _alternatives(g, loss, budget_db, ci, cand):
    """A gentler and a stronger neighbour of the choice: the best within half and twice the budget."""
    out = []
    for factor in (0.5, 2.0):
        ok = np.nonzero((loss <= budget_db * factor) & np.isfinite(g))[0]
        ok = ok[ok != ci]
        if ok.size:
            out.append(cand(int(ok[np.argmax(g[ok])])))
    return tuple(out)


def alternative_kind(alt, choice) -> str:
    """"gentler" for an alternative that takes less treble than the choice, else "stronger"."""
    return "gentler" if choice is not None and alt.treble_loss_db < choice.treble_loss_db else "stronger"


def describe_q(design) -> str:
    """What the chosen Q does, in words a technician uses."""
    fig = design.figures()
    if fig.peak_gain_db > 0.05:
        shape = f"peaks by {fig.peak_gain_db:.1f} dB near {fig.peak_hz:,.0f} Hz before it falls"
    else:
        shape = "stays flat up to the cutoff"
    overshoot = fig.overshoot_pct or 0.0
    return f"{shape}; a step overshoots by {overshoot:.1f} %"


def explain(choice, alternatives, weighting, budget_db, crossover_hz) -> str:
    """Two or three sentences: where the programme meets the floor, what Q does, what a step in f0 changes."""
    if choice is None:
        return "No filter on the search grid keeps the treble loss within the budget."
    d = choice.design
    where = (f"The programme sinks into the hiss above about {crossover_hz:,.0f} Hz. " if crossover_hz
             else "The programme stays above the hiss across the band. ")
    what = (f"The choice, {choice.label}, gains {choice.snr_gain_db[weighting]:.1f} dB of "
            f"{weighting}-weighted SNR for {choice.treble_loss_db:.2f} dB of treble within the {budget_db:g} dB "
            f"budget; it {describe_q(d)}. ")
    step = ""
    if alternatives:
        parts = []
        for alt in alternatives:
            parts.append(f"a {alternative_kind(alt, choice)} {alt.label} would give "
                         f"{alt.snr_gain_db[weighting]:.1f} dB for {alt.treble_loss_db:.2f} dB of treble")
        step = "Instead, " + "; ".join(parts) + "."
    return (where + what + step).strip()


#: Mains hum fundamentals, Hz.
MAINS_HZ = (50.0, 60.0)
HUM_PEAK_DB = 12.0
CLICK_SPREAD_DB = 1.5
LOW_HISS_DBFS = -85.0
BROADBAND_SEPARATION_DB = 6.0


def noise_warnings(survey) -> list[str]:
    """Signs that the noise is not hiss, so a low-pass is the wrong tool (our own thresholds).

    - hum: a line at 50/60 Hz or its first harmonics standing >= 12 dB above the
      median density of the octave around it;
    - clicks or crackle: the noise reference's level varies by more than 1.5 dB
      (standard deviation) between Welch segments, where steady hiss varies by about 0.2 dB;
    - low-frequency noise: more than half the noise power lies below 1 kHz (rumble, hum);
    - programme-level noise: the quiet frames lie less than 6 dB below the programme;
    - negligible hiss: the ITU-R 468-weighted hiss below -85 dBFS.
    """
    from audition.measure import band_power, weighted_levels

    f, n = survey.freqs_hz, survey.noise_psd
    out = []
    for mains in MAINS_HZ:
        worst = 0.0
        for k in (1, 2, 3):
            fk = mains * k
            if fk >= f[-1]:
                continue
            i = int(np.argmin(np.abs(f - fk)))
            around = (f > fk / 1.41) & (f < fk * 1.41)
            med = float(np.median(n[around])) if around.sum() > 4 else 0.0
            peak = float(n[max(i - 1, 0):i + 2].max())
            if med > 0 and peak > 0:
                worst = max(worst, 10 * math.log10(peak / med))
        if worst >= HUM_PEAK_DB:
            out.append(f"hum: the noise has a line {worst:.0f} dB above its neighbours at {mains:.0f} Hz or a "
                       "harmonic; a low-pass does not touch it (use a hum filter)")
    c = survey.confidence
    if c.level_spread_db > CLICK_SPREAD_DB:
        out.append(f"the noise reference's level varies by {c.level_spread_db:.1f} dB between segments (steady hiss "
                   "varies by about 0.2 dB): clicks, crackle or a changing floor; de-click before choosing a low-pass")
    total = band_power(f, n)
    if total > 0 and band_power(f, n, hi_hz=1000.0) > 0.5 * total:
        out.append("most of the noise power lies below 1 kHz (rumble or hum, not hiss): a low-pass is the wrong "
                   "tool for it")
    if c.separation_db is not None and c.separation_db < BROADBAND_SEPARATION_DB:
        out.append(f"the quiet frames lie only {c.separation_db:.1f} dB below the programme: the noise is at "
                   "programme level, or the noise reference holds programme; give --noise-span over hiss alone")
    hiss = weighted_levels(f, n, ("itu468",))["itu468"]
    if hiss < LOW_HISS_DBFS:
        out.append(f"the hiss is very low ({hiss:.1f} dBFS, ITU-R 468 weighted): a hiss filter will hardly be heard")
    return out
