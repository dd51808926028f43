"""Test-wide settings."""

import os
import tempfile

# Runs made by tests must not feed this machine's wall-time estimates.
os.environ.setdefault("SEEDSWEEP_CACHE", tempfile.mkdtemp(prefix="seedsweep-test-cache-"))
