"""The HTML report in a real browser: every figure renders, no console errors, summary shown.

Needs Debian's chromium and chromium-driver (.ci/run installs them when missing).
"""

import shutil

import pytest

from conftest import run_cli

pytestmark = pytest.mark.browser


def chrome():
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    binary = shutil.which("chromium") or shutil.which("chromium-browser")
    driver = shutil.which("chromedriver")
    if not (binary and driver):
        pytest.fail("chromium and chromedriver are needed (apt-get install chromium "
                    "chromium-driver; .ci/run does it)")
    options = webdriver.ChromeOptions()
    options.binary_location = binary
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--window-size=1280,2000"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    return webdriver.Chrome(service=Service(driver), options=options)


def test_report_renders_in_chromium(tmp_path):
    folder = tmp_path / "report"
    done = run_cli("demo", "-o", folder)
    assert done.returncode == 0, done.stderr
    browser = chrome()
    try:
        browser.get((folder / "report.html").resolve().as_uri())
        figures = browser.find_elements("css selector", "figure svg")
        assert len(figures) == 5
        for svg in figures:
            size = svg.size
            assert size["width"] > 100 and size["height"] > 100, size
        summary = browser.find_element("id", "summary").text
        assert "precedes" in summary or "indistinguishable" in summary
        errors = [entry for entry in browser.get_log("browser") if entry["level"] == "SEVERE"]
        assert errors == []
        browser.save_screenshot(str(tmp_path / "report.png"))
        assert (tmp_path / "report.png").stat().st_size > 10_000
    finally:
        browser.quit()
