"""Fixtures of the command-line tests: no real sleeping between retries, a clean environment."""

from __future__ import annotations

import dataclasses

import pytest

from service.cli import transport


class Waits(list[float]):
    """The waits the retry loop asked for, in order; nothing really sleeps."""


@pytest.fixture(autouse=True)
def waits(monkeypatch: pytest.MonkeyPatch) -> Waits:
    """Every retry's wait recorded instead of slept; the jitter draws its largest value.

    Drawing 1.0 makes the waits the upper bounds of full jitter, so tests can check them
    exactly; a test that wants other draws replaces ``transport.DEFAULT_POLICY`` itself.
    """
    recorded = Waits()
    policy = dataclasses.replace(transport.DEFAULT_POLICY, sleep=recorded.append,
                                 random=lambda: 1.0)
    monkeypatch.setattr(transport, "DEFAULT_POLICY", policy)
    return recorded


@pytest.fixture(autouse=True)
def clean_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    """No CERTIMATCH_* variable of the shell (a URL, a token, a limit) leaks into a test."""
    import os

    for name in list(os.environ):
        if name.startswith("CERTIMATCH_") and name != "CERTIMATCH_DATA_DIR":
            monkeypatch.delenv(name)
