"""A headless Chromium (Debian's build) driven through Selenium with Debian's chromedriver.

Selenium is given both paths, and ``SE_OFFLINE=true`` keeps Selenium Manager from looking
for (or downloading) a browser or driver of its own.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager

from selenium import webdriver
from selenium.webdriver.chrome.service import Service

try:  # pytest puts the rootdir-less tests/ folder itself on sys.path
    from browser.packages import CHROMEDRIVER, CHROMIUM
except ModuleNotFoundError:  # tests/ imported as a package from the repo root
    from tests.browser.packages import CHROMEDRIVER, CHROMIUM

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars")


@contextmanager
def chromium(width: int, height: int = 900) -> Iterator[webdriver.Chrome]:
    """A fresh headless Chromium whose viewport is ``width`` x ``height`` CSS pixels, with
    its own empty profile folder, quit afterwards."""
    os.environ["SE_OFFLINE"] = "true"
    with tempfile.TemporaryDirectory(prefix="seedsweep-chromium-") as profile:
        options = webdriver.ChromeOptions()
        options.binary_location = CHROMIUM
        for flag in FLAGS:
            options.add_argument(flag)
        options.add_argument(f"--user-data-dir={profile}")
        options.add_argument(f"--window-size={width},{height}")
        options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
        driver = webdriver.Chrome(options=options, service=Service(executable_path=CHROMEDRIVER))
        try:
            driver.set_page_load_timeout(60)
            # the window size includes no browser chrome in headless mode; make sure the
            # page's own viewport is what was asked for
            inner = driver.execute_script("return window.innerWidth")
            if inner != width:
                driver.set_window_size(width + (width - inner), height)
            yield driver
        finally:
            driver.quit()
