"""Choosing the filter, judged by what is heard.

* :mod:`~audition.plan.shapes`: the search space (orders 1–8: alignments, free-Q cascades) and
  the digitised power response of every shape at every f0;
* :mod:`~audition.plan.audible`: what a filter does to what is heard (treble loss where the
  programme is audible, the hiss heard over the programme);
* :mod:`~audition.plan.choose`: the search and the choice, or "no filter" and why;
* :mod:`~audition.plan.explain`: the reasoning in a technician's words;
* :mod:`~audition.plan.noise_checks`: signs that the noise is not hiss;
* :mod:`~audition.plan.presets`: plan and preset files.

The planner's public names are importable from ``audition.plan``.
"""

from __future__ import annotations

from audition.plan.choose import (DEFAULT_BUDGET_DB, DEFAULT_MAX_OVERSHOOT_PCT, DEFAULT_MAX_PEAK_DB,
                                  DEFAULT_OBJECTIVE, DEFAULT_ORDERS, DEFAULT_WEIGHTING, OBJECTIVES, Candidate, Plan, judge,
                                  judge_nothing, plan)
from audition.plan.explain import alternative_kind
from audition.plan.noise_checks import noise_warnings

__all__ = ["DEFAULT_BUDGET_DB", "DEFAULT_MAX_OVERSHOOT_PCT", "DEFAULT_MAX_PEAK_DB", "DEFAULT_OBJECTIVE",
           "DEFAULT_ORDERS", "DEFAULT_WEIGHTING",
           "OBJECTIVES", "Candidate", "Plan", "alternative_kind", "judge", "judge_nothing", "noise_warnings", "plan"]
