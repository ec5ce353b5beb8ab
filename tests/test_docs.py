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
