"""Python entry point for scripts and tests: one run, by the same path as the command line."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from seedsweep.runner.execution.config import compose
from seedsweep.runner.execution.prepare import prepare
from seedsweep.runner.execution.run import execute
from seedsweep.runner.launch.display import RunProgress


def run(overrides: Sequence[str], *, results_dir: str | None = None, quiet: bool = True,
        config_dirs: Sequence[str | Path] = ()) -> Path:
    """Run one run from hydra-style overrides; returns its folder. Raises ConfigError.

    ``config_dirs`` are extra config folders, as ``--config-dir`` on the command line.
    """
    overrides = list(overrides)
    if results_dir is not None:
        overrides.append(f"results_dir={results_dir}")
    prepared = prepare(compose(overrides, [Path(d) for d in config_dirs]))
    listener = None if quiet else RunProgress(prepared.run_id, int(prepared.config["steps"]))
    execute(prepared, listener)
    return prepared.run_dir
