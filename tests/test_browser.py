"""The HTML reports in a real browser: every figure renders, no console errors, summary shown,
no figure text cut at a figure's edge, every budget label whole, the survey's headline naming
both series.

Needs Debian's chromium and chromium-driver (.ci/run installs them when missing).
"""

import json
import shutil
from pathlib import Path

import pytest

from conftest import RECORDS, run_cli

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


#: Every text of a figure (matplotlib writes each as a group ``text_N`` holding, per line, a
#: comment with the line's text and its glyphs as paths) with its rendered box relative to the
#: figure's box (positive margins: inside).
TEXTS = """
const out = [];
for (const figure of document.querySelectorAll('figure')) {
  const svg = figure.querySelector('svg');
  const box = svg.getBoundingClientRect();
  for (const g of svg.querySelectorAll('g[id^="text_"]')) {
    const lines = [...g.childNodes].filter(n => n.nodeType === Node.COMMENT_NODE)
      .map(n => n.textContent.trim());
    if (!lines.length) continue;
    const r = g.getBoundingClientRect();
    out.push([figure.id, lines.join(' '), r.left - box.left, box.right - r.right,
              r.top - box.top, box.bottom - r.bottom]);
  }
}
return out;
"""


def texts_inside(browser):
    """The figures' texts (figure id, text); fails for any text not wholly inside its figure."""
    found = browser.execute_script(TEXTS)
    assert found
    cut = [(fig, text) for fig, text, *margins in found if min(margins) < -0.5]
    assert cut == [], cut
    return [(fig, text) for fig, text, *_ in found]




def quick_demo_survey(folder):
    """The demo survey with fewer draws (quicker; the report reads the same), as a file."""
    spec = json.loads((RECORDS / "demo_survey.json").read_text())
    for where in (spec["table"], spec["a"], spec["b"]):
        key = "path" if "path" in where else "record"
        where[key] = str(RECORDS / where[key])
    spec["a"]["draws"] = spec["b"]["draws"] = 400
    spec.update(ties=str(RECORDS / spec["ties"]), draws=4000)
    path = folder / "survey.json"
    path.write_text(json.dumps(spec))
    return path


def test_reports_render_in_chromium(tmp_path):
    lag = tmp_path / "report"
    done = run_cli("demo", "-o", lag)
    assert done.returncode == 0, done.stderr
    survey = tmp_path / "survey"
    done = run_cli("survey", quick_demo_survey(tmp_path), "-o", survey)
    assert done.returncode == 0, done.stderr
    result = json.loads((lag / "report.json").read_text())
    spec = json.loads((survey / "report.json").read_text())["provenance"]["parameters"]
    browser = chrome()
    try:
        browser.get((lag / "report.html").resolve().as_uri())
        figures = browser.find_elements("css selector", "figure svg")
        assert len(figures) == 5
        for svg in figures:
            size = svg.size
            assert size["width"] > 100 and size["height"] > 100, size
        summary = browser.find_element("id", "summary").text
        assert "precedes" in summary or "indistinguishable" in summary
        budget = [text for fig, text in texts_inside(browser) if fig == "figure-budget"]
        labels = ([b["component"] for b in result["budget"]] + ["as it is"]
                  + [w["change"] for w in result["what_if"]])
        assert [label for label in labels if label not in budget] == []
        browser.save_screenshot(str(tmp_path / "report.png"))
        assert (tmp_path / "report.png").stat().st_size > 10_000

        browser.get((survey / "report.html").resolve().as_uri())
        assert len(browser.find_elements("css selector", "figure svg")) == 2
        texts_inside(browser)
        headline = browser.find_element("id", "summary").text
        for side in ("a", "b"):
            marker = spec[side]
            named = f"{marker['variable']} {marker['kind']} ({Path(marker['record']).name})"
            assert f"{side}, {named}," in headline
        errors = [entry for entry in browser.get_log("browser") if entry["level"] == "SEVERE"]
        assert errors == []

        browser.get((low_snr_onset_report(tmp_path / "onset") / "report.html").as_uri())
        assert "no clear transition" in browser.find_element("id", "summary").text
        result_text = browser.find_element("css selector", "pre")
        assert "too old on average" in result_text.text  # the short-ramp caution, readable
        wide = browser.execute_script("return [...document.querySelectorAll('pre')]"
                                      ".filter(p => p.scrollWidth > p.clientWidth + 1).length")
        assert wide == 0  # long lines wrap; none hides behind a scroll bar
    finally:
        browser.quit()


def low_snr_onset_report(folder):
    """The report of an onset at 2 noise sd under red noise: not a clear transition, with
    the short-ramp caution (long lines in its result block)."""
    import numpy as np

    from align import detect_onset
    from align.report import write_report
    from test_calibration_onsets import ar1_windows, interval_record

    t, series, _ = ar1_windows(10.0, 100.0, 1, np.random.default_rng(3), step=2.0)
    marker = detect_onset(interval_record(t, series[0], 10.0), "x", [10_000, 10_500],
                          draws=200, seed=1)
    assert marker.short_ramp_bias and not marker.clear_transition
    return write_report(marker, folder, formats=("html",)).resolve()
