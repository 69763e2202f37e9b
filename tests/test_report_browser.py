"""The HTML report in a real headless browser (Chromium via selenium).

A small invented night (five demo stars, one of them a corrupt file) is triaged with
figures; the report must load from a file without console errors, show one table row per
spectrum, render every embedded image, sort its table, and reference nothing outside itself.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile

import pytest

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
HAVE_BROWSER = os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER)
SMALL_NIGHT = ("H7-01", "H7-03", "H7-06", "H7-11", "H7-26")


@pytest.fixture(scope="module")
def small_night(tmp_path_factory):
    from starlines.demo import demo_stars, write_demo_night
    from starlines.triage import triage_night

    out = tmp_path_factory.mktemp("small-night")
    stars = [s for s in demo_stars() if s.name in SMALL_NIGHT]
    made = write_demo_night(out, stars=stars)
    result = triage_night(made["night"], out / "triage", targets=made["targets"], workers=1,
                          figures=True, progress=False)
    return result


def test_report_is_self_contained(small_night):
    text = open(small_night.outputs["report"], encoding="utf-8").read()
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//|file:)""", text, re.I)
    assert "<link" not in text and "@import" not in text
    assert "provisional" in text
    srcs = re.findall(r'<img[^>]*src="([^"]+)"', text)
    assert srcs and all(s.startswith("data:image/png;base64,") for s in srcs)


@pytest.fixture(scope="module")
def browser():
    if not HAVE_BROWSER:
        pytest.skip("chromium and chromedriver not installed (Debian packages chromium, "
                    "chromium-driver; .ci/run installs them)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    profile = tempfile.mkdtemp(prefix="starlines-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for arg in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync",
                f"--user-data-dir={profile}"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)
    try:
        yield driver
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


@pytest.mark.browser
def test_report_loads_and_shows_everything(small_night, browser):
    from selenium.webdriver.common.by import By

    browser.get("file://" + os.path.abspath(small_night.outputs["report"]))
    severe = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert severe == []
    rows = browser.find_elements(By.CSS_SELECTOR, "#all-spectra tbody tr")
    assert len(rows) == len(small_night.rows) == len(SMALL_NIGHT)
    failed = browser.find_elements(By.CSS_SELECTOR, "#failures tbody tr")
    assert len(failed) == small_night.n_failed == 1
    images = browser.find_elements(By.TAG_NAME, "img")
    ok = sum(r["status"] == "ok" for r in small_night.rows)
    assert len(images) == ok + 3  # one per analysed spectrum + three night plots
    widths = [browser.execute_script("return arguments[0].complete && "
                                     "arguments[0].naturalWidth", im) for im in images]
    assert all(w and w > 0 for w in widths)


@pytest.mark.browser
def test_report_table_sorts_on_click(small_night, browser):
    from selenium.webdriver.common.by import By

    browser.get("file://" + os.path.abspath(small_night.outputs["report"]))
    header = [h for h in browser.find_elements(By.CSS_SELECTOR, "#all-spectra thead th")
              if h.text.startswith("S/N")][0]
    col = [h.text for h in browser.find_elements(By.CSS_SELECTOR, "#all-spectra thead th")
           ].index(header.text)

    def column():
        cells = browser.find_elements(By.CSS_SELECTOR, f"#all-spectra tbody td:nth-child"
                                                       f"({col + 1})")
        return [float(c.get_attribute("data-sort")) for c in cells]

    header.click()
    assert column() == sorted(column())
    header.click()
    assert column() == sorted(column(), reverse=True)
    assert [e for e in browser.get_log("browser") if e["level"] == "SEVERE"] == []
