"""seedsweep's configs: the shipped YAML files (package data) and the checks of every value.

The YAML files are found through :func:`folder`; :mod:`seedsweep.configs.checks` holds the
error type and checks that agents, envs and the runner share.
"""

from pathlib import Path


def folder() -> Path:
    """The folder holding the shipped YAML configs (this package's data)."""
    return Path(__file__).resolve().parent
