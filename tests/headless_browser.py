"""Headless Chromium for the page tests (Debian's chromium + chromium-driver, driven by selenium).

Skipped when the browser is absent, unless ``BANDCENSUS_REQUIRE_BROWSER=1`` (CI sets it where it
installed the browser), which turns the absence into a failure.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
BASE_ARGS = ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             "--disable-default-apps")


def require_browser(chromium: Path = CHROMIUM, chromedriver: Path = CHROMEDRIVER) -> None:
    """Skip (or fail, when the browser is mandatory) unless the browser and selenium are there."""
    missing = [str(p) for p in (chromium, chromedriver) if not p.exists()]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium package (pip install '.[test]')")
    if not missing:
        return
    reason = "headless browser test needs " + " and ".join(missing)
    if os.environ.get("BANDCENSUS_REQUIRE_BROWSER") == "1":
        pytest.fail(reason + " (BANDCENSUS_REQUIRE_BROWSER=1 makes the browser mandatory)")
    pytest.skip(reason)


def start_browser(profile_dir: Path, window: str):
    """A Chrome driver with console and network logs on, a fresh profile, ``window`` ("W,H")."""
    require_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    options = Options()
    options.binary_location = str(CHROMIUM)
    for arg in (*BASE_ARGS, f"--window-size={window}", f"--user-data-dir={profile_dir}"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL", "performance": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=str(CHROMEDRIVER)), options=options)
    driver.set_page_load_timeout(20)
    return driver
