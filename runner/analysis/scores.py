"""Run folders to scores: loading records, scoring runs, random and reference scores.

A run's score is the mean undiscounted return of its last evaluation (or the mean of its
last K evaluations, or the area under its evaluation curve divided by the span of env
steps it covers). Per env, a normalised score is ``(score - random) / (reference - random)``
where *random* is the uniform-random agent's score under the same evaluation protocol and
*reference* comes, in order of preference, from the user (``env.reference``), the exact
optimum of a tabular env (:mod:`runner.oracle`), or the gymnasium spec's ``reward_threshold``.

Every problem with the input raises :class:`seedsweep.agents.base.ConfigError` with one clear line.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import zlib
from collections import defaultdict
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from seedsweep.agents.base import ConfigError
from seedsweep.runner.analysis import stats

EVAL_HEADER = ["env_step", "episode", "return", "discounted_return", "length", "episode_seed"]
RANDOM_AGENT = "random"
SKIPPED_FOLDERS = ("report",)  # our own output; "." folders (temporary) are skipped too
SCORE_METHODS = ("final", "last-k", "auc")
# wrappers that leave the dynamics and the evaluation rewards of a tabular env unchanged
ORACLE_SAFE_WRAPPERS = {"one_hot", "frame_stack", "time_limit", "normalize_obs",
                        "clip_reward", "scale_reward"}


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


# -- loading --------------------------------------------------------------------------------


def _yaml_load(path: Path) -> dict[str, Any]:
    import yaml

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


def read_run_json(path: Path) -> dict[str, Any]:
    try:
        doc = json.loads(path.read_text())
    except (OSError, ValueError, UnicodeDecodeError) as err:
        raise ConfigError(str(path), f"unreadable run.json ({_first(err)})") from None
    if not isinstance(doc, dict):
        raise ConfigError(str(path), "run.json is not a JSON object")
    return doc


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
        rec = read_run_json(run_json)
        status = rec.get("status")
        if status != "complete":
            reason = rec.get("error") or f"status is {status!r}"
            problems.append(Problem(str(rec.get("run_id", folder.name)), str(rec.get("agent")),
                                    str(rec.get("env")), rec.get("seed"), str(status), reason,
                                    str(rec.get("env_config") or "")))
            continue
        runs.append(_load_complete(folder, rec))
    if seen_records == 0:
        raise ConfigError("sweep", f"{path} contains no runs (no <run>/run.json)")
    if not runs:
        raise ConfigError("sweep", f"{path} has no complete runs ({len(problems)} not complete)")
    label_variants(runs)
    name_envs(runs, problems)
    return Sweep(path, runs, problems)


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


def _load_complete(folder: Path, rec: dict[str, Any]) -> Run:
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
    """Runs of one agent name with different hyperparameters are different agents: label
    them ``name[key=value,...]`` by the keys that differ."""
    by_agent: dict[str, list[Run]] = defaultdict(list)
    for r in runs:
        by_agent[r.agent].append(r)
    for name, group in by_agent.items():
        sections = [_flat(r.config.get("agent") or {}) for r in group]
        keys = sorted({k for s in sections for k in s})
        varying = [k for k in keys if len({json.dumps(s.get(k), sort_keys=True)
                                            for s in sections}) > 1]
        if not varying:
            continue
        for r, s in zip(group, sections, strict=True):
            r.label = name + "[" + ",".join(f"{k}={s.get(k)}" for k in varying) + "]"


def _flat(d: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    out = {}
    for k, v in d.items():
        if isinstance(v, dict):
            out.update(_flat(v, f"{prefix}{k}."))
        else:
            out[f"{prefix}{k}"] = v
    return out


# -- scores and curves ----------------------------------------------------------------------


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


# -- random and reference scores ------------------------------------------------------------


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
    from seedsweep.envs.build import make_env, parse_env_config

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
    from seedsweep.envs.build import make_env, parse_env_config
    from seedsweep.runner.analysis import oracle

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


def hydra_value(value: Any) -> str:
    """A python value in hydra's override grammar."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"
    if isinstance(value, (list, tuple)):
        return "[" + ",".join(hydra_value(v) for v in value) + "]"
    if isinstance(value, dict):
        for k in value:
            if not (isinstance(k, str) and k.isidentifier()):
                raise ConfigError("env.kwargs", f"key {k!r} cannot be passed as an override; "
                                  "add random-agent runs to the sweep instead")
        return "{" + ",".join(f"{k}:{hydra_value(v)}" for k, v in value.items()) + "}"
    raise ConfigError("env", f"cannot pass {value!r} as an override")


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


def random_from_cache(
    results_dir: Path, env_cfg: dict[str, Any], deterministic: bool, episodes: int,
    confidence: float, runner: Callable[..., Path] | None = None,
) -> tuple[stats.Interval, int, str]:
    """Random score measured by running the random agent under the same protocol, kept in
    ``<results_dir>/_reference_cache/<env>-<key>/`` (key: hash of the env settings, the
    evaluation settings and the episode count). The run goes to the runner's default sweep
    folder inside that folder; the run id already depends on the whole config."""
    from filelock import FileLock

    settings = env_settings(env_cfg)
    name = f"{env_cfg.get('name')}-{cache_key(settings, deterministic, episodes)}"
    cache = results_dir / "_reference_cache"
    cache.mkdir(parents=True, exist_ok=True)
    with FileLock(str(cache / f"{name}.lock")):
        folder = _cached_run(cache / name)
        if folder is None:
            folder = _measure_random(cache / name, env_cfg, deterministic, episodes, runner)
        run = _load_complete(folder, read_run_json(folder / "run.json"))
    if run.env_settings != settings or run.eval_settings != (episodes, deterministic):
        raise ConfigError("env", f"the cached random run {folder} does not match the env "
                          f"settings of {settings['id']}; add random-agent runs to the sweep")
    interval, n = random_from_runs([run], confidence)
    return interval, n, run.run_id


def _measure_random(folder: Path, env_cfg: dict[str, Any], deterministic: bool, episodes: int,
                    runner: Callable[..., Path] | None) -> Path:
    if runner is None:
        from seedsweep.runner.launch.api import run as runner
    overrides = random_overrides(env_cfg, deterministic, episodes)
    try:
        return Path(runner(overrides, results_dir=str(folder)))
    except ConfigError as err:
        raise ConfigError(err.field, f"measuring the random score of {env_cfg.get('id')} "
                          f"failed ({str(err).split(': ', 1)[-1]}); add random-agent runs "
                          "to the sweep") from None
    except Exception as err:  # a failed run: say so in one line, the run folder has the log
        raise ConfigError("random", f"the random-agent run on {env_cfg.get('id')} failed "
                          f"({_first(err)}); see {folder}") from None


def _cached_run(folder: Path) -> Path | None:
    """A complete cached random run below ``folder`` (any sweep sub-folder), if one exists."""
    if not folder.is_dir():
        return None
    for rec_path in sorted(folder.glob("**/run.json")):
        if read_run_json(rec_path).get("status") == "complete":
            return rec_path.parent
    return None


def stable_key(*parts: str) -> int:
    """A seed component from names, stable across processes and subsets of agents."""
    return zlib.crc32("\x1f".join(parts).encode())
