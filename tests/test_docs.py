"""Docstring examples run as tests, so the documentation cannot drift from the code."""

import doctest

import pytest

import audition.design.cascade
import audition.loudness
import audition.weighting

MODULES = [audition.design.cascade, audition.loudness, audition.weighting]


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_docstring_examples(module):
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0
    assert result.failed == 0


def test_readme_tells_what_plan_says_of_the_bundled_demo():
    # The README quotes the plan of clips/cassette-demo.wav: its figures must be the planner's today.
    import re
    from pathlib import Path

    from audition import pipeline

    root = Path(__file__).resolve().parents[1]
    readme = re.sub(r"\s+", " ", (root / "README.md").read_text().replace("> ", ""))
    _, pl = pipeline.plan_path(root / "clips" / "cassette-demo.wav")
    c = pl.choice
    assert c is not None
    h = c.hiss_heard
    for text in (c.label, f"at most {c.treble_loss_db:.2f} dB", f"from {h.before_sone:.2f} to {h.after_sone:.2f} sone",
                 f"({h.reduction_pct:.0f} % less)", f"{h.before_sone:.2f} → {h.after_sone:.2f} sone"):
        assert text in readme, text
