"""Shared fixtures."""

from __future__ import annotations

import os

import pytest

from audition import kernels

KERNELS = tuple(vars(kernels.portable))  # the names every implementation provides


@pytest.fixture(params=["portable", "compiled"])
def impl(request, monkeypatch):
    """Each implementation of audition.kernels in turn, made the module's own so every caller uses it.

    The compiled one is skipped where the C library was not built, except when
    AUDITION_REQUIRE_COMPILED is set (CI, which has a compiler): then its absence fails.
    """
    ns = getattr(kernels, request.param)
    if ns is None:
        if os.environ.get("AUDITION_REQUIRE_COMPILED"):
            pytest.fail("the C kernels were not built (AUDITION_REQUIRE_COMPILED is set: CI has a compiler)")
        pytest.skip("the C kernels were not built on this machine (no C compiler at install)")
    for name in KERNELS:
        monkeypatch.setattr(kernels, name, getattr(ns, name))
    return ns
