"""The report in a real browser: headless Chromium driven through Selenium.

Needs the ``chromium`` and ``chromium-driver`` Debian packages (or any
Chromium with its matching chromedriver on PATH) and the ``selenium`` package
from the dev extra. Without the Chromium binary or its driver (system
packages, not Python ones) the tests skip and say why; a missing selenium
fails the suite.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from selenium import webdriver  # dev extra: a missing install fails the suite, it does not skip
from selenium.common.exceptions import WebDriverException
from selenium.webdriver.chrome.service import Service

from report_run import make_run
from sparsedemand.report import build_report

pytestmark = pytest.mark.browser

CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--window-size=1280,1600")
TITLE = "Report under test"


def _first_found(*names: str) -> str | None:
    for name in names:
        found = shutil.which(name) or (name if Path(name).is_file() else None)
        if found:
            return found
    return None


@pytest.fixture(scope="module")
def driver(tmp_path_factory):
    binary = _first_found("chromium", "chromium-browser", "google-chrome")
    if binary is None:
        pytest.skip("no Chromium found on PATH (Debian: apt-get install chromium chromium-driver)")
    chromedriver = _first_found("chromedriver", "/usr/lib/chromium/chromedriver")
    if chromedriver is None:
        pytest.skip("no chromedriver found on PATH (Debian: apt-get install chromium-driver)")
    options = webdriver.ChromeOptions()
    options.binary_location = binary
    for flag in CHROMIUM_FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    try:
        browser = webdriver.Chrome(service=Service(executable_path=chromedriver), options=options)
    except WebDriverException as exc:
        pytest.skip(f"headless Chromium could not be started: {str(exc.msg or exc).splitlines()[0]}")
    browser.set_page_load_timeout(60)
    yield browser
    browser.quit()


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    folder = tmp_path_factory.mktemp("run")
    frames = make_run(folder)
    path = build_report(folder, out=folder / "report.html", title=TITLE, max_item_pages=4)
    return path, frames


@pytest.fixture
def page(driver, built):
    path, frames = built
    driver.get(path.resolve().as_uri())
    driver.get_log("browser")  # earlier pages' messages
    return driver, frames


def column(driver, name: str) -> list[tuple[str, str]]:
    """(item, value) of the visible audit rows; the raw number where the cell has one."""
    return driver.execute_script(
        """
        var name = arguments[0], t = document.getElementById('audit-table');
        var idx = Array.prototype.findIndex.call(t.tHead.rows[0].cells,
            function (c) { return c.textContent.trim() === name; });
        return Array.prototype.filter.call(t.tBodies[0].rows, function (r) { return !r.hidden; })
            .map(function (r) {
                var c = r.cells[idx];
                var v = c.getAttribute('data-v');
                return [r.cells[0].textContent, v === null ? c.textContent : v];
            });
        """,
        name,
    )


def click_header(driver, name: str) -> None:
    from selenium.webdriver.common.by import By

    driver.find_element(By.XPATH, f"//table[@id='audit-table']/thead//th/button[text()='{name}']").click()


def test_loads_from_disk_without_errors_or_fetches(driver, built):
    path, _ = built
    driver.get(path.resolve().as_uri())
    assert driver.title == TITLE
    errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
    assert errors == []
    fetched = driver.execute_script(
        "return performance.getEntriesByType('resource').map(function (e) { return e.name; });")
    assert [u for u in fetched if not u.startswith(("data:", "file:"))] == []


def test_charts_are_present_and_visible(page):
    driver, _ = page
    from selenium.webdriver.common.by import By

    images = driver.find_elements(By.CSS_SELECTOR, "figure.chart img")
    assert len(images) >= 14
    for img in images:
        complete, width, height, box_w, box_h = driver.execute_script(
            "var i = arguments[0], r = i.getBoundingClientRect();"
            "return [i.complete, i.naturalWidth, i.naturalHeight, r.width, r.height];", img)
        assert complete and width > 50 and height > 50
        assert box_w > 50 and box_h > 20
        assert img.is_displayed()


def test_sorting_the_audit_table_by_a_number(page):
    driver, frames = page
    audit = frames["audit"]
    assert [item for item, _ in column(driver, "adi")] == audit["item"].tolist()  # file order first
    click_header(driver, "cv2")
    values = [float(v) if v else math.nan for _, v in column(driver, "cv2")]
    expected = audit.assign(key=audit["cv2"].fillna(np.inf)).sort_values("key", kind="stable")
    assert [item for item, _ in column(driver, "cv2")] == expected["item"].tolist()
    finite = [v for v in values if not math.isnan(v)]
    assert finite == sorted(finite) and all(math.isnan(v) for v in values[len(finite):])
    assert any(math.isnan(v) for v in values)  # blanks exist, and they sort last
    click_header(driver, "cv2")
    again = [float(v) if v else math.nan for _, v in column(driver, "cv2")]
    finite = [v for v in again if not math.isnan(v)]
    assert finite == sorted(finite, reverse=True) and all(math.isnan(v) for v in again[len(finite):])
    state = driver.execute_script(
        "return Array.prototype.map.call(document.querySelectorAll('#audit-table th[aria-sort]'),"
        "function (th) { return [th.textContent, th.getAttribute('aria-sort')]; });")
    assert state == [["cv2", "descending"]]


def test_sorting_by_text_keeps_ties_in_file_order(page):
    driver, frames = page
    audit = frames["audit"]
    click_header(driver, "pattern")
    shown = column(driver, "pattern")
    patterns = [p for _, p in shown]
    assert patterns == sorted(patterns)
    expected = audit.sort_values("pattern", kind="stable")["item"].tolist()
    assert [item for item, _ in shown] == expected


def test_filter_box_keeps_rows_with_every_word(page):
    driver, frames = page
    from selenium.webdriver.common.by import By

    audit = frames["audit"]
    text = audit.astype(object).where(audit.notna(), "").astype(str).agg(" ".join, axis=1).str.lower()
    box = driver.find_element(By.ID, "audit-filter")
    box.send_keys("LUMPY")
    lumpy = text.str.contains("lumpy", regex=False)
    assert [item for item, _ in column(driver, "item")] == audit.loc[lumpy, "item"].tolist()
    assert driver.find_element(By.ID, "audit-shown").text == f"{int(lumpy.sum())} of {len(audit)} items shown"
    box.send_keys(" out-of-stock")
    both = lumpy & text.str.contains("out-of-stock", regex=False)
    assert 0 < both.sum() < lumpy.sum()
    assert [item for item, _ in column(driver, "item")] == audit.loc[both, "item"].tolist()
    box.clear()
    box.send_keys(" ")
    assert len(column(driver, "item")) == len(audit)


def test_screenshot(page, tmp_path):
    driver, _ = page
    shots = []
    for anchor in ("overview", "patterns", "item-1", "audit"):
        driver.execute_script(f"document.getElementById('{anchor}').scrollIntoView();")
        target = tmp_path / f"report-{anchor}.png"
        assert driver.save_screenshot(str(target))
        shots.append(target)
    for shot in shots:
        data = shot.read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 5_000
    # not a blank page: the chart-filled views have many distinct colours
    from matplotlib.image import imread

    for shot in shots[1:3]:
        rgb = (imread(shot)[..., :3] * 255).round().astype(np.int64)
        colours = np.unique(rgb[..., 0] * 65536 + rgb[..., 1] * 256 + rgb[..., 2])
        assert len(colours) > 20
