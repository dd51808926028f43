"""Which runs a report or a comparison uses: agents, envs, cells, and their checks.

Shared by the report and the comparison, so both refuse the same folders with the same
line and pick the same random runs.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
from seedsweep.configs.checks import ConfigError, suggest
from seedsweep.runner.analysis import scores
from seedsweep.runner.analysis.runs import Problem, Run, Sweep, env_settings
from seedsweep.runner.analysis.scores import Reference


def select_agents(sweep: Sweep, wanted: str | None, include_random: bool) -> list[str]:
    """The compared agent labels: those named in ``wanted`` (comma-separated; an agent name
    stands for all its variants), else every agent but the random floor."""
    if wanted:
        chosen: list[str] = []
        for name in split_names(wanted):
            chosen += [o for o in resolve_agent(sweep, name, "--agents") if o not in chosen]
        if not chosen:
            raise ConfigError("--agents", "no agent named")
        return chosen
    labels, _, _ = agent_names(sweep)
    chosen = [lab for lab in labels if include_random or not _is_random(sweep, lab)]
    if not chosen:
        raise ConfigError("--agents", "the sweep has only random-agent runs; pass "
                          "--include-random to report them")
    return chosen


def split_names(text: str) -> list[str]:
    """Comma-separated names; commas inside [...] (variant labels) do not split."""
    names, depth, current = [], 0, ""
    for ch in text:
        depth += (ch == "[") - (ch == "]")
        if ch == "," and depth == 0:
            names.append(current.strip())
            current = ""
        else:
            current += ch
    names.append(current.strip())
    return [n for n in names if n]


def _is_random(sweep: Sweep, label: str) -> bool:
    return any(r.label == label and r.is_floor for r in sweep.runs)


def select_envs(sweep: Sweep, agents: list[str], wanted: str | None) -> list[str]:
    present = sorted({r.env_key for r in sweep.runs if r.label in agents}
                     | {p.env for p in sweep.problems if p.agent in agents and p.env != "?"})
    if not wanted:
        return present
    names = {r.env_config: r.env_key for r in sweep.runs}
    names.update({r.env_id: r.env_key for r in sweep.runs if r.env_id == r.env_key})
    chosen = []
    for name in split_names(wanted):
        env = name if name in present else names.get(name)
        if env not in present:
            raise ConfigError("--envs", f"unknown env {name!r} (in this sweep: "
                              f"{', '.join(present)})")
        if env not in chosen:
            chosen.append(env)
    return chosen


def group_runs(runs: list[Run], agents: list[str], envs: list[str]) -> dict:
    cells: dict[tuple[str, str], list[Run]] = {(a, e): [] for a in agents for e in envs}
    seen: dict[tuple[str, str, int], str] = {}
    for r in runs:
        if (r.label, r.env_key) not in cells:
            continue
        key = (r.label, r.env_key, r.seed)
        if key in seen:
            raise ConfigError("seed", f"{r.label} on {r.env_key} has two complete runs with "
                              f"seed {r.seed} ({seen[key]}, {r.run_id}); remove one")
        seen[key] = r.run_id
        cells[(r.label, r.env_key)].append(r)
    for cell in cells.values():
        cell.sort(key=lambda r: r.seed)
    return cells


def check_cells(by_cell: dict, agents: list[str], envs: list[str], problems: list[Problem],
                allow_few: bool) -> None:
    need = 1 if allow_few else 2
    for a in agents:
        for e in envs:
            n = len(by_cell[(a, e)])
            if n >= need:
                continue
            left_out = sum(1 for p in problems if p.agent == a.split("[")[0] and p.env == e)
            extra = f", {left_out} not complete" if left_out else ""
            if n == 0:
                raise ConfigError("runs", f"{a} has no complete run on {e}{extra}; complete "
                                  "them, or leave it out with --agents/--envs")
            raise ConfigError("runs", f"{a} has {n} complete run on {e}{extra}; at least 2 "
                              "are needed for an interval (pass --allow-few to report anyway)")


def check_settings(by_cell: dict, agents: list[str], envs: list[str]) -> tuple[dict, dict]:
    """One env config and one evaluation protocol per env, or a refusal naming both."""
    env_cfgs, eval_settings = {}, {}
    for e in envs:
        runs = [r for a in agents for r in by_cell[(a, e)]]
        first = runs[0]
        for r in runs[1:]:
            if r.env_settings != first.env_settings:
                diff = [k for k in first.env_settings if r.env_settings[k] != first.env_settings[k]]
                raise ConfigError("env." + diff[0], f"{e}: runs differ in env.{diff[0]} "
                                  f"({first.run_id}: {first.env_settings[diff[0]]!r}, "
                                  f"{r.run_id}: {r.env_settings[diff[0]]!r}); report them "
                                  "as separate sweeps")
            ref_a = (first.config.get("env") or {}).get("reference")
            ref_b = (r.config.get("env") or {}).get("reference")
            if ref_a != ref_b:
                raise ConfigError("env.reference", f"{e}: runs set different references "
                                  f"({first.run_id}: {ref_a!r}, {r.run_id}: {ref_b!r})")
            if r.eval_settings != first.eval_settings:
                raise ConfigError(
                    "eval", f"{e}: runs use different evaluation settings ({first.run_id}: "
                    f"{_fmt_eval(first.eval_settings)}; {r.run_id}: {_fmt_eval(r.eval_settings)})")
        env_cfgs[e] = dict(first.config.get("env") or {})
        episodes, deterministic = first.eval_settings
        eval_settings[e] = {"episodes": episodes, "deterministic": deterministic}
    return env_cfgs, eval_settings


def _fmt_eval(settings: tuple[int, bool]) -> str:
    return f"eval.episodes={settings[0]}, eval.deterministic={str(settings[1]).lower()}"


def missing_runs(sweep: Sweep, agents: list[str], envs: list[str],
                 by_cell: dict) -> list[Problem]:
    """Seeds that other compared agents ran on an env but this agent has no folder for."""
    out = []
    for e in envs:
        seeds = {r.seed for a in agents for r in by_cell[(a, e)]}
        seeds |= {p.seed for p in sweep.problems if p.env == e and isinstance(p.seed, int)}
        for a in agents:
            have = {r.seed for r in by_cell[(a, e)]}
            listed = {p.seed for p in sweep.problems if p.env == e and p.agent == a.split("[")[0]}
            for s in sorted(seeds - have - listed):
                out.append(Problem("-", a, e, s, "missing",
                                   "no run folder for this seed (other agents have one)"))
    return out


def matching_random_runs(runs: list[Run], env: str, env_cfg: dict, settings: dict) -> tuple:
    """Random-agent runs of ``env`` measured under the same env and evaluation settings."""
    wanted = (settings["episodes"], settings["deterministic"])
    use, excluded = [], []
    for r in runs:
        if r.env_key != env or not r.is_floor:
            continue
        if r.env_settings == env_settings(env_cfg) and r.eval_settings == wanted:
            use.append(r)
        else:
            excluded.append(Problem(r.run_id, r.label, env, r.seed, "complete",
                                    "random run not used: its env or evaluation settings differ "
                                    "from the compared runs"))
    return sorted(use, key=lambda r: r.seed), excluded


def make_reference(results_dir: Path, env_cfg: dict, settings: dict, target: tuple,
                   randoms: list[Run], opts: Any) -> Reference:
    """Random score (from the sweep's random runs, else from the cache; MissingRandomScore
    when neither has it) and the reference ``target`` = (value, source, detail) of one env."""
    env_id = str(env_cfg.get("id"))
    reference, source, detail = target
    if randoms:
        interval, n = scores.random_from_runs(randoms, opts.confidence)
        origin, ids = "sweep", [r.run_id for r in randoms]
    else:
        episodes = opts.random_episodes or max(100, settings["episodes"])
        request = scores.RandomRequest(results_dir, env_cfg, settings["deterministic"], episodes)
        interval, n, rid = scores.random_from_cache(request, opts.confidence)
        origin, ids = "cache", [rid]
    if np.isclose(reference, interval.point):
        raise ConfigError("env.reference", f"{env_id}: reference {reference} equals the random "
                          f"score {interval.point}; normalised scores are undefined")
    return Reference(env_id, str(env_cfg.get("name")), interval.point, interval.low,
                     interval.high, n, origin, ids, reference, source, detail)


def agent_names(sweep: Sweep) -> tuple[list[str], dict[str, list[str]], list[str]]:
    """(labels of complete runs, agent name -> its labels, every name the sweep knows)."""
    labels = sorted({r.label for r in sweep.runs})
    base: dict[str, list[str]] = {}
    for r in sweep.runs:
        base.setdefault(r.agent, [])
        if r.label not in base[r.agent]:
            base[r.agent].append(r.label)
    known = sorted(set(labels) | set(base) | {p.agent for p in sweep.problems if p.agent != "?"})
    return labels, base, known


def resolve_agent(sweep: Sweep, name: str, field_name: str) -> list[str]:
    """The agent labels ``name`` stands for: itself, or every variant of an agent name."""
    labels, base, known = agent_names(sweep)
    if name in labels:
        return [name]
    if name in base:
        return sorted(base[name])
    if name in known:
        return [name]  # only runs that are not complete: check_cells says so
    raise ConfigError(field_name, f"unknown agent {name!r} (in this sweep: {', '.join(known)})"
                      + suggest(name, known))


def select_pair_agents(sweep: Sweep, candidate: str,
                       baselines: Sequence[str] | None) -> tuple[str, list[str]]:
    """The candidate label and the baseline labels (default: all others but random)."""
    found = resolve_agent(sweep, candidate, "--candidate")
    if len(found) > 1:
        raise ConfigError("--candidate", f"{candidate!r} names {len(found)} variants in this "
                          f"sweep ({', '.join(found)}); name one")
    cand = found[0]
    chosen: list[str] = []
    if baselines:
        for text in baselines:
            for name in split_names(text):
                for label in resolve_agent(sweep, name, "--baseline"):
                    if label == cand:
                        raise ConfigError("--baseline", f"{label!r} is the candidate; name "
                                          "other agents")
                    if label not in chosen:
                        chosen.append(label)
        if not chosen:
            raise ConfigError("--baseline", "no agent named")
        return cand, chosen
    labels, _, _ = agent_names(sweep)
    random_labels = {r.label for r in sweep.runs if r.is_floor}
    chosen = [lab for lab in labels if lab != cand and lab not in random_labels]
    if not chosen:
        others = [lab for lab in labels if lab != cand]
        hint = f" (available: {', '.join(others)})" if others else ""
        raise ConfigError("--baseline", "the sweep has no other agent than the candidate and "
                          f"the random agent; name a baseline with --baseline{hint}")
    return cand, chosen
