"""Tuning seen from the records: a trial's objective, and what reports say about tuning.

A tuning trial is a set of ordinary runs (``tuning: true`` in their config, seeds from
``TUNING_SEED_BASE`` up). Its objective is the IQM of the runs' normalised scores pooled over
envs and seeds — the report's own normalisation, ``(score - random) / (reference - random)``,
with the random score of the same evaluation protocol from the cache (the report uses the
same cache when a sweep has no random runs), so a trial is judged the way a report would
judge it.

A configuration chosen by ``seedsweep tune`` carries a ``tuned:`` record in its agent
section; reports state it per agent and the comparison warns when a tuned candidate meets an
untuned baseline (or tuning budgets differ).
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Collection, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis import scores, selection, stats
from seedsweep.runner.analysis.runs import Run, load_run
from seedsweep.runner.analysis.scores import Reference

OBJECTIVE = ("IQM over the trial's runs (envs x tuning seeds) of normalised final scores, "
             "(score - random) / (reference - random)")
BUDGET_KEYS = ("trials", "steps", "envs", "seeds_per_env")


def is_trial(run: Run) -> bool:
    return bool(run.config.get("tuning", False))


def check_not_mixed(runs: Sequence[Run], where: Path) -> None:
    """Refuse a folder holding tuning trials and evaluation runs together: a report on it
    would judge configurations on the seeds they were chosen on."""
    trials = [r for r in runs if is_trial(r)]
    if trials and len(trials) != len(runs):
        raise ConfigError("sweep", f"{where} mixes {len(trials)} tuning-trial runs with "
                          f"{len(runs) - len(trials)} evaluation runs (e.g. {trials[0].run_id} "
                          "and " + next(r.run_id for r in runs if not is_trial(r))
                          + "); report tuning studies and evaluation sweeps from separate "
                          "folders")


def check_evaluation_runs(runs: Sequence[Run], where: Path) -> None:
    """Refuse to compare tuning trials: a verdict on the seeds a configuration was chosen on
    flatters the tuned agent."""
    trials = [r for r in runs if is_trial(r)]
    if trials:
        raise ConfigError("sweep", f"{where} holds tuning trials ({trials[0].run_id}, ...); "
                          "a verdict needs evaluation seeds: run the chosen configurations "
                          "on fresh seeds (seedsweep tune prints the command) and compare those")


class References:
    """Random and reference scores per env and evaluation protocol, found once per tune."""

    def __init__(self, results_dir: Path):
        self.results_dir = Path(results_dir)
        self._known: dict[str, Reference] = {}

    def of(self, run: Run) -> Reference:
        """The run's env's Reference; MissingRandomScore when the random score must be
        measured first (the caller measures it and asks again)."""
        env_cfg = dict(run.config.get("env") or {})
        episodes, deterministic = run.eval_settings
        settings = {"episodes": episodes, "deterministic": deterministic}
        key = json.dumps([run.env_settings, env_cfg.get("reference"), settings],
                         sort_keys=True, default=str)
        if key not in self._known:
            target = scores.reference_score(env_cfg)
            opts = argparse.Namespace(confidence=0.95, random_episodes=None)
            self._known[key] = selection.make_reference(self.results_dir, env_cfg, settings,
                                                        target, [], opts)
        return self._known[key]


def trial_value(run_dirs: Sequence[Path], references: References) -> tuple[float, dict]:
    """(objective, run id -> normalised score) of one trial's complete runs."""
    normalised = {}
    for folder in run_dirs:
        run = load_run(Path(folder))
        ref = references.of(run)
        normalised[run.run_id] = float(ref.normalise(scores.score_run(run, "final")))
    value = float(stats.interquartile_mean(np.array(list(normalised.values()))))
    return value, normalised


# -- what reports say about tuning -----------------------------------------------------------


def tuning_of(runs: Sequence[Run]) -> dict[str, Any] | None:
    """The ``tuned`` record of an agent's runs (one per label: it is part of the config), or
    None when the configuration was not chosen by tune."""
    for r in runs:
        tuned = (r.config.get("agent") or {}).get("tuned")
        if isinstance(tuned, dict):
            return tuned
    return None


def budget_text(tuned: dict[str, Any] | None) -> str:
    """``tuned: T trials × S steps × E envs`` (plus seeds), or ``not tuned``."""
    if not tuned:
        return "not tuned"
    envs = tuned.get("envs") or []
    n_envs = envs if isinstance(envs, int) else len(envs)
    steps = tuned.get("steps")
    steps_text = f"{steps:,}" if isinstance(steps, int) else str(steps)
    text = (f"tuned: {tuned.get('trials')} trials × {steps_text} steps × "
            f"{n_envs} envs × {tuned.get('seeds_per_env')} seeds")
    if tuned.get("study"):
        text += f" (study {tuned['study']})"
    complete = tuned.get("complete_trials")
    if complete is not None and complete != tuned.get("trials"):
        text += f", {complete} trials complete"
    return text


def tuning_note(candidate: str, tuning: dict[str, dict[str, Any] | None],
                floor: Collection[str] = ()) -> str | None:
    """A warning when the comparison is not between equally tuned agents, else None.
    ``floor``: the random floor's labels (it has nothing to tune)."""
    cand = tuning.get(candidate)
    untuned = [a for a, t in tuning.items() if a != candidate and not t and a not in floor]
    if cand and untuned:
        return (f"{candidate} was tuned ({budget_text(cand)}) but {', '.join(untuned)} "
                f"{'was' if len(untuned) == 1 else 'were'} not: the verdict may reflect "
                "tuning effort rather than the method; tune every baseline with the same "
                "budget (seedsweep tune)")
    tuned = {a: t for a, t in tuning.items() if t}
    if cand is None and tuned:
        return (f"baselines {', '.join(tuned)} were tuned but the candidate {candidate} was "
                "not: the comparison is not on equal tuning")
    budgets = {a: tuple(json.dumps(t.get(k), sort_keys=True) for k in BUDGET_KEYS)
               + (str(t.get("complete_trials", t.get("trials"))),) for a, t in tuned.items()}
    if len(set(budgets.values())) > 1:
        parts = [f"{a}: {budget_text(t)}" for a, t in tuned.items()]
        return ("tuning budgets differ (" + "; ".join(parts) + "): the verdict may reflect "
                "tuning effort rather than the method")
    return None
