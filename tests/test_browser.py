"""The demo report rendered in headless Chromium: no console error, every figure decodes.

Needs the Debian packages chromium and chromium-driver (.ci/run installs them) and the
Python package selenium (the ``test`` extra). Skipped, with the reason, only when the
browser or its driver cannot be found.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

import pytest

CHROMIUM = next(
    (
        p
        for p in ("/usr/bin/chromium", shutil.which("chromium") or "")
        if p and os.access(p, os.X_OK)
    ),
    None,
)
DRIVER = next(
    (
        p
        for p in ("/usr/bin/chromedriver", shutil.which("chromedriver") or "")
        if p and os.access(p, os.X_OK)
    ),
    None,
)

pytestmark = [
    pytest.mark.skipif(
        CHROMIUM is None or DRIVER is None,
        reason="headless browser check needs /usr/bin/chromium and /usr/bin/chromedriver (Debian "
        "packages chromium, "
        f"chromium-driver); found chromium={CHROMIUM}, chromedriver={DRIVER}",
    ),
]

FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
)

#: Size and load state of every figure image, as the browser decoded it.
_IMAGES_JS = """
return Array.from(document.querySelectorAll('figure img')).map(function (im) {
  return {alt: im.alt, complete: im.complete, w: im.naturalWidth, h: im.naturalHeight};
});
"""


@pytest.fixture(scope="module")
def report(demo_report) -> Path:
    """The shared demo report (tests/conftest.py), opened read-only."""
    _, out, res = demo_report
    assert res.ok
    return out / "report.html"


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for f in FLAGS:
        opts.add_argument(f)
    opts.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=DRIVER), options=opts)
    driver.set_page_load_timeout(60)
    yield driver
    driver.quit()


def _render(driver, page: Path) -> tuple[list[dict], list[dict]]:
    """Open *page*; return (console errors, figure images)."""
    driver.get(page.resolve().as_uri())
    images = driver.execute_script(_IMAGES_JS)
    errors = [e for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
    return errors, images


def _broken(images: list[dict]) -> list[dict]:
    return [im for im in images if not im["complete"] or im["w"] == 0 or im["h"] == 0]


def test_demo_report_renders_without_console_error_and_every_figure_has_a_size(browser, report):
    errors, images = _render(browser, report)
    assert errors == [], errors
    n_fig = len(list((report.parent / "figures").glob("*.png")))
    assert len(images) == n_fig >= 5, "every figure file is shown once"
    assert _broken(images) == [], _broken(images)
    # the inline sorting script runs without error when a heading is clicked
    browser.find_element("css selector", "#summary-fits th").click()
    assert [e for e in browser.get_log("browser") if e.get("level") == "SEVERE"] == []


def test_the_check_sees_a_broken_figure_and_a_script_error(browser, report, tmp_path):
    """The same checks fail on a copy with one image corrupted and a failing script (so they can
    fail)."""
    text = report.read_text(encoding="utf-8")
    bad = re.sub(
        r'src="data:image/png;base64,[^"]{0,12}',
        'src="data:image/png;base64,AAAAnotapng',
        text,
        count=1,
    )
    assert bad != text
    bad = bad.replace("</body>", "<script>thisFunctionDoesNotExist();</script></body>")
    page = tmp_path / "report.html"
    page.write_text(bad, encoding="utf-8")
    errors, images = _render(browser, page)
    assert len(_broken(images)) == 1
    assert any("thisFunctionDoesNotExist" in e.get("message", "") for e in errors), errors
