"""The tuning page (``bandcensus tune --serve``) in a real browser (headless Chromium, selenium).

Skipped with a reason when Chromium or its driver is missing, unless
``BANDCENSUS_REQUIRE_BROWSER=1`` (set in CI), where their absence fails the test. Selenium is
given the driver's path, so it never downloads anything. The page is served from a real
:class:`TunePageServer` fed with frames of a real :class:`TuneTracker`.
"""

from __future__ import annotations

import json
import urllib.request

import numpy as np
import pytest

from analysis.passband import TunedStage, cascade_response_db
from analysis.tuning.reference import reference_from_channels
from analysis.tuning.tracker import TuneTracker
from bandcensus.commands._common import _clean
from bandcensus.commands._tune_page import CSP, TunePageServer
from headless_browser import start_browser

pytestmark = pytest.mark.browser

F = np.arange(86.8e6, 101.2e6 + 1, 200e3)
TARGET = (88e6, 100e6)


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    driver = start_browser(tmp_path_factory.mktemp("chromium-profile"), "1000,900")
    try:
        yield driver
    finally:
        driver.quit()


def _frame_state(tracker: TuneTracker, refresh: int, f0: float) -> dict:
    """State of one refresh for a noise input: reference flat at -80 dBFS in 200 kHz, preamp at f0, Q 30."""
    power = -80.0 + cascade_response_db(F, [TunedStage(f0, 30.0)], 20.0)
    frame = tracker.update(0.4 * refresh, refresh, F, power, power - 0.5, np.ones(F.size, bool))
    state = frame.page_state()
    state["simulated"] = True
    return _clean(state)


@pytest.fixture()
def served():
    ref = reference_from_channels(F, np.full(F.size, -80.0), np.full(F.size, -80.5), np.ones(F.size, bool), 200e3,
                                  "bare", "noise-hot", "test")
    tracker = TuneTracker(TARGET, ref, "noise", 200e3)
    page = TunePageServer(0)
    try:
        yield page, tracker
    finally:
        page.close()


def _text(driver, element_id: str) -> str:
    from selenium.webdriver.common.by import By

    return driver.find_element(By.ID, element_id).text


def test_headers_carry_a_strict_policy(served):
    page, tracker = served
    page.publish(_frame_state(tracker, 1, 92e6))
    for path in ("", "tune.js", "tune.css", "state.json"):
        with urllib.request.urlopen(page.url + path) as r:
            assert r.headers["Content-Security-Policy"] == CSP
            assert r.headers["X-Content-Type-Options"] == "nosniff"
    assert "script-src 'self'" in CSP and "'unsafe-inline'" not in CSP and "default-src 'none'" in CSP
    state = json.loads(urllib.request.urlopen(page.url + "state.json").read())
    assert state["refresh"] == 1 and state["peak_hz"] == pytest.approx(92e6, abs=20e3)
    with pytest.raises(urllib.error.HTTPError):
        urllib.request.urlopen(page.url + "elsewhere")


def test_page_shows_the_curve_and_follows_new_refreshes(browser, served):
    from selenium.webdriver.support.ui import WebDriverWait

    page, tracker = served
    page.publish(_frame_state(tracker, 1, 92e6))
    browser.get_log("browser")
    browser.get_log("performance")
    browser.get(page.url)
    WebDriverWait(browser, 15).until(lambda d: _text(d, "refresh").startswith("1 at"))
    assert _text(browser, "peak").startswith("92.0")
    assert "MHz" in _text(browser, "edges") and "width 3.0" in _text(browser, "edges")
    assert _text(browser, "sim") == "SIMULATED"
    assert "stagger" in _text(browser, "hint")
    d = browser.execute_script("return document.getElementById('now').getAttribute('d');")
    assert d.count("L") == F.size - 1  # one segment per measured channel
    # a new refresh is drawn without reloading: the page polls the state itself
    page.publish(_frame_state(tracker, 2, 96e6))
    WebDriverWait(browser, 15).until(lambda d: _text(d, "refresh").startswith("2 at"))
    assert _text(browser, "peak").startswith("96.0")
    assert browser.execute_script("return document.querySelectorAll('line.edge').length;") == 2
    console = browser.get_log("browser")
    assert not [c for c in console if c["level"] in ("SEVERE", "WARNING")], console
    urls = []
    for entry in browser.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg.get("method") == "Network.requestWillBeSent":
            url = msg["params"]["request"]["url"]
            if not url.startswith(("chrome://", "data:")):  # data: is not a network request
                urls.append(url)
    assert urls and all(u.startswith(page.url) for u in urls), urls


def test_screenshot_is_not_blank(browser, served):
    import io

    import matplotlib.image as mpimg
    from selenium.webdriver.support.ui import WebDriverWait

    page, tracker = served
    page.publish(_frame_state(tracker, 1, 94e6))
    browser.get(page.url)
    WebDriverWait(browser, 15).until(lambda d: _text(d, "refresh").startswith("1 at"))
    pixels = mpimg.imread(io.BytesIO(browser.get_screenshot_as_png()), format="png")
    grey = pixels[..., :3].mean(axis=2)
    assert np.mean(grey < 0.9) > 0.02 and grey.std() > 0.05
