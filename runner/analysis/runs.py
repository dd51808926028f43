"""Run folders to runs: every complete run loaded with its evaluation curve, the rest listed.

Reading only: a report never changes what it reads. Every problem with a folder raises
:class:`ConfigError` with one clear line, or becomes a :class:`Problem` the report lists.
"""

from __future__ import annotations

import csv
import json
import math
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import yaml
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.execution import records

EVAL_HEADER = ["env_step", "episode", "return", "discounted_return", "length", "episode_seed"]




SKIPPED_FOLDERS = ("report",)  # our own output; "." folders (temporary) are skipped too


@dataclass
class Run:
    """One complete run: its record and its evaluation curve."""

    run_id: str
    path: Path
    agent: str  # agent config name from run.json
    label: str  # agent name, plus the differing hyperparameters when a sweep varies them
    env_id: str
    env_config: str
    seed: int
    config: dict[str, Any]
    record: dict[str, Any]
    env_key: str  # how reports name the env: the gymnasium id, or id[config] when a sweep
    # uses one id with several env configs (e.g. two FrozenLake maps)
    steps: np.ndarray  # (E,) env steps of the evaluations
    curve: np.ndarray  # (E,) mean undiscounted return of each evaluation
    last_returns: np.ndarray  # episode returns of the last evaluation

    @property
    def is_floor(self) -> bool:
        """A run of the uniform random agent (marked by its class, recorded in run.json)."""
        return bool(self.record.get("random_floor", False))

    @property
    def eval_settings(self) -> tuple[int, bool]:
        ev = self.record.get("eval") or {}
        return int(ev.get("episodes", -1)), bool(ev.get("deterministic", True))

    @property
    def env_settings(self) -> dict[str, Any]:
        return env_settings(self.config.get("env") or {})


@dataclass
class Problem:
    """A run folder left out of the aggregates, and why."""

    run_id: str
    agent: str
    env: str
    seed: Any
    status: str
    reason: str
    env_config: str = ""


@dataclass
class Sweep:
    path: Path
    runs: list[Run]
    problems: list[Problem] = field(default_factory=list)

    @property
    def name(self) -> str:
        return self.path.name


def env_settings(env_cfg: dict[str, Any]) -> dict[str, Any]:
    """The parts of an env config that change what an evaluation measures."""
    return {
        "id": env_cfg.get("id"),
        "kwargs": env_cfg.get("kwargs") or {},
        "max_episode_steps": env_cfg.get("max_episode_steps"),
        "wrappers": env_cfg.get("wrappers") or [],
    }


def _yaml_load(path: Path) -> dict[str, Any]:
    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    try:
        data = yaml.load(path.read_text(), Loader=loader)
    except (OSError, yaml.YAMLError, UnicodeDecodeError) as err:
        raise ConfigError(str(path), f"unreadable config.yaml ({_first(err)})") from None
    if not isinstance(data, dict):
        raise ConfigError(str(path), "config.yaml is not a mapping")
    return data


def _first(err: BaseException) -> str:
    text = str(err).strip()
    return text.splitlines()[0] if text else type(err).__name__


def read_eval_csv(path: Path, episodes: int) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
    """Evaluation steps, mean return per evaluation and the returns of each evaluation.
    Refuses files that are unreadable, truncated or have evaluations with missing episodes."""
    try:
        with path.open(newline="") as f:
            rows = list(csv.reader(f))
    except (OSError, UnicodeDecodeError, csv.Error) as err:
        raise ConfigError(str(path), f"unreadable eval.csv ({_first(err)})") from None
    if not rows or rows[0] != EVAL_HEADER:
        raise ConfigError(str(path), f"eval.csv header must be {','.join(EVAL_HEADER)}")
    if len(rows) == 1:
        raise ConfigError(str(path), "eval.csv has no evaluation rows")
    groups: dict[int, list[float]] = {}
    order: list[int] = []
    for line_no, row in enumerate(rows[1:], start=2):
        if len(row) != len(EVAL_HEADER):
            raise ConfigError(
                str(path), f"eval.csv line {line_no} has {len(row)} fields, expected "
                f"{len(EVAL_HEADER)} (truncated file?)")
        try:
            step, ret = int(row[0]), float(row[2])
            int(row[1]), float(row[3]), int(row[4]), int(row[5])
        except ValueError:
            raise ConfigError(str(path), f"eval.csv line {line_no} is not numeric: "
                              f"{','.join(row)[:80]!r}") from None
        if not math.isfinite(ret):
            raise ConfigError(str(path), f"eval.csv line {line_no}: return is {row[2]}")
        if step not in groups:
            if order and step < order[-1]:
                raise ConfigError(str(path), f"eval.csv line {line_no}: env_step goes back")
            groups[step] = []
            order.append(step)
        groups[step].append(ret)
    for step in order:
        if len(groups[step]) != episodes:
            raise ConfigError(
                str(path), f"evaluation at env_step {step} has {len(groups[step])} episodes, "
                f"eval.episodes is {episodes} (truncated file?)")
    per_eval = [np.asarray(groups[s]) for s in order]
    return np.asarray(order, dtype=np.int64), np.array([r.mean() for r in per_eval]), per_eval


def load_sweep(path: Path) -> Sweep:
    """Every run folder of a sweep: complete runs loaded, the others listed as problems."""
    path = Path(path)
    if not path.is_dir():
        raise ConfigError("sweep", f"{path} is not a folder (expected results/<sweep>)")
    runs: list[Run] = []
    problems: list[Problem] = []
    folders = [p for p in sorted(path.iterdir()) if p.is_dir()
               and not p.name.startswith(".") and p.name not in SKIPPED_FOLDERS]
    seen_records = 0
    for folder in folders:
        run_json = folder / "run.json"
        if not run_json.exists():
            if folder.name.startswith("_"):
                continue  # tool folders such as _reference_cache
            if (folder / "config.yaml").exists() or (folder / "eval.csv").exists():
                problems.append(Problem(folder.name, "?", "?", "?", "missing",
                                        "no run.json (never started or not a run folder)"))
            continue
        seen_records += 1
        rec = records.read_run_json(folder)
        status = rec.get("status")
        if status != "complete":
            reason = rec.get("error") or f"status is {status!r}"
            problems.append(Problem(str(rec.get("run_id", folder.name)), str(rec.get("agent")),
                                    str(rec.get("env")), rec.get("seed"), str(status), reason,
                                    str(rec.get("env_config") or "")))
            continue
        runs.append(load_run(folder, rec))
    if seen_records == 0:
        raise ConfigError("sweep", f"{path} contains no runs (no <run>/run.json)")
    if not runs:
        raise ConfigError("sweep", f"{path} has no complete runs ({len(problems)} not complete)")
    label_variants(runs)
    name_envs(runs, problems)
    check_floor_names(runs)
    return Sweep(path, runs, problems)


def check_floor_names(runs: list[Run]) -> None:
    """The random floor is marked by its agent class, not by its name; an agent of one's own
    that shares the floor's name would be mistaken for it on every page, so refuse that."""
    floor = {r.label: r for r in runs if r.is_floor}
    for r in runs:
        if not r.is_floor and r.label in floor:
            raise ConfigError("agent.name", f"{r.label!r} names both the random floor "
                              f"({floor[r.label].run_id}) and another agent ({r.run_id}); "
                              "give your agent its own agent.name")


def name_envs(runs: list[Run], problems: list[Problem]) -> None:
    """Env keys: the gymnasium id, or ``id[config]`` where one id has several env configs."""
    configs: dict[str, set[str]] = defaultdict(set)
    for r in runs:
        configs[r.env_id].add(r.env_config)
    for p in problems:
        if p.env_config and p.env != "?":
            configs[p.env].add(p.env_config)
    shared = {env_id for env_id, names in configs.items() if len(names) > 1}
    for r in runs:
        r.env_key = f"{r.env_id}[{r.env_config}]" if r.env_id in shared else r.env_id
    for p in problems:
        if p.env in shared:
            p.env = f"{p.env}[{p.env_config}]"


def load_run(folder: Path, rec: dict[str, Any] | None = None) -> Run:
    """One complete run folder (``rec``: its run.json, when already read)."""
    if rec is None:
        rec = records.read_run_json(folder)
        if rec is None:
            raise ConfigError(str(folder / "run.json"), "missing")
    for key in ("run_id", "agent", "env", "seed", "eval"):
        if key not in rec:
            raise ConfigError(str(folder / "run.json"), f"missing key {key!r}")
    config = _yaml_load(folder / "config.yaml")
    episodes = int((rec.get("eval") or {}).get("episodes", 0))
    steps, curve, per_eval = read_eval_csv(folder / "eval.csv", episodes)
    recorded = rec.get("final_score")
    if recorded is None or not np.isclose(curve[-1], float(recorded), rtol=1e-9, atol=1e-9):
        raise ConfigError(
            str(folder / "eval.csv"), f"last evaluation mean {curve[-1]!r} disagrees with "
            f"run.json final_score {recorded!r} (truncated or edited eval.csv?)")
    return Run(
        run_id=str(rec["run_id"]), path=folder, agent=str(rec["agent"]), label=str(rec["agent"]),
        env_id=str(rec["env"]), env_config=str(rec.get("env_config") or rec["env"]),
        env_key=str(rec["env"]), seed=int(rec["seed"]), config=config, record=rec, steps=steps,
        curve=curve, last_returns=per_eval[-1],
    )


def label_variants(runs: list[Run]) -> None:
    """Runs of one agent name on one env with different hyperparameters are different
    agents: label them ``name[key=value,...]`` by the keys that differ there. Settings that
    differ only between envs (an agent's per-env settings) keep one agent."""
    by_agent: dict[tuple[str, str, str], list[Run]] = defaultdict(list)
    for r in runs:
        by_agent[(r.agent, r.env_id, r.env_config)].append(r)
    for (name, _, _), group in by_agent.items():
        sections = [flat_keys(r.config.get("agent") or {}) for r in group]
        keys = sorted({k for s in sections for k in s})
        varying = [k for k in keys if len({json.dumps(s.get(k), sort_keys=True)
                                            for s in sections}) > 1]
        if not varying:
            continue
        for r, s in zip(group, sections, strict=True):
            r.label = name + "[" + ",".join(f"{k}={s.get(k)}" for k in varying) + "]"


def flat_keys(d: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    """Nested sections flattened to ``a.b`` keys (how a swept key is named on the CLI)."""
    out = {}
    for k, v in d.items():
        if isinstance(v, dict):
            out.update(flat_keys(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = v
    return out
