"""Test-session set-up shared by every test module."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session", autouse=True)
def _compiled_solver():
    """Compile the numba kernels once, quietly, before the first test.

    On a fresh clone the cache is cold, and whichever test first runs a command would see the
    first-run notice ("preparing the solver ...") in front of its own output. Tests that are
    about that notice simulate a cold cache (``firstrun.cache_is_cold``) instead.
    """
    from lapbalance import firstrun

    if firstrun.cache_is_cold():
        firstrun.prepare(show=False)
    yield
