"""The status page in a real browser: headless Chromium (Debian's chromium and
chromium-driver, which .ci/run installs) loads it, each site's level is shown, and a
screenshot of a phone-sized window is saved under the test's folder."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from tests.web.conftest import Served

CHROMIUM = Path("/usr/bin/chromium")
DRIVER = Path("/usr/bin/chromedriver")


def _missing() -> str | None:
    if not CHROMIUM.exists() and not shutil.which("chromium"):
        return "Chromium is not installed (apt-get install chromium chromium-driver)"
    if not DRIVER.exists() and not shutil.which("chromedriver"):
        return "chromedriver is not installed (apt-get install chromium-driver)"
    return None


@pytest.mark.skipif(_missing() is not None, reason=_missing() or "")
def test_a_browser_shows_each_sites_level(night: Served, tmp_path: Path):
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service as DriverService
    from selenium.webdriver.common.by import By

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM if CHROMIUM.exists() else shutil.which("chromium"))
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=412,915"):
        options.add_argument(arg)
    options.add_argument(f"--user-data-dir={tmp_path / 'profile'}")
    driver_path = str(DRIVER if DRIVER.exists() else shutil.which("chromedriver"))
    browser = webdriver.Chrome(options=options, service=DriverService(executable_path=driver_path))
    try:
        browser.set_page_load_timeout(20)
        browser.get(night.url)
        snaps = night.service.outbox.snapshots()
        for site in night.service.config.sites:
            card = browser.find_element(By.ID, f"site-{site.id}")
            badge = card.find_element(By.CSS_SELECTOR, ".level")
            assert badge.is_displayed()
            assert badge.text == snaps[site.id][1].upper()
            assert site.name in card.text
        # readable on a phone: nothing wider than the window
        width = browser.execute_script("return document.documentElement.scrollWidth")
        assert width <= browser.execute_script("return window.innerWidth")
        shot = tmp_path / "status-page.png"
        assert browser.save_screenshot(str(shot))
        assert shot.stat().st_size > 1000
    finally:
        browser.quit()
