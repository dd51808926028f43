"""Scores of runs: one number per run, curves on one grid, and the random and reference
scores every normalised score is measured between.

A run's score is the mean undiscounted return of its last evaluation (or the mean of its
last K evaluations, or the area under its evaluation curve divided by the span of env
steps it covers). Per env, a normalised score is ``(score - random) / (reference - random)``
where *random* is the uniform-random agent's score under the same evaluation protocol and
*reference* comes, in order of preference, from the user (``env.reference``), the exact
optimum of a tabular env (:mod:`.oracle`), or the gymnasium spec's ``reward_threshold``.

A random score missing from both the sweep and the cache is not measured here (the report
side reads records only): :class:`MissingRandomScore` says what to measure, and the command
line asks the launch layer to measure it.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from seedsweep.configs.checks import ConfigError
from seedsweep.envs.build import make_env, parse_env_config
from seedsweep.runner.analysis import oracle, stats
from seedsweep.runner.analysis.runs import Run, env_settings, load_run
from seedsweep.runner.execution import records

SCORE_METHODS = ("final", "last-k", "auc")


ORACLE_SAFE_WRAPPERS = {"one_hot", "frame_stack", "time_limit", "normalize_obs",
                        "clip_reward", "scale_reward"}


def score_run(run: Run, method: str = "final", last_k: int = 1) -> float:
    """The run's scalar score under ``method`` (see the module docstring)."""
    return score_curve(run.steps, run.curve, method, last_k, run.run_id)


def score_curve(steps: np.ndarray, curve: np.ndarray, method: str, last_k: int = 1,
                who: str = "run") -> float:
    if method == "final":
        return float(curve[-1])
    if method == "last-k":
        if curve.size < last_k:
            raise ConfigError("--last-k", f"{who} has {curve.size} evaluations, fewer than "
                              f"--last-k {last_k}")
        return float(curve[-last_k:].mean())
    if method == "auc":
        if curve.size == 1:
            return float(curve[0])
        return float(np.trapezoid(curve, steps) / (steps[-1] - steps[0]))
    raise ConfigError("--score", f"unknown method {method!r} (allowed: {', '.join(SCORE_METHODS)})")


def align_curves(
    runs: Sequence[Run], interpolate: bool, what: str
) -> tuple[np.ndarray, np.ndarray]:
    """Curves of ``runs`` on one grid of env steps: (grid, (n_runs, n_points)).
    Different schedules are refused unless ``interpolate``, which linearly interpolates every
    run onto the union of their steps inside the range all runs cover."""
    first = runs[0].steps
    if all(r.steps.shape == first.shape and np.array_equal(r.steps, first) for r in runs):
        return first.astype(float), np.stack([r.curve for r in runs])
    if not interpolate:
        a = next(r for r in runs if not np.array_equal(r.steps, first))
        raise ConfigError(
            "eval.every", f"{what}: runs have different evaluation schedules ({runs[0].run_id}: "
            f"{_schedule(first)}; {a.run_id}: {_schedule(a.steps)}); use --interpolate")
    return interpolate_onto_common_grid([(r.steps, r.curve) for r in runs], what)


def interpolate_onto_common_grid(
    curves: Sequence[tuple[np.ndarray, np.ndarray]], what: str
) -> tuple[np.ndarray, np.ndarray]:
    lo = max(float(s[0]) for s, _ in curves)
    hi = min(float(s[-1]) for s, _ in curves)
    grid = np.unique(np.concatenate([np.asarray(s, dtype=float) for s, _ in curves]))
    grid = grid[(grid >= lo) & (grid <= hi)]
    if grid.size == 0:
        raise ConfigError("--interpolate", f"{what}: the runs' evaluation steps share no range")
    return grid, np.stack([np.interp(grid, np.asarray(s, float), c) for s, c in curves])


def _schedule(steps: np.ndarray) -> str:
    if steps.size <= 4:
        return "steps " + ",".join(map(str, steps))
    return f"{steps.size} evaluations from {steps[0]} to {steps[-1]}"


@dataclass
class Reference:
    """What normalised scores of one env are measured from (random) and to (reference)."""

    env_id: str
    env_config: str
    random: float
    random_low: float
    random_high: float
    random_episodes: int
    random_source: str  # "sweep" (random runs in the sweep) or "cache" (measured here)
    random_runs: list[str]
    reference: float
    source: str  # "user" | "oracle" | "env_spec"
    detail: str

    @property
    def random_note(self) -> str:
        if self.random_low == self.random_high:
            return (f"all {self.random_episodes} random episodes returned {self.random:g}: the "
                    "interval is degenerate; more random episodes would narrow the estimate")
        return ""

    def normalise(self, x: np.ndarray | float) -> np.ndarray | float:
        return (np.asarray(x, dtype=float) - self.random) / (self.reference - self.random)

    def as_dict(self) -> dict[str, Any]:
        return {
            "random": self.random,
            "random_ci": [self.random_low, self.random_high],
            "random_episodes": self.random_episodes,
            "random_source": "measured",
            "random_from": self.random_source,
            "random_runs": self.random_runs,
            "random_note": self.random_note,
            "reference": self.reference,
            "source": self.source,
            "detail": self.detail,
            "env_config": self.env_config,
            "gymnasium_id": self.env_id,
        }


def reference_score(env_cfg: dict[str, Any]) -> tuple[float, str, str]:
    """(reference, source, detail) for one env config; refuses when there is none."""
    env_id = str(env_cfg.get("id"))
    if env_cfg.get("reference") is not None:
        return float(env_cfg["reference"]), "user", "env.reference set in the run config"
    oracle_value = oracle_reference(env_cfg)
    if oracle_value is not None:
        return oracle_value
    env = make_env(parse_env_config(dict(env_cfg)))
    try:
        threshold = env.spec.reward_threshold if env.spec is not None else None
    finally:
        env.close()
    if threshold is not None:
        return float(threshold), "env_spec", f"reward_threshold of the {env_id} gymnasium spec"
    raise ConfigError(
        "env.reference", f"{env_id} (env config {env_cfg.get('name')}) has no reference score: "
        "it has no transition table and its gymnasium spec no reward_threshold; "
        f"set env.reference for {env_cfg.get('name')}")


def oracle_reference(env_cfg: dict[str, Any]) -> tuple[float, str, str] | None:
    """Exact optimal expected undiscounted return from the start, under the env's time limit,
    for tabular envs with a transition table; None when the oracle does not apply."""
    names = {w if isinstance(w, str) else w.get("name") for w in env_cfg.get("wrappers") or []}
    if not names <= ORACLE_SAFE_WRAPPERS:
        return None
    env = make_env(parse_env_config(dict(env_cfg)))
    try:
        if not oracle.has_transition_table(env):
            return None
        mdp = oracle.from_env(env)
        horizon = oracle.time_limit_of(env)
    finally:
        env.close()
    result = oracle.optimal_start_value(mdp, horizon)
    limit = f"{horizon}-step time limit" if horizon else "no time limit"
    return result.value, "oracle", f"{result.method}, undiscounted, {limit}"


def random_from_runs(runs: Sequence[Run], confidence: float) -> tuple[stats.Interval, int]:
    """Random score from the random agent's runs: the mean over the episodes of their last
    evaluations (the random policy does not learn), with a Student-t interval."""
    returns = np.concatenate([r.last_returns for r in runs])
    return stats.mean_confidence_interval(returns, confidence), int(returns.size)


def cache_key(settings: dict[str, Any], deterministic: bool, episodes: int) -> str:
    blob = json.dumps({"env": settings, "deterministic": deterministic, "episodes": episodes},
                      sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:12]


@dataclass(frozen=True)
class RandomRequest:
    """A random-agent score to measure: the env config and the evaluation protocol."""

    results_dir: Path
    env_cfg: dict[str, Any]
    deterministic: bool
    episodes: int

    @property
    def folder(self) -> Path:
        """``<results_dir>/_reference_cache/<env>-<key>``; key: hash of the env settings, the
        evaluation settings and the episode count."""
        settings = env_settings(self.env_cfg)
        key = cache_key(settings, self.deterministic, self.episodes)
        name = f"{self.env_cfg.get('name')}-{key}"
        return self.results_dir / "_reference_cache" / name


class MissingRandomScore(Exception):
    """The random score of an env is in neither the sweep nor the cache: measure it first."""

    def __init__(self, request: RandomRequest):
        super().__init__(f"no random score for {request.env_cfg.get('id')} yet")
        self.request = request


def random_from_cache(request: RandomRequest, confidence: float
                      ) -> tuple[stats.Interval, int, str]:
    """Random score from the cached random run of ``request``; MissingRandomScore if there
    is none yet (the run goes to the runner's default sweep folder inside the cache folder;
    its run id already depends on the whole config)."""
    folder = cached_random_run(request.folder)
    if folder is None:
        raise MissingRandomScore(request)
    run = load_run(folder)
    settings = env_settings(request.env_cfg)
    if run.env_settings != settings or run.eval_settings != (request.episodes,
                                                               request.deterministic):
        raise ConfigError("env", f"the cached random run {folder} does not match the env "
                          f"settings of {settings['id']}; add random-agent runs to the sweep")
    interval, n = random_from_runs([run], confidence)
    return interval, n, run.run_id


def cached_random_run(folder: Path) -> Path | None:
    """A complete cached random run below ``folder`` (any sweep sub-folder), if one exists."""
    if not folder.is_dir():
        return None
    for rec_path in sorted(folder.glob("**/run.json")):
        if (records.read_run_json(rec_path.parent) or {}).get("status") == "complete":
            return rec_path.parent
    return None
