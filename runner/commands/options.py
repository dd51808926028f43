"""Command-line option parsing shared by the subcommands."""

from __future__ import annotations

import argparse
from typing import Any

from seedsweep.agents.base import ConfigError


class OneLineParser(argparse.ArgumentParser):
    """argparse that reports bad options as one ConfigError line (exit 2) instead of usage."""

    def __init__(self, field_name: str, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.field_name = field_name

    def error(self, message: str) -> None:  # type: ignore[override]
        raise ConfigError(self.field_name, message)
