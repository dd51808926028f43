"""How sensitive is an agent to one hyperparameter? Aggregate score against the key's value.

For each agent (config name) of a folder, a key is *swept* when runs that agree on every
other agent setting take two or more values of it — a grid over ``agent.gamma`` or
``agent.lr``, say. Per value: the IQM of the runs' normalised scores pooled over envs and
seeds, with its stratified bootstrap interval (strata = envs, as every aggregate of the
report), and the run count. With several swept keys each combination of the other keys is
its own slice (one table each).

Tuning trials (``tuning: true``) vary every searched key at once, so no two trials agree on
the other keys; for them each varying key gets one *marginal* table over all trials, which
says so: the other keys vary between the rows.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from seedsweep.runner.analysis import stats
from seedsweep.runner.analysis.runs import Run, flat_keys
from seedsweep.runner.analysis.stats import keyed_rng
from seedsweep.runner.analysis.tuning import is_trial

NOT_SETTINGS = ("name", "entry", "tuned")  # records in the agent section, not hyperparameters


@dataclass
class SensitivityRow:
    value: Any
    iqm: stats.Interval
    n_runs: int
    scores: list[float]  # normalised score of each run, in run-id order
    run_ids: list[str]

    @property
    def text(self) -> str:
        return _text(self.value)


@dataclass
class SensitivityTable:
    agent: str
    key: str
    fixed: dict[str, Any]  # the other swept keys' values in this slice
    marginal: bool  # tuning trials: the other keys vary between rows
    rows: list[SensitivityRow]

    @property
    def numeric(self) -> bool:
        return all(_is_number(r.value) for r in self.rows)

    @property
    def log_axis(self) -> bool:
        """A numeric key whose values span a factor of 10 or more is shown on a log axis (with
        a rounding margin: 0.003 / 0.0003 is 10.000000000000002 in floating point)."""
        values = [float(r.value) for r in self.rows] if self.numeric else []
        return bool(values) and min(values) > 0 and max(values) / min(values) >= 10 - 1e-9

    @property
    def title(self) -> str:
        where = ""
        if self.fixed:
            where = " [" + ",".join(f"{k}={_text(v)}" for k, v in self.fixed.items()) + "]"
        note = " (tuning trials: other keys vary)" if self.marginal else ""
        return f"{self.agent}{where}: {self.key}{note}"

    def as_dict(self) -> dict[str, Any]:
        return {"agent": self.agent, "key": self.key, "fixed": self.fixed,
                "marginal": self.marginal, "log_axis": self.log_axis,
                "rows": [{"value": r.value, **r.iqm.as_dict(), "n_runs": r.n_runs,
                          "scores": r.scores, "run_ids": r.run_ids} for r in self.rows]}


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _text(v: Any) -> str:
    return f"{v:.4g}" if isinstance(v, float) else json.dumps(v)


def _blob(v: Any) -> str:
    return json.dumps(v, sort_keys=True)


def settings(run: Run) -> dict[str, Any]:
    """The run's agent settings, nested sections flattened to ``a.b`` keys."""
    agent = {k: v for k, v in (run.config.get("agent") or {}).items() if k not in NOT_SETTINGS}
    return flat_keys(agent)


def find_tables(runs: Sequence[Run], normalised: dict[str, float], resamples: int,
                confidence: float, seed: int) -> list[SensitivityTable]:
    """Every swept key of every agent in ``runs``; ``normalised``: run id -> normalised score."""
    by_agent: dict[str, list[Run]] = defaultdict(list)
    for r in runs:
        by_agent[r.agent].append(r)
    tables = []
    for agent in sorted(by_agent):
        group = sorted(by_agent[agent], key=lambda r: r.run_id)
        flats = {r.run_id: settings(r) for r in group}
        keys = sorted({k for f in flats.values() for k in f})
        varying = [k for k in keys if len({_blob(f.get(k)) for f in flats.values()}) > 1]
        trials = all(is_trial(r) for r in group)
        for key in varying:
            slices: dict[str, list[Run]] = defaultdict(list)
            for r in group:
                rest = {k: v for k, v in flats[r.run_id].items() if k != key}
                slices[_blob(rest)].append(r)
            swept = [s for s in slices.values()
                     if len({_blob(flats[r.run_id].get(key)) for r in s}) > 1]
            if swept:
                for s in swept:
                    fixed = {k: flats[s[0].run_id].get(k) for k in varying if k != key}
                    tables.append(_table(agent, key, fixed, False, s, flats, normalised,
                                         resamples, confidence, seed))
            elif trials:
                tables.append(_table(agent, key, {}, True, group, flats, normalised,
                                     resamples, confidence, seed))
    return tables


def _table(agent: str, key: str, fixed: dict[str, Any], marginal: bool, runs: list[Run],
           flats: dict[str, dict[str, Any]], normalised: dict[str, float], resamples: int,
           confidence: float, seed: int) -> SensitivityTable:
    by_value: dict[str, list[Run]] = defaultdict(list)
    for r in runs:
        by_value[_blob(flats[r.run_id].get(key))].append(r)
    slice_name = _blob(fixed)
    rows = []
    for blob, members in by_value.items():
        envs = sorted({r.env_key for r in members})
        strata = [np.array([normalised[r.run_id] for r in members if r.env_key == e])
                  for e in envs]
        iv = stats.aggregate_intervals(
            strata, resamples, confidence,
            keyed_rng(seed, "sensitivity", agent, key, slice_name, blob))["iqm"]
        rows.append(SensitivityRow(json.loads(blob), iv, len(members),
                                   [normalised[r.run_id] for r in members],
                                   [r.run_id for r in members]))
    rows.sort(key=lambda r: (0, float(r.value), "") if _is_number(r.value)
              else (1, 0.0, _blob(r.value)))
    return SensitivityTable(agent, key, fixed, marginal, rows)
