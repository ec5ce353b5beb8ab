"""The planner's reasoning in a technician's words: where the hiss is heard, where the programme is,
what the choice costs and gains, and what the neighbours would do instead."""

from __future__ import annotations

import numpy as np


def khz(f_hz) -> str:
    """A band or frequency as a technician says it: "800 Hz", "6.3 kHz", "12.5 kHz"."""
    if f_hz is None:
        return "?"
    f = float(f_hz)
    if f < 1000:
        return f"{f:,.0f} Hz"
    v = f / 1000.0
    return f"{v:.1f} kHz" if v < 10 else f"{v:.1f} kHz".replace(".0 kHz", " kHz")


def nominal(f_hz) -> str:
    """The nominal label of an IEC 61260-1 one-third-octave band from its exact centre."""
    nominal_hz = (25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500, 630, 800, 1000, 1250, 1600,
                  2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500, 16000, 20000)
    f = float(f_hz)
    best = min(nominal_hz, key=lambda n: abs(np.log(n / f)))
    return khz(best) if abs(np.log(best / f)) < 0.05 else khz(f)


def describe_q(design) -> str:
    """What the chosen shape does near the cutoff, in words a technician uses."""
    fig = design.figures()
    if getattr(design, "ripple_db", None):
        shape = f"ripples by {design.ripple_db:g} dB across the passband (Chebyshev)"
    elif fig.peak_gain_db > 0.05:
        shape = f"lifts by {fig.peak_gain_db:.1f} dB near {khz(fig.peak_hz)} before it falls"
    else:
        shape = "stays flat up to the cutoff"
    where = f"is 3 dB down at {khz(fig.minus3db_hz)}" if fig.minus3db_hz else "never falls 3 dB"
    ring = fig.prototype_overshoot_pct or 0.0
    sampled = fig.overshoot_pct or 0.0
    also = f" ({sampled:.1f} % sample by sample at this rate)" if abs(sampled - ring) >= 0.5 else ""
    return f"{shape}, {where}, and a step overshoots by {ring:.1f} %{also}"


def _heard_where(nothing) -> str:
    share = np.asarray(nothing.share_before)
    if share.size == 0 or share.max() <= 0:
        return "With no filter the hiss is not heard in any band. "
    i = int(np.argmax(share))
    return (f"With no filter the hiss is heard {100 * share[i]:.0f} % of the time in the {nominal(nothing.bands_hz[i])} "
            f"band, where it is most often heard (in pauses, fades and quiet passages; loud passages mask it), "
            f"and adds {nothing.before_sone:.2f} sone on average. ")


def _programme_where(bands, audible_hz, crossover_hz) -> str:
    cross = (f"the long-term spectra cross at {khz(crossover_hz)}" if crossover_hz
             else "the long-term programme spectrum stays above the hiss to the top band")
    if not audible_hz:
        return f"The programme is not heard above the hiss in any band the filter could touch ({cross}). "
    top = max(audible_hz)
    if top >= float(bands.centres_hz[-1]) * 0.99:
        return (f"In its loud moments the programme is heard above the hiss in every band up to the top one "
                f"({nominal(top)}); {cross}. ")
    return (f"In its loud moments the programme is heard above the hiss up to the {nominal(top)} band; "
            f"{cross}. ")


def _cost(c, crossover_hz, bands) -> str:
    parts = []
    if c.treble_loss_db > 0.005 and c.treble_loss_hz:
        parts.append(f"turns the programme down by at most {c.treble_loss_db:.2f} dB, in the "
                     f"{nominal(c.treble_loss_hz)} band")
    else:
        parts.append("leaves every band where the programme is heard within 0.01 dB")
    if crossover_hz:
        resp = 20 * np.log10(max(abs(complex(c.design.digital_response(crossover_hz))), 1e-12))
        parts.append(f"is {-resp:.1f} dB down at the crossover")
    return ", ".join(parts)


def _gain(c, objective, weighting) -> str:
    h = c.hiss_heard
    text = f"the hiss heard falls from {h.before_sone:.2f} to {h.after_sone:.2f} sone ({h.reduction_pct:.0f} % less)"
    g = c.snr_gain_db.get(weighting)
    if objective == "snr" and g is not None:
        text += f"; {g:.1f} dB of {WEIGHTING_WORDS.get(weighting, weighting)} SNR"
    return text


WEIGHTING_WORDS = {"flat": "unweighted", "a": "A-weighted", "itu468": "ITU-R 468-weighted"}


def explain(choice, reason, best_compromise, alternatives, nothing, bands, audible_hz, crossover_hz, budget_db,
            objective, weighting) -> str:
    """The whole explanation (a paragraph; the CLI wraps it to the terminal)."""
    text = _heard_where(nothing) + _programme_where(bands, audible_hz, crossover_hz)
    if choice is None:
        text += f"No filter: {reason}."
        if best_compromise is not None:
            text += (f" The best compromise would be {best_compromise.label}: it "
                     f"{_cost(best_compromise, crossover_hz, bands)}; {_gain(best_compromise, objective, weighting)}.")
        return text
    rule = ("the most hiss heard taken away" if objective == "heard"
            else f"the best {WEIGHTING_WORDS.get(weighting, weighting)} SNR gain")
    text += (f"Chosen for {rule} within the {budget_db:g} dB treble budget: {choice.label}. It "
             f"{_cost(choice, crossover_hz, bands)}; {_gain(choice, objective, weighting)}. "
             f"Its response {describe_q(choice.design)}. ")
    tie = ("Candidates leaving within 2 % of the least hiss heard count as equal; among them the lowest order wins, "
           "then the smaller treble loss." if objective == "heard" else
           "Candidates within 0.05 dB of the best gain count as equal; among them the lowest order wins, then the "
           "higher f0.")
    text += tie
    for alt in alternatives:
        text += (f" A {alternative_kind(alt, choice)} choice, {alt.label}, {_cost(alt, None, bands)}; "
                 f"{_gain(alt, objective, weighting)}.")
    return text


def alternative_kind(alt, choice) -> str:
    """"gentler" for an alternative that takes less from the programme than the choice, else "stronger"."""
    return "gentler" if choice is not None and alt.treble_loss_db < choice.treble_loss_db else "stronger"
