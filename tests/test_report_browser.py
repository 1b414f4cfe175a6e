"""The HTML report rendered in a real browser (headless Chromium driven by selenium).

Skipped with a reason when Chromium or its driver is missing, unless
``BANDCENSUS_REQUIRE_BROWSER=1`` (set in CI), where their absence fails the test. Selenium is
given the driver's path, so it never downloads anything.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pytest

from analysis.report.build import SECTIONS
from headless_browser import require_browser, start_browser
from analysis.report.html import write_report
from report_fixtures import (ENR_DB, HOSTILE_BASE, HOSTILE_DEVICE, HOSTILE_TEST, hostile_db, match_to_scene,
                             scene_carriers_hz, simulated_db)

pytestmark = pytest.mark.browser

@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    driver = start_browser(tmp_path_factory.mktemp("chromium-profile"), "1200,1400")
    driver.get("about:blank")
    try:
        yield driver
    finally:
        driver.quit()


@pytest.fixture(scope="module")
def pages(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report-browser")
    sim = write_report(simulated_db(folder / "sim.db"), "bare", "preamp-peaked", folder / "report.html",
                       enr_db=ENR_DB)
    hostile = write_report(hostile_db(folder / "hostile.db"), HOSTILE_BASE, HOSTILE_TEST, folder / "hostile.html")
    return sim, hostile


def _load(driver, path: Path) -> tuple[list[dict], list[dict]]:
    """Open ``path`` from a file:// URL; returns (console entries, network requests) of this load."""
    driver.get_log("browser")
    driver.get_log("performance")
    driver.get(path.resolve().as_uri())
    driver.execute_script("window.scrollTo(0, document.body.scrollHeight); window.scrollTo(0, 0);")
    console = driver.get_log("browser")
    requests = []
    for entry in driver.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg.get("method") != "Network.requestWillBeSent":
            continue
        url, doc = msg["params"]["request"]["url"], msg["params"].get("documentURL", "")
        # the browser's own start page (chrome:// fetching chrome://) is not the report's doing
        if not (url.startswith("chrome://") and doc.startswith("chrome://")):
            requests.append(msg["params"]["request"])
    return console, requests


def test_report_renders_offline_without_errors(browser, pages):
    from selenium.webdriver.common.by import By

    sim, _ = pages
    console, requests = _load(browser, sim.path)
    assert not [c for c in console if c["level"] == "SEVERE"], console
    urls = [r["url"] for r in requests]
    page_url = sim.path.resolve().as_uri()
    assert page_url in urls
    strays = [u for u in urls if not (u == page_url or u.startswith("data:"))]
    assert not strays, strays
    # one table row per census station of the comparison, each a scene transmitter; the first
    # is the scene's 93.2 MHz station (the lowest in the 92-97 MHz band the census finds)
    items = sim.report.comparison.items
    rows = browser.find_elements(By.CSS_SELECTOR, "#channel-table tbody tr")
    assert len(rows) == len(items) == len(match_to_scene([c.freq_hz for c in items], scene_carriers_hz(92e6, 97e6)))
    first = rows[0].find_elements(By.TAG_NAME, "td")
    assert first[0].text == "93.20" and len(first) == 9
    ids = [s.get_attribute("id") for s in browser.find_elements(By.TAG_NAME, "section")]
    assert ids == [k for k, _ in SECTIONS]
    heads = [h.text for h in browser.find_elements(By.CSS_SELECTOR, "section > h2")]
    assert heads == [t for _, t in SECTIONS]
    # every figure decoded by the browser itself
    sizes = browser.execute_script(
        "return Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight]);")
    assert len(sizes) == 5 and all(ok and w > 400 and h > 200 for ok, w, h in sizes), sizes
    assert browser.find_element(By.ID, "simulated-banner").is_displayed()
    assert not browser.find_elements(By.TAG_NAME, "script")


def test_screenshot_is_not_blank(browser, pages):
    import matplotlib.image as mpimg

    sim, _ = pages
    _load(browser, sim.path)
    for y in (0, 2500):
        browser.execute_script(f"window.scrollTo(0, {y});")
        pixels = mpimg.imread(io.BytesIO(browser.get_screenshot_as_png()), format="png")
        grey = pixels[..., :3].mean(axis=2)
        assert grey.shape[0] > 500
        assert np.mean(grey < 0.9) > 0.03, f"screen at {y}px is nearly white"
        assert grey.std() > 0.08


def test_hostile_text_is_shown_as_text(browser, pages):
    from selenium.common.exceptions import NoAlertPresentException
    from selenium.webdriver.common.by import By

    _, hostile = pages
    console, requests = _load(browser, hostile.path)
    with pytest.raises(NoAlertPresentException):
        browser.switch_to.alert.text  # noqa: B018 - an alert would mean the label ran as script
    assert not browser.find_elements(By.TAG_NAME, "script")
    assert not [i for i in browser.find_elements(By.TAG_NAME, "img") if i.get_attribute("src").endswith("/x")]
    text = browser.find_element(By.TAG_NAME, "body").text
    assert HOSTILE_BASE in text and HOSTILE_TEST in text and HOSTILE_DEVICE in text
    assert HOSTILE_BASE in browser.title
    assert len(browser.find_elements(By.TAG_NAME, "h1")) == 1
    assert not [c for c in console if c["level"] == "SEVERE"], console
    assert all(r["url"] == hostile.path.resolve().as_uri() or r["url"].startswith("data:") for r in requests)


def test_missing_browser_skips_or_fails_as_configured(monkeypatch, tmp_path):
    monkeypatch.delenv("BANDCENSUS_REQUIRE_BROWSER", raising=False)
    with pytest.raises(pytest.skip.Exception, match="no-chromium"):
        require_browser(chromium=tmp_path / "no-chromium")
    monkeypatch.setenv("BANDCENSUS_REQUIRE_BROWSER", "1")
    with pytest.raises(pytest.fail.Exception, match="BANDCENSUS_REQUIRE_BROWSER=1"):
        require_browser(chromium=tmp_path / "no-chromium")


def test_print_layout_keeps_everything(browser, pages):
    import base64
    import re

    from selenium.webdriver.common.by import By

    sim, _ = pages
    _load(browser, sim.path)
    browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
    try:
        assert not browser.find_element(By.CSS_SELECTOR, "nav.toc").is_displayed()
        hidden = browser.execute_script(
            "return Array.from(document.querySelectorAll('section, #channel-table tbody tr, figure img'))"
            ".filter(e => getComputedStyle(e).display === 'none' || getComputedStyle(e).visibility === 'hidden')"
            ".length;")
        assert hidden == 0
        rules = browser.execute_script(
            "return getComputedStyle(document.querySelector('#channel-table tbody tr')).breakInside;")
        assert rules == "avoid"
        pdf = base64.b64decode(browser.execute_cdp_cmd("Page.printToPDF", {"printBackground": True})["data"])
        assert pdf[:5] == b"%PDF-" and len(re.findall(rb"/Type\s*/Page\b", pdf)) >= 3
    finally:
        browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})
