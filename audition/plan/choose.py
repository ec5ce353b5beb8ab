"""Choose the hiss filter by what is heard, or say that none is needed.

The default objective (``"heard"``): of every candidate whose treble loss stays
within the budget, whose resonant peak stays within ``max_peak_db`` and whose step
overshoot (its ringing) within ``max_overshoot_pct``, take the
one that leaves the least hiss heard over the programme (:mod:`audition.plan.audible`).
Near-ties (a heard hiss after the filter within 2 % of the best's: a loudness change
that small is not heard, the difference limen for loudness being about 10 %, from memory)
go to the lowest order, then to the smaller treble loss, then to the higher f0: a technician
would rather keep what cannot be put back, with the simpler circuit.

"No filter" is an answer, given with its reason:

* the hiss is not heard at the listening level: in no band is it audible in as much
  as 5 % of the frames;
* no candidate keeps the treble loss within the budget;
* the best candidate within the budget is not worth it: it takes away less than 10 %
  of the heard hiss (the loudness of broadband noise falls by about 10 % for a 1.5 dB
  drop in its level, about the just-noticeable level difference) and in no band does
  it shorten the time the hiss is heard by a quarter of the programme's time (our
  thresholds). Hiss in pauses is heard across the spectrum and a low-pass does not touch
  its midrange, so the second test catches a filter that clears the top bands during the
  programme. The best compromise is then still shown.

The ``"snr"`` objective is the older rule: the best weighted SNR gain within the
budget (``weighting`` flat, A or ITU-R 468), "no filter" when nothing fits the budget
or the best gains under 0.5 dB.

The search (:mod:`audition.plan.shapes`) covers orders 1 to 8 over a 1/24-octave
f0 grid. Treble loss and SNR gain are computed for every candidate at once; the
hiss heard, which needs the loudness model, only for the candidate of each shape
that the objective can choose (a shape's treble loss falls as its f0 rises, and the
hiss heard rises with it, so the lowest f0 within the budget is that shape's best),
on the frames compressed into groups of like level. The choice and the alternatives
are then evaluated again exactly, on every frame and from their digital sections.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from audition.errors import BadParameter
from audition.plan.audible import (DEFAULT_LISTENING_LEVEL_DB, Bands, HissHeard, audible_bands, band_gains,
                                   check_listening_level, frame_groups, heard_after_columns, hiss_heard, treble_loss)
from audition.plan.shapes import ALL_ORDERS, f0_grid, overshoot_pct, power_grid, shapes

DEFAULT_BUDGET_DB = 1.0
DEFAULT_MAX_PEAK_DB = 1.5
#: Largest step overshoot a candidate may have, percent: every Bessel and Linkwitz–Riley shape and the
#: Butterworth ones up to order 6 (14.3 %) pass; steeper or peakier shapes ring audibly on transients
#: near the cutoff, a "ping" on cymbals and consonants (engineering judgement, no source).
DEFAULT_MAX_OVERSHOOT_PCT = 15.0
DEFAULT_ORDERS = ALL_ORDERS
DEFAULT_OBJECTIVE = "heard"
OBJECTIVES = ("heard", "snr")
DEFAULT_WEIGHTING = "itu468"
#: "No filter" when the best candidate removes less of the heard hiss than this, percent, ...
WORTHWHILE_PCT = 10.0
#: ... and shortens the time the hiss is heard in no band by this share of the time (module notes).
WORTHWHILE_SHARE = 0.25
#: The hiss counts as heard when it is audible in at least this share of the frames in some band.
HEARD_SHARE = 0.05
#: Near-ties: heard hiss after within this ratio of the best (heard), or gains within this many dB (snr).
TIE_RATIO = 1.02
TIE_DB = 0.05
#: The snr objective's "no filter": a best weighted gain below this, dB.
SNR_WORTHWHILE_DB = 0.5


@dataclass(frozen=True)
class Candidate:
    """One design and what it is predicted to do to what is heard."""

    design: object
    shape_label: str
    treble_loss_db: float
    treble_loss_hz: float | None
    snr_gain_db: dict
    hiss_heard: HissHeard
    cut_db: np.ndarray = field(repr=False, compare=False)       # per band, positive = programme turned down
    noise_cut_db: np.ndarray = field(repr=False, compare=False)

    @property
    def label(self) -> str:
        return f"{self.design.f0_hz:,.0f} Hz, {self.shape_label}"

    @property
    def reduction_pct(self) -> float:
        return self.hiss_heard.reduction_pct

    def predicted(self) -> dict:
        return {"treble_loss_db": self.treble_loss_db, "treble_loss_hz": self.treble_loss_hz,
                "hiss_heard": {"before_sone": self.hiss_heard.before_sone, "after_sone": self.hiss_heard.after_sone,
                               "reduction_pct": self.hiss_heard.reduction_pct},
                "snr_gain_db": dict(self.snr_gain_db)}

    def to_dict(self) -> dict:
        d = self.design.to_dict()
        return {"label": self.label, "f0_hz": d["f0_hz"], "q": d["q"], "order": d["order"],
                "alignment": d["alignment"], "ripple_db": d["ripple_db"], "method": d["method"],
                "highpass_hz": d["highpass_hz"], "sections": d["sections"], "analog_sections": d["analog_sections"],
                "predicted": self.predicted()}


@dataclass(frozen=True)
class Plan:
    """The outcome of a search: the choice (or "no filter" and why), the trade-off and what to be careful of."""

    choice: Candidate | None
    no_filter_reason: str | None
    best_compromise: Candidate | None
    alternatives: tuple[Candidate, ...]
    front: tuple[Candidate, ...]
    budget_db: float
    objective: str
    weighting: str
    listening_level_db: float
    margin_db: float
    crossover_hz: float | None
    audible_hz: tuple[float, ...]
    hiss_before: HissHeard
    explanation: str
    warnings: tuple[str, ...]
    searched: int

    def to_dict(self) -> dict:
        return {
            "choice": None if self.choice is None else self.choice.to_dict(),
            "no_filter_reason": self.no_filter_reason,
            "best_compromise": None if self.best_compromise is None else self.best_compromise.to_dict(),
            "objective": self.objective,
            "weighting": self.weighting,
            "budget_db": self.budget_db,
            "listening_level_db": self.listening_level_db,
            "margin_db": self.margin_db,
            "crossover_hz": self.crossover_hz,
            "audible_programme_hz": list(self.audible_hz),
            "hiss_heard_unfiltered": self.hiss_before.to_dict(),
            "explanation": self.explanation,
            "alternatives": [c.to_dict() for c in self.alternatives],
            "candidates": [c.to_dict() for c in self.front],
            "searched": self.searched,
            "warnings": list(self.warnings),
        }


# ---------------------------------------------------------------------------
# One design, judged exactly
# ---------------------------------------------------------------------------


def judge(bands: Bands, design, *, listening_level_db: float = DEFAULT_LISTENING_LEVEL_DB, margin_db: float = 0.0,
          treble_from_hz: float = 2000.0, audible: np.ndarray | None = None, shape_label: str | None = None,
          snr_gain_db: dict | None = None) -> Candidate:
    """What ``design`` does to what is heard, from its digital sections, on every frame.

    ``snr_gain_db``: the weighted SNR gains when the caller has already predicted them
    (:func:`audition.measure.predict`); else they are predicted here.
    """
    from audition.measure import predict

    if audible is None:
        audible = audible_bands(bands, listening_level_db, margin_db, treble_from_hz)
    pts, w_p, w_n = bands.grid()
    h2 = np.abs(design.digital_response(pts)) ** 2
    g_p, g_n = band_gains(h2, w_p), band_gains(h2, w_n)
    loss, at = treble_loss(g_p, audible, bands.centres_hz)
    heard = hiss_heard(bands, g_p, g_n, listening_level_db)
    snr = (snr_gain_db if snr_gain_db is not None
           else predict(bands.freqs_hz, bands.programme_psd, bands.noise_psd, design).snr_gain_db)
    with np.errstate(divide="ignore"):
        cut, ncut = -10.0 * np.log10(np.maximum(g_p, 1e-300)), -10.0 * np.log10(np.maximum(g_n, 1e-300))
    return Candidate(design, shape_label or _design_label(design), float(loss),
                     None if not math.isfinite(at) or loss <= 0 else float(at), snr, heard, cut, ncut)


def _design_label(d) -> str:
    if d.alignment == "chebyshev":
        return f"order {d.order} Chebyshev ({d.ripple_db:g} dB ripple)"
    if d.alignment:
        return f"order {d.order} {d.alignment.replace('-', '–').title()}"
    lows = [s for s in d.sections if s.kind == "lowpass"]
    if len(lows) == 1 and d.order == 2:
        return f"order 2, Q {d.q:.3f}"
    if len(lows) == 1:
        return "order 1"
    qs = ", ".join("first order" if s.q is None else f"Q {s.q:.2f}" for s in lows)
    return f"order {d.order}, {len(lows)} sections ({qs})"


# ---------------------------------------------------------------------------
# The search
# ---------------------------------------------------------------------------


def _check(budget_db, objective, weighting, max_peak_db, treble_from_hz, rate_hz, highpass_hz, max_overshoot_pct):
    from audition.weighting import check_name

    if objective not in OBJECTIVES:
        raise BadParameter(f"objective={objective!r}: allowed are {', '.join(OBJECTIVES)}")
    check_name(weighting)
    if not (isinstance(budget_db, (int, float)) and math.isfinite(budget_db) and budget_db > 0):
        raise BadParameter(f"budget-db={budget_db!r}: the treble-loss budget must be a positive number of dB")
    if not (isinstance(max_peak_db, (int, float)) and math.isfinite(max_peak_db) and max_peak_db >= 0):
        raise BadParameter(f"max-peak-db={max_peak_db!r}: must be a non-negative number of dB")
    if not (isinstance(max_overshoot_pct, (int, float)) and math.isfinite(max_overshoot_pct)
            and max_overshoot_pct >= 0):
        raise BadParameter(f"max-overshoot-pct={max_overshoot_pct!r}: must be a non-negative percentage")
    nyq = rate_hz / 2.0
    if not (isinstance(treble_from_hz, (int, float)) and math.isfinite(treble_from_hz) and 0 < treble_from_hz < nyq):
        raise BadParameter(f"treble-from={treble_from_hz!r} Hz: must lie between 0 and Nyquist ({nyq:g} Hz)")
    if highpass_hz is not None and not (isinstance(highpass_hz, (int, float)) and math.isfinite(highpass_hz)
                                        and 0 < highpass_hz < nyq):
        raise BadParameter(f"highpass={highpass_hz!r} Hz: must lie between 0 and Nyquist ({nyq:g} Hz)")


def plan(bands: Bands, *, budget_db: float = DEFAULT_BUDGET_DB, objective: str = DEFAULT_OBJECTIVE,
         weighting: str = DEFAULT_WEIGHTING, orders=DEFAULT_ORDERS, method: str = "bilinear",
         treble_from_hz: float = 2000.0, margin_db: float = 0.0,
         listening_level_db: float = DEFAULT_LISTENING_LEVEL_DB, crossover_hz: float | None = None,
         highpass_hz: float | None = None, max_peak_db: float = DEFAULT_MAX_PEAK_DB,
         max_overshoot_pct: float = DEFAULT_MAX_OVERSHOOT_PCT, extra_warnings=()) -> Plan:
    """Search the candidates and choose one, or none (module notes).

    Parameters
    ----------
    bands : Bands
        The survey's frames in one-third-octave bands, the hiss and the long-term spectra.
    budget_db : float
        Largest treble loss allowed (module :mod:`audition.plan.audible`), dB.
    objective : {"heard", "snr"}
    weighting : {"flat", "a", "itu468"}
        The weighting of the ``"snr"`` objective (and of the SNR figures shown).
    orders : sequence of int
        Orders searched (1 … 8).
    listening_level_db : float
        SPL at which a full-scale sine would play.
    max_peak_db : float
        Largest resonant peak (or Chebyshev ripple) a candidate may have, dB.
    max_overshoot_pct : float
        Largest step overshoot a candidate may have, percent (its ringing on transients).
    crossover_hz : float, optional
        The survey's crossover, for the explanation.
    """
    from audition.plan.explain import explain

    rate_hz = bands.rate_hz
    _check(budget_db, objective, weighting, max_peak_db, treble_from_hz, rate_hz, highpass_hz, max_overshoot_pct)
    listening_level_db = check_listening_level(listening_level_db)
    shape_list = shapes(tuple(orders))
    allowed = (np.array([s.peak_db() <= max_peak_db + 1e-9 for s in shape_list])
               & (overshoot_pct(shape_list) <= max_overshoot_pct + 1e-9))
    f0s = f0_grid(rate_hz)
    if highpass_hz is not None:
        f0s = f0s[f0s > highpass_hz]
    pts, w_p, w_n = bands.grid()
    h2 = power_grid(shape_list, f0s, pts, rate_hz)
    if highpass_hz is not None:
        from audition import design as _design

        h2 *= np.abs(_design.highpass(highpass_hz, rate_hz).digital_response(pts)) ** 2
    g_p, g_n = band_gains(h2, w_p), band_gains(h2, w_n)
    audible = audible_bands(bands, listening_level_db, margin_db, treble_from_hz)
    loss, _ = treble_loss(g_p, audible, bands.centres_hz)
    searched = int(len(shape_list) * len(f0s))

    judged: dict[tuple[int, int], Candidate] = {}

    def exact(i, j):
        if (i, j) not in judged:
            d = shape_list[i].design(float(f0s[j]), rate_hz, method=method, highpass_hz=highpass_hz)
            judged[(i, j)] = judge(bands, d, listening_level_db=listening_level_db, audible=audible,
                                   shape_label=shape_list[i].label)
        return judged[(i, j)]

    nothing = judge_nothing(bands, listening_level_db)
    if objective == "heard":
        choose_in = _heard_chooser(bands, shape_list, allowed, loss, g_p, g_n, listening_level_db)
    else:
        choose_in = _snr_chooser(bands, shape_list, allowed, loss, h2, weighting)
    best = choose_in(budget_db)
    choice = None if best is None else exact(*best)
    reason = None
    if objective == "heard" and nothing.share_before.max(initial=0.0) < HEARD_SHARE:
        reason = (f"the hiss is not heard at the listening level ({listening_level_db:g} dB SPL for a full-scale "
                  f"sine): in no band is it audible in {100 * HEARD_SHARE:.0f} % of the time or more")
    elif choice is None:
        reason = (f"every filter searched cuts programme that is heard by more than the {budget_db:g} dB budget: "
                  "the programme stands above the hiss right up to where a low-pass would act")
    elif objective == "heard" and not worthwhile(choice):
        reason = (f"the best filter within the {budget_db:g} dB budget would take away only "
                  f"{choice.reduction_pct:.0f} % of the hiss heard and shorten the time it is heard by at most "
                  f"{100 * _shortening(choice):.0f} % in any band (worth doing: {WORTHWHILE_PCT:.0f} % of the "
                  f"hiss, or {100 * WORTHWHILE_SHARE:.0f} % of the time in some band)")
    elif objective == "snr" and (choice.snr_gain_db.get(weighting) or 0.0) < SNR_WORTHWHILE_DB:
        reason = (f"the best filter within the {budget_db:g} dB budget gains only "
                  f"{choice.snr_gain_db.get(weighting) or 0.0:.2f} dB of weighted SNR (under {SNR_WORTHWHILE_DB:g} dB)")
    best_compromise = None
    if reason is not None:
        best_compromise = choice
        if best_compromise is None:
            wider = choose_in(2.0 * budget_db)
            best_compromise = None if wider is None else exact(*wider)
        choice = None
    alternatives = _alternatives(choose_in, exact, choice, budget_db)
    front = _front(choose_in, exact, budget_db)
    warnings = list(extra_warnings)
    audible_hz = tuple(float(c) for c in bands.centres_hz[audible])
    explanation = explain(choice, reason, best_compromise, alternatives, nothing, bands, audible_hz, crossover_hz,
                          budget_db, objective, weighting)
    return Plan(choice, reason, best_compromise, alternatives, front, float(budget_db), objective, weighting,
                listening_level_db, float(margin_db), crossover_hz, audible_hz, nothing, explanation,
                tuple(warnings), searched)


def _shortening(c: Candidate) -> float:
    h = c.hiss_heard
    return float(np.max(np.asarray(h.share_before) - np.asarray(h.share_after), initial=0.0))


def worthwhile(c: Candidate) -> bool:
    """Whether a filter takes away enough of what is heard to be worth applying (module notes)."""
    return c.reduction_pct >= WORTHWHILE_PCT or _shortening(c) >= WORTHWHILE_SHARE


def judge_nothing(bands: Bands, listening_level_db: float) -> HissHeard:
    """The hiss heard with no filter (before = after)."""
    ones = np.ones(len(bands.centres_hz))
    return hiss_heard(bands, ones, ones, listening_level_db)


def _lowest_within(loss, ok_shape, limit):
    """Per shape the lowest f0 index within ``limit`` (f0 ascends along axis 1): list of (shape, f0 index)."""
    ok = (loss <= limit + 1e-9) & ok_shape[:, None]
    out = []
    for i in np.flatnonzero(ok.any(axis=1)):
        out.append((int(i), int(np.argmax(ok[i]))))
    return out


def _heard_chooser(bands, shape_list, allowed, loss, g_p, g_n, listening_level_db):
    groups, weights = frame_groups(bands)
    cache: dict[tuple[int, int], float] = {}

    def choose_in(limit):
        cands = _lowest_within(loss, allowed, limit)
        todo = [c for c in cands if c not in cache]
        if todo:
            gp = np.stack([g_p[i, j] for i, j in todo])
            gn = np.stack([g_n[i, j] for i, j in todo])
            for c, v in zip(todo, heard_after_columns(bands, groups, weights, gp, gn, listening_level_db)):
                cache[c] = float(v)
        if not cands:
            return None
        best = min(cache[c] for c in cands)
        near = [c for c in cands if cache[c] <= best * TIE_RATIO + 1e-12]
        return min(near, key=lambda c: (shape_list[c[0]].order, loss[c], -c[1]))

    return choose_in


def _snr_chooser(bands, shape_list, allowed, loss, h2, weighting):
    from audition.weighting import power_gain

    pts, width = bands.points()
    w = power_gain(weighting, pts)
    wp = np.interp(pts, bands.freqs_hz, np.maximum(bands.programme_psd, 0)) * width * w
    wn = np.interp(pts, bands.freqs_hz, np.maximum(bands.noise_psd, 0)) * width * w
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = 10.0 * np.log10((h2 @ wp / wp.sum()) / (h2 @ wn / wn.sum()))
    gain = np.where(np.isfinite(gain), gain, -np.inf)

    def choose_in(limit):
        ok = (loss <= limit + 1e-9) & allowed[:, None] & np.isfinite(gain)
        if not ok.any():
            return None
        top = float(gain[ok].max())
        near = [tuple(int(v) for v in c) for c in np.argwhere(ok & (gain >= top - TIE_DB))]
        return min(near, key=lambda c: (shape_list[c[0]].order, -c[1]))

    return choose_in


def _alternatives(choose_in, exact, choice, budget_db):
    """A gentler (within half the budget) and a stronger (within twice) neighbour, each different from the choice."""
    if choice is None:
        return ()
    out = []
    gentle = choose_in(0.5 * budget_db)
    if gentle is not None:
        c = exact(*gentle)
        if c.treble_loss_db < choice.treble_loss_db - 1e-6 and c.label != choice.label:
            out.append(c)
    strong = choose_in(2.0 * budget_db)
    if strong is not None:
        c = exact(*strong)
        if c.reduction_pct > choice.reduction_pct + 1e-6 and c.label != choice.label:
            out.append(c)
    return tuple(out)


def _front(choose_in, exact, budget_db):
    """The trade-off: the best candidate for budgets from a quarter to four times the budget (distinct designs)."""
    seen, out = set(), []
    for factor in (0.25, 0.5, 1.0, 2.0, 4.0):
        c = choose_in(factor * budget_db)
        if c is not None and c not in seen:
            seen.add(c)
            out.append(exact(*c))
    return tuple(sorted(out, key=lambda c: c.treble_loss_db))
