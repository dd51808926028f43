"""Measuring a random-agent score the report needs and the sweep does not have.

The report side reads records only; when an env's random score is in neither the sweep nor
the cache, the command line asks for it here: one random-agent run under exactly the env's
settings and evaluation protocol, written into ``<results_dir>/_reference_cache/``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from filelock import FileLock
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis.runs import env_settings
from seedsweep.runner.analysis.scores import RandomRequest, cached_random_run
from seedsweep.runner.execution.config import hydra_value
from seedsweep.runner.launch import api


def random_overrides(env_cfg: dict[str, Any], deterministic: bool, episodes: int) -> list[str]:
    """Overrides that run the random agent on exactly this env under this protocol."""
    settings = env_settings(env_cfg)
    horizon = settings["max_episode_steps"]
    overrides = [  # the random agent learns nothing: a one-step budget, then one evaluation
        "agent=random", f"env={env_cfg.get('name')}", "seed=0", "steps=1",
        "eval.every=1", f"eval.episodes={episodes}",
        f"eval.deterministic={hydra_value(deterministic)}",
        f"env.max_episode_steps={hydra_value(horizon)}",
        f"env.wrappers={hydra_value(list(settings['wrappers']))}", "~env.kwargs",
        f"+env.kwargs={hydra_value(dict(settings['kwargs']))}",
    ]
    return overrides


def measure_random(request: RandomRequest) -> Path:
    """Run the random agent for ``request`` into its cache folder (once, under a lock: two
    reports may ask at the same time); returns the run folder."""
    folder = request.folder
    folder.mkdir(parents=True, exist_ok=True)
    with FileLock(str(folder.parent / f"{folder.name}.lock")):
        found = cached_random_run(folder)
        if found is not None:
            return found
        overrides = random_overrides(request.env_cfg, request.deterministic, request.episodes)
        try:
            return api.run(overrides, results_dir=str(folder))
        except ConfigError as err:
            raise ConfigError(err.field, f"measuring the random score of "
                              f"{request.env_cfg.get('id')} failed "
                              f"({str(err).split(': ', 1)[-1]}); add random-agent runs "
                              "to the sweep") from None
        except Exception as err:  # a failed run: one line; the run folder has the log
            text = str(err).strip().splitlines()
            raise ConfigError("random", f"the random-agent run on {request.env_cfg.get('id')} "
                              f"failed ({text[0] if text else type(err).__name__}); see "
                              f"{folder}") from None
