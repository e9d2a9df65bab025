"""The session's headless Chromium, shared by the report tests that render pages."""

from __future__ import annotations

import pytest

from tests.report.chromium import (
    APT_COMMAND,
    INSTALL_ENV,
    find_browser,
    install,
    may_install,
    screenshot,
)


@pytest.fixture(scope="session")
def browser(tmp_path_factory: pytest.TempPathFactory) -> str:
    """A Chromium that starts headless; installed first where that is allowed."""
    found = find_browser()
    if found is None:
        why_not = may_install()
        if why_not:
            pytest.skip(f"chromium is not installed and cannot be installed here ({why_not}); "
                        f"run `{' '.join(APT_COMMAND)}` as root or set {INSTALL_ENV}=1")
        failure = install()
        assert not failure, failure     # allowed to install and could not: a real failure
        found = find_browser()
        assert found is not None, "apt-get installed chromium but it is not on PATH"
    # One probe run: a browser that is present but cannot start here (no kernel support
    # for its sandboxing helpers, say) is the only other reason to skip.
    tmp = tmp_path_factory.mktemp("probe")
    probe = tmp / "probe.html"
    probe.write_text("<!DOCTYPE html><p>probe</p>")
    failure = screenshot(found, probe, tmp / "probe.png", tmp / "profile")
    if failure:
        pytest.skip(f"chromium at {found} cannot start headless here: {failure}")
    return found
