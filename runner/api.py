"""Python entry points for scripts and tests: the same path as the CLI."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from runner.config import compose
from runner.run import execute, prepare


def run(overrides: Sequence[str], *, results_dir: str | None = None, quiet: bool = True) -> Path:
    """Run one run from hydra-style overrides; returns its folder. Raises ConfigError."""
    overrides = list(overrides)
    if results_dir is not None:
        overrides.append(f"results_dir={results_dir}")
    prepared = prepare(compose(overrides))
    execute(prepared, progress="quiet" if quiet else "auto")
    return prepared.run_dir
