"""The HTML report in a real headless browser (Chromium via selenium).

A small invented night (five demo stars, one of them a corrupt file) is triaged with
figures; the report must load from a file without console errors, show one table row per
spectrum, render every embedded image, sort its table, and reference nothing outside itself.
"""

from __future__ import annotations

import html
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


def _cells(text, table_id):
    """Rows of a table of the report as lists of cell HTML (no parser needed: the report
    writes one <tr> per row and no nested tables)."""
    body = text.split(f'id="{table_id}"', 1)[1].split("</tbody>", 1)[0]
    return [re.findall(r"<td[^>]*>(.*?)</td>", tr, re.S) for tr in body.split("<tr")[2:]]


def test_report_numbers_sections_and_flag_legend(small_night):
    from starlines.flags import FLAGS

    text = open(small_night.outputs["report"], encoding="utf-8").read()
    heads = re.findall(r"<th>(.*?)</th>", text.split('id="all-spectra"', 1)[1].split(
        "</thead>", 1)[0])
    col = {h: i for i, h in enumerate(heads)}
    rows = _cells(text, "all-spectra")
    by_file = {os.path.basename(r["file"]): r for r in small_night.rows}
    assert len(rows) == len(small_night.rows)
    for cells in rows:
        row = by_file[cells[col["file"]]]
        if row["status"] != "ok":
            continue
        # precision (common practice: one digit beyond the typical error): Teff to 100 K,
        # velocities to 0.1 km/s, v sin i to 1 km/s with upper limits as "< N"
        teff = cells[col["Teff [K]"]]
        assert re.fullmatch(r"\d+00", teff) and abs(float(teff) - row["teff"]) <= 50.0
        assert re.fullmatch(r"[+-]\d+\.\d", cells[col["rv [km/s]"]])
        vsini = cells[col["v sin i [km/s]"]]
        if row["vsini_limit"]:
            assert vsini == f"&lt; {row['vsini']:.0f}"
        else:
            assert re.fullmatch(r"\d+", vsini)
        # each star links to its own section
        anchor = re.search(r'href="#([^"]+)"', cells[col["star"]]).group(1)
        assert f'<section class="star" id="{anchor}">' in text
    assert any(r["vsini_limit"] for r in small_night.rows if r["status"] == "ok")
    # EWs to 0.01 A with their errors in the per-star line tables
    ews = re.findall(r'<table class="lines">.*?</table>', text, re.S)
    assert len(ews) == sum(r["status"] == "ok" for r in small_night.rows)
    cells = re.findall(r'<td class="num">([^<]*&plusmn;[^<]*)</td>', ews[0])
    assert cells and all(re.fullmatch(r"-?\d+\.\d\d &plusmn; \d+\.\d\d", c) for c in cells)
    # flag legend: every flag with its description and the night's count
    legend = {c[0]: c for c in _cells(text, "flag-legend")}
    assert set(legend) == {f.name for f in FLAGS}
    for f in FLAGS:
        assert legend[f.name][1] == html.escape(f.description)
    assert legend["failed"][4] == "1"


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


@pytest.mark.browser
def test_star_link_jumps_to_its_section(small_night, browser):
    from selenium.webdriver.common.by import By

    browser.get("file://" + os.path.abspath(small_night.outputs["report"]))
    link = browser.find_elements(By.CSS_SELECTOR, "#all-spectra tbody td a")[1]
    target = link.get_attribute("href").split("#", 1)[1]
    link.click()
    assert browser.execute_script("return location.hash") == "#" + target
    section = browser.find_element(By.ID, target)
    assert section.tag_name == "section" and section.is_displayed()
    # the section shows the star's flags with their meaning and its figure
    assert section.find_elements(By.TAG_NAME, "img") or "failed" in section.text
