"""Headless Chromium from Debian's packages, for tests that look at the report page."""
