"""Fixtures shared by the end-to-end tests of the pytest layer."""

from __future__ import annotations

import pytest

from plugin_runs import ESTIMATORS


@pytest.fixture
def project(pytester: pytest.Pytester, monkeypatch: pytest.MonkeyPatch) -> pytest.Pytester:
    """A pytester project with the inner estimators importable as ``estimators``.

    Inner runs leave out Hypothesis's plugin: its terminal summary would import
    Hypothesis afresh in every in-process run (pytester restores sys.modules).
    They also run as outside CI: with ``CI`` set, pytest prints each failure message
    a second time in the short summary, which would double every line counted here.
    """
    monkeypatch.setenv("PYTEST_ADDOPTS", "-p no:hypothesispytest")
    monkeypatch.delenv("CI", raising=False)
    monkeypatch.delenv("BUILD_NUMBER", raising=False)
    pytester.makepyfile(estimators=ESTIMATORS)
    return pytester
