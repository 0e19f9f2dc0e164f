"""The HTML report in a real browser: headless Chromium opens the written file.

Needs the Debian packages ``chromium`` and ``chromium-driver`` and the ``selenium`` package.
Without them the tests are skipped on a workstation, and fail when the ``CI`` environment
variable is set, so a CI run can never pass by silently skipping. A full-page screenshot of
the sample report is saved as ``tests/artifacts/report.png``.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

import advisor
from advisor.config import AuditConfig
from advisor.report.html import SECTION_IDS, render_html
from test_report_html import XSS_CATEGORY, XSS_TITLE, hostile_report

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_logs"
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"


def _missing() -> str | None:
    """Why the browser test cannot run here (None: it can)."""
    gone = [str(p) for p in (CHROMIUM, CHROMEDRIVER) if not p.exists()]
    if gone:
        return (f"{' and '.join(gone)} not found; install the Debian packages chromium and "
                "chromium-driver")
    try:
        import selenium  # noqa: F401
    except ImportError:
        return "the selenium package is not installed (pip install -e '.[test]')"
    return None


def _require_browser() -> None:
    """Skip when the browser cannot run here; fail instead when ``CI`` is set.

    Called from the fixtures (not at import), so on CI each test fails on its own and the
    rest of the suite still runs.
    """
    why = _missing()
    if why is None:
        return
    if os.environ.get("CI"):
        pytest.fail(f"CI is set but the browser test cannot run: {why}", pytrace=False)
    pytest.skip(f"browser test skipped: {why}")


@pytest.fixture(scope="module")
def driver(tmp_path_factory):
    """A headless Chromium with no network services, logging every console message."""
    _require_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    opts = Options()
    opts.binary_location = str(CHROMIUM)
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--no-first-run", "--disable-background-networking",
                "--disable-component-update", "--disable-sync", "--hide-scrollbars",
                "--window-size=1280,900",
                f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    drv = webdriver.Chrome(service=Service(str(CHROMEDRIVER)), options=opts)
    drv.set_page_load_timeout(30)
    yield drv
    drv.quit()


@pytest.fixture(scope="module")
def sample_report(tmp_path_factory) -> Path:
    """The sample audit (seed 1) written as report.html."""
    result = advisor.audit(SAMPLE / "events", catalog=SAMPLE / "catalog.csv",
                           config=AuditConfig(seed=1))
    path = tmp_path_factory.mktemp("report") / "report.html"
    path.write_text(render_html(result), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def hostile_file(tmp_path_factory) -> Path:
    """The report of the tiny hostile log and catalogue, written to a file."""
    folder = tmp_path_factory.mktemp("hostile")
    path = folder / "report.html"
    path.write_text(hostile_report(folder / "inputs"), encoding="utf-8")
    return path


def _open(driver, path: Path) -> list[dict]:
    """Load the file and return the console messages it produced."""
    driver.get_log("browser")  # drop whatever an earlier page left
    driver.get(path.as_uri())
    return driver.get_log("browser")


def _no_alert(driver) -> None:
    from selenium.common.exceptions import NoAlertPresentException

    with pytest.raises(NoAlertPresentException):
        driver.switch_to.alert.text  # noqa: B018  (reading it raises when none is open)


def test_sample_report_opens_with_every_section_and_no_console_error(driver, sample_report):
    """Every section is in the DOM, each chart is drawn, and the console has no SEVERE entry."""
    from selenium.webdriver.common.by import By

    log = _open(driver, sample_report)
    assert [e for e in log if e["level"] == "SEVERE"] == []
    for sid in SECTION_IDS:
        found = driver.find_elements(By.ID, sid)
        assert len(found) == (0 if sid == "trend" else 1), sid
    for cid in ("chart-lorenz", "chart-support", "chart-weekly", "chart-learning-curve"):
        svg = driver.find_element(By.CSS_SELECTOR, f"#{cid} svg")
        assert svg.size["width"] > 200 and svg.size["height"] > 100, cid
    assert driver.find_elements(By.TAG_NAME, "script") == []
    _no_alert(driver)


def test_sample_report_screenshot_is_saved(driver, sample_report):
    """A full-page screenshot of the sample report lands in tests/artifacts/report.png."""
    _open(driver, sample_report)
    height = driver.execute_script("return document.documentElement.scrollHeight")
    driver.set_window_size(1280, min(int(height) + 120, 16000))
    ARTIFACTS.mkdir(exist_ok=True)
    out = ARTIFACTS / "report.png"
    out.unlink(missing_ok=True)
    assert driver.save_screenshot(str(out))
    assert out.stat().st_size > 50_000
    with open(out, "rb") as f:
        assert f.read(8) == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, section 5.2)
    driver.set_window_size(1280, 900)


def test_hostile_title_shows_as_text_and_runs_nothing(driver, hostile_file):
    """The <script> title and the <img onerror> category render as text; no alert opens."""
    from selenium.webdriver.common.by import By

    log = _open(driver, hostile_file)
    assert [e for e in log if e["level"] == "SEVERE"] == []
    _no_alert(driver)
    assert XSS_TITLE in driver.find_element(By.ID, "editorial").text
    assert XSS_CATEGORY in driver.find_element(By.ID, "charts").text
    assert driver.find_elements(By.TAG_NAME, "script") == []
    assert driver.find_elements(By.TAG_NAME, "img") == []

