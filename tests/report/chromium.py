"""Debian's headless Chromium for the report tests: finding it, installing it where that
is allowed, and taking a screenshot. The session fixture ``browser`` (conftest.py) uses
these; nothing here asserts on time, and every wait is bounded."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

#: The apt command CI runs before the tests (and the fixture runs where it may).
APT_PACKAGES = ("chromium", "fonts-dejavu-core")
APT_COMMAND = ("apt-get", "install", "-y", "--no-install-recommends", *APT_PACKAGES)
INSTALL_ENV = "CERTIMATCH_INSTALL_BROWSER"
#: Bounds on the installation and on one screenshot; only a failure waits this long.
INSTALL_SECONDS = 600
SCREENSHOT_SECONDS = 90
WINDOW = (1200, 900)


def find_browser() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").is_file() else None


def may_install() -> str:
    """'' when this machine may be changed, else why not."""
    if not hasattr(os, "geteuid") or os.geteuid() != 0:
        return "not running as root"
    if not (os.environ.get("CI") or os.environ.get(INSTALL_ENV) == "1"):
        return f"neither CI nor {INSTALL_ENV}=1 is set"
    if shutil.which("apt-get") is None:
        return "apt-get is not available"
    return ""


def install() -> str:
    """apt-get update and install; '' on success, else what went wrong."""
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    for argv in (("apt-get", "update"), APT_COMMAND):
        try:
            done = subprocess.run(argv, env=env, capture_output=True, text=True,
                                  timeout=INSTALL_SECONDS, check=False)
        except subprocess.TimeoutExpired:
            return f"{' '.join(argv)} did not finish within {INSTALL_SECONDS} s"
        if done.returncode != 0:
            return f"{' '.join(argv)} failed: {(done.stderr or done.stdout)[-800:]}"
    return ""


def screenshot(browser: str, page: Path, png: Path, profile: Path) -> str:
    """Render ``page`` headless into ``png``; '' on success, else the browser's output."""
    argv = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
            "--no-first-run", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", "--hide-scrollbars", f"--user-data-dir={profile}",
            f"--screenshot={png}", f"--window-size={WINDOW[0]},{WINDOW[1]}", page.as_uri()]
    try:
        done = subprocess.run(argv, capture_output=True, text=True,
                              timeout=SCREENSHOT_SECONDS, check=False)
    except subprocess.TimeoutExpired:
        return f"no screenshot within {SCREENSHOT_SECONDS} s"
    if done.returncode != 0 or not png.is_file():
        return f"exit {done.returncode}: {done.stderr[-1500:]}"
    return ""



def dump_dom(browser: str, url: str, profile: Path) -> tuple[str, str]:
    """Load ``url`` headless and return (the DOM as the browser built it, '') on success,
    else ('', what went wrong)."""
    argv = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
            "--no-first-run", "--disable-background-networking", "--disable-component-update",
            "--disable-sync", f"--user-data-dir={profile}", "--dump-dom", url]
    try:
        done = subprocess.run(argv, capture_output=True, text=True,
                              timeout=SCREENSHOT_SECONDS, check=False)
    except subprocess.TimeoutExpired:
        return "", f"no page within {SCREENSHOT_SECONDS} s"
    if done.returncode != 0 or "<html" not in done.stdout:
        return "", f"exit {done.returncode}: {done.stderr[-1500:]}"
    return done.stdout, ""
