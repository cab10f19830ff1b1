"""The written board in a real browser: headless Chromium driven by selenium, from a file:// URL.

Checks what only a browser can: the page runs without console errors and loads nothing, every
plot is drawn by plotly.js (an ``<svg class="main-svg">`` inside each plot div), sorting by a
column heading reorders the rows, and the state filter hides rows.

Needs Debian's ``chromium`` and ``chromium-driver``: skipped locally without them, a failure when
``CI=true`` (the CI script installs them), so CI never skips silently.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from .board_records import write_record, write_review
from sweep.board import write_study_board
from sweep.record import Tracker

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
HOSTILE = "<script>alert(1)</script>"
N_PLOTS = 6


def _missing(reason: str):
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason}; CI must run the browser test (.ci/run installs chromium and chromium-driver)")
    pytest.skip(reason)


@pytest.fixture(scope="module")
def driver(tmp_path_factory):
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        _missing("selenium is not installed")
    chromium = CHROMIUM if CHROMIUM.exists() else shutil.which("chromium")
    if chromium is None or not CHROMEDRIVER.exists():
        _missing(f"headless Chromium needs {CHROMIUM} and {CHROMEDRIVER} (apt-get install chromium chromium-driver)")
    options = webdriver.ChromeOptions()
    options.binary_location = str(chromium)
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--disable-background-networking", "--disable-component-update", "--disable-sync",
                "--no-first-run", "--window-size=1300,1000",
                f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    # the driver is given explicitly, so selenium never tries to download one
    browser = webdriver.Chrome(service=Service(str(CHROMEDRIVER)), options=options)
    yield browser
    browser.quit()


@pytest.fixture(scope="module")
def board(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("board")
    with Tracker.open(folder / "study.sqlite") as t:
        write_record(t, HOSTILE)
        write_review(t, HOSTILE)
    return write_study_board(folder / "study.sqlite", out=folder / "board.html")


@pytest.fixture
def page(driver, board):
    from selenium.webdriver.support.ui import WebDriverWait

    driver.get(board.resolve().as_uri())
    WebDriverWait(driver, 30).until(lambda d: d.execute_script(
        "return document.querySelectorAll('.js-plotly-plot svg.main-svg').length > 0"
        " && document.querySelectorAll('.plot').length === document.querySelectorAll('.js-plotly-plot').length"))
    return driver


def _column(driver, heading: str) -> list[str]:
    """The data-v values of one column, for the rows shown, top to bottom."""
    return driver.execute_script("""
        const table = document.getElementById('ranking-table');
        const heads = Array.from(table.tHead.rows[0].cells).map(th => th.textContent.trim().replace(/\\u200b/g, ''));
        const i = heads.indexOf(arguments[0]);
        if (i < 0) { throw new Error('no column ' + arguments[0] + ' in ' + heads.join('|')); }
        return Array.from(table.tBodies[0].rows).filter(r => !r.hidden).map(r => r.cells[i].getAttribute('data-v'));
    """, heading)


def _click_heading(driver, heading: str) -> None:
    from selenium.webdriver.common.by import By

    for th in driver.find_elements(By.CSS_SELECTOR, "#ranking-table thead th"):
        if th.text.replace("\u200b", "").replace("\n", "").strip().rstrip("▲▼").strip() == heading:
            th.find_element(By.TAG_NAME, "button").click()
            return
    raise AssertionError(f"no heading {heading!r}")


def test_board_runs_without_errors_and_loads_nothing(page):
    from selenium.webdriver.common.by import By

    severe = [e for e in page.get_log("browser") if e["level"] == "SEVERE"]
    assert severe == []
    # no request of any kind: the Resource Timing API lists every fetch the page made
    assert page.execute_script("return performance.getEntriesByType('resource').map(e => e.name)") == []
    # the hostile study name shows as text and ran nothing (an alert would block every command)
    assert page.find_element(By.ID, "study-name").text == HOSTILE


def test_board_draws_every_plot(page):
    from selenium.webdriver.common.by import By

    plots = page.find_elements(By.CSS_SELECTOR, ".plot div.plotly-graph-div[id^='fig-']")
    assert len(plots) == N_PLOTS
    for plot in plots:
        assert plot.find_elements(By.CSS_SELECTOR, "svg.main-svg"), plot.get_attribute("id")


def test_board_sorts_by_a_column_heading(page):
    # first order: the ranking by objective (1 3 har 5 0 ewma 2 4; baselines have no trial number)
    assert _column(page, "trial") == ["1", "3", "", "5", "0", "", "2", "4"]
    _click_heading(page, "trial")
    # numeric ascending, the baselines (no trial number) last
    assert _column(page, "trial") == ["0", "1", "2", "3", "4", "5", "", ""]
    _click_heading(page, "trial")
    assert _column(page, "trial") == ["5", "4", "3", "2", "1", "0", "", ""]
    _click_heading(page, "duration")
    # durations 0.5 (trial 4) 1 (2) 1.5 (5) 2.5 (3) 3 (1) 4 (0); baselines have none
    assert _column(page, "trial") == ["4", "2", "5", "3", "1", "0", "", ""]
    _click_heading(page, "epochs run")
    # numeric, not text order: 0 4 6 12 15 20 ("12" < "4" as text)
    assert _column(page, "epochs run") == ["0", "4", "6", "12", "15", "20", "", ""]


def test_board_filters_rows_by_state(page):
    from selenium.webdriver.common.by import By

    assert _column(page, "state").count("pruned") == 2
    page.find_element(By.CSS_SELECTOR, "input[name='state'][value='pruned']").click()
    shown = _column(page, "state")
    assert "pruned" not in shown and len(shown) == 6
    hidden = page.execute_script(
        "return Array.from(document.querySelectorAll('#ranking-table tbody tr[data-state=\"pruned\"]')).map(r => r.hidden)")
    assert hidden == [True, True]
    assert page.find_element(By.ID, "row-count").text.startswith("6 of 8 rows")
    page.find_element(By.CSS_SELECTOR, "input[name='state'][value='baseline']").click()
    assert _column(page, "state") == ["complete", "complete", "complete", "failed"]


def test_board_narrows_wide_plots_for_printing(page):
    widths = ("return Array.from(document.querySelectorAll('.js-plotly-plot'))"
              ".map(p => Number(p.querySelector('svg.main-svg').getAttribute('width')))")
    screen = page.execute_script(widths)
    assert len(screen) == N_PLOTS and min(screen) > 940  # the 1300 px window draws them wider than a page
    printed = page.execute_script("window.dispatchEvent(new Event('beforeprint')); " + widths)
    assert printed == [940] * N_PLOTS  # PRINT_WIDTH in board.js: a landscape page less its margins
    restored = page.execute_script("window.dispatchEvent(new Event('afterprint')); " + widths)
    assert restored == screen
