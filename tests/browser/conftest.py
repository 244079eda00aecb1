"""Headless Chromium for the listening-page tests (selenium, the system's chromedriver).

Chromium is a system package (Debian: chromium, chromium-driver); `.ci/run`
installs it when missing and sets BARWRIGHT_REQUIRE_BROWSER=1 so that there the
tests fail rather than skip without it.
"""

from __future__ import annotations

import os
import shutil

import pytest

CHROMIUM_FLAGS = ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--mute-audio",
                  "--disable-dev-shm-usage")


def _binary(name: str) -> str | None:
    return shutil.which(name)


@pytest.fixture()
def browser(tmp_path):
    """Start a fresh headless Chromium with its own profile and download folder."""
    chromium, driver_bin = _binary("chromium"), _binary("chromedriver")
    if chromium is None or driver_bin is None:
        if os.environ.get("BARWRIGHT_REQUIRE_BROWSER"):
            pytest.fail("chromium and chromedriver are required here but not installed")
        pytest.skip("chromium and chromedriver are not installed")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    downloads = tmp_path / "downloads"
    downloads.mkdir()
    opts = webdriver.ChromeOptions()
    opts.binary_location = chromium
    for flag in CHROMIUM_FLAGS:
        opts.add_argument(flag)
    opts.add_argument(f"--user-data-dir={tmp_path / 'profile'}")
    opts.add_experimental_option("prefs", {"download.default_directory": str(downloads),
                                           "download.prompt_for_download": False})
    driver = webdriver.Chrome(service=Service(executable_path=driver_bin), options=opts)
    driver.execute_cdp_cmd("Browser.setDownloadBehavior",
                           {"behavior": "allow", "downloadPath": str(downloads)})
    driver.downloads = downloads
    try:
        yield driver
    finally:
        driver.quit()
