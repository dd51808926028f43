"""Installing Debian's Chromium and its WebDriver for the report-page test.

Why in the test: CI and every developer machine start fresh, so the test brings in what it
needs itself (like tests/slurm/packages.py); nothing is installed when both programs exist.
Only Debian's builds are used: nothing here downloads a browser or a driver of its own.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

PACKAGES = ("chromium", "chromium-driver")
CHROMIUM = "/usr/bin/chromium"  # installed by Debian's chromium package
CHROMEDRIVER = "/usr/bin/chromedriver"  # installed by Debian's chromium-driver package


class BrowserInstallError(RuntimeError):
    """apt-get could not install the packages although apt and root were there."""


def installed() -> bool:
    return os.access(CHROMIUM, os.X_OK) and os.access(CHROMEDRIVER, os.X_OK)


def available() -> tuple[bool, str]:
    """Whether Debian's Chromium is here or can be installed, and why not if not."""
    if installed():
        return True, "chromium and chromedriver already installed"
    if not sys.platform.startswith("linux"):
        return False, f"Debian's chromium needs Linux, this is {sys.platform}"
    if os.geteuid() != 0:
        return False, "installing chromium with apt-get needs root; this test is not root"
    if shutil.which("apt-get") is None:
        return False, "no apt-get to install chromium and chromium-driver"
    return True, "will install chromium and chromium-driver with apt-get"


def _apt(args: list[str], timeout_s: float) -> None:
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    argv = ["apt-get", "-q", "-o", "DPkg::Lock::Timeout=120", *args]
    try:
        result = subprocess.run(argv, env=env, capture_output=True, text=True,
                                timeout=timeout_s, stdin=subprocess.DEVNULL)
    except subprocess.TimeoutExpired as err:
        raise BrowserInstallError(f"{' '.join(argv)} took over {timeout_s:.0f} s") from err
    if result.returncode != 0:
        output = "\n".join((result.stdout + result.stderr).splitlines()[-20:])
        raise BrowserInstallError(f"{' '.join(argv)} exited {result.returncode}:\n{output}")


def install(timeout_s: float = 900.0) -> bool:
    """Install the packages when a program is missing; True when something was installed."""
    if installed():
        return False
    ok, reason = available()
    if not ok:
        raise BrowserInstallError(reason)
    _apt(["update"], timeout_s)
    _apt(["install", "-y", *PACKAGES], timeout_s)
    if not installed():
        raise BrowserInstallError(f"installed {' '.join(PACKAGES)}, yet {CHROMIUM} or "
                                  f"{CHROMEDRIVER} is still missing")
    return True
