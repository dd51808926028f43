"""``seedsweep check-agent``: does an agent keep the contract of the agents' base class?

Exit status 0 when nothing failed, 1 when a check failed, 2 for bad input.
"""

from __future__ import annotations

import argparse
import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import torch
from seedsweep.agents.base import Agent, build_config
from seedsweep.configs.checks import ConfigError, check_type
from seedsweep.envs.build import EnvSpec, parse_env_config
from seedsweep.runner.agent_check.checks import (
    DEFAULT_ENVS,
    DEFAULT_STEPS,
    MIN_STEPS,
    Result,
    run_checks,
)
from seedsweep.runner.agent_check.harness import Subject, env_case
from seedsweep.runner.commands import options
from seedsweep.runner.execution.config import compose, group_options, parse_overrides
from seedsweep.runner.execution.prepare import load_agent_class

HELP = "check an agent against the contract"
EPILOG = f"""arguments after TARGET (hydra grammar):
  env=NAME         env configs to check on (repeat or comma-separate; default:
                   {", ".join(DEFAULT_ENVS)})
  agent.KEY=VALUE  a hyperparameter override
  seed=N           agent seed (default 0; the different-seed instance uses N+1)
  steps=N          act/observe calls per loop (default {DEFAULT_STEPS}; at least {MIN_STEPS})

checks, one line each per env: spaces, actions, determinism, round_trip, global_rng,
learn_loop; once per agent: contract_version, config, declares, refuses.
Learning checks only mean something if the agent learns within `steps`: lower e.g.
agent.replay_warmup_steps for agents that wait before their first update."""


@dataclass
class Options:
    target: str
    envs: list[str]
    agent: dict[str, Any]
    seed: int = 0
    steps: int = DEFAULT_STEPS
    config_dirs: list[str] = field(default_factory=list)


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("check-agent", "Check that an agent keeps the contract of "
                       "seedsweep.agents.base, on real training envs.", EPILOG,
                       usage="seedsweep check-agent TARGET [env=NAME ...] [agent.KEY=VALUE ...] "
                             "[seed=N] [steps=N] [--config-dir DIR]")
    p.add_argument("target", help="an agent config name (configs/agent/NAME.yaml), "
                   "module:Class or path/to/file.py:Class (then with its Config defaults)")
    p.add_argument("settings", nargs="*", metavar="key=value",
                   help="env=NAME, agent.KEY=VALUE, seed=N, steps=N")
    options.add_config_dirs(p)
    return p


def parse_options(argv: Sequence[str]) -> Options:
    args = build_parser().parse_intermixed_args(list(argv))
    loose = [a for a in args.settings if "=" not in a]
    if loose:
        raise ConfigError("target", f"one target expected, got {1 + len(loose)} "
                          f"({args.target}, {', '.join(loose)}): an agent config name, "
                          "module:Class or path/to/file.py:Class")
    opts = Options(args.target, [], {}, config_dirs=list(args.config_dir))
    for o in parse_overrides(args.settings):
        key = o.get_key_element().lstrip("+")
        if key == "env":
            if o.is_sweep_override():
                opts.envs += [str(v) for v in o.sweep_string_iterator()]
            else:
                opts.envs.append(o.get_value_element_as_str())
            continue
        if o.is_sweep_override():
            raise ConfigError(key, "one value expected (check-agent runs no sweeps)")
        if key.startswith("agent.") and len(key) > len("agent."):
            opts.agent[key.removeprefix("agent.")] = o.value()
        elif key in ("seed", "steps"):
            value = check_type(key, o.value(), int)
            low = 0 if key == "seed" else MIN_STEPS
            if value < low:
                raise ConfigError(key, f"must be an integer >= {low} (got {value})")
            setattr(opts, key, value)
        else:
            raise ConfigError(key, "unknown option (allowed: env=NAME, agent.KEY=VALUE, "
                              "seed=N, steps=N)")
    opts.envs = list(dict.fromkeys(opts.envs or DEFAULT_ENVS))
    return opts


def resolve_target(target: str, config_dirs: Sequence[str] = ()
                   ) -> tuple[type[Agent], dict[str, Any], str]:
    """The agent class, its hyperparameters from YAML (if a config name) and a label."""
    values: dict[str, Any] = {}
    entry = target
    if ":" not in target:
        allowed = group_options("agent", config_dirs)
        if target not in allowed:
            raise ConfigError("target", f"unknown agent config {target!r} (allowed: "
                              f"{', '.join(allowed)}; or module:Class, or path/to/file.py:Class)")
        values = dict(compose([f"agent={target}"], [Path(d) for d in config_dirs])["agent"])
        values.pop("name", None)
        values.pop("tuned", None)  # how a chosen configuration was tuned: not a setting
        entry = values.pop("entry", None)
    try:
        cls = load_agent_class(entry)
    except ConfigError as err:
        raise ConfigError("target", str(err).split(": ", 1)[-1]) from None
    return cls, values, (f"{target} ({entry})" if entry != target else target)


def env_specs(names: Sequence[str], config_dirs: Sequence[str] = ()
              ) -> list[tuple[str, EnvSpec]]:
    dirs = [Path(d) for d in config_dirs]
    allowed = group_options("env", dirs)
    for name in names:
        if name not in allowed:
            raise ConfigError("env", f"unknown option {name!r} (allowed: {', '.join(allowed)})")
    return [(name, parse_env_config(compose([f"env={name}"], dirs)["env"])) for name in names]


def main(argv: Sequence[str]) -> int:
    """``seedsweep check-agent``: 0 if every check passed, 1 if any failed, 2 bad input."""
    return options.guarded(lambda: check(argv))


def check(argv: Sequence[str]) -> int:
    """check-agent itself: raises ConfigError on bad input (``main`` prints it)."""
    opts = parse_options(argv)
    cls, values, label = resolve_target(opts.target, opts.config_dirs)
    if not dataclasses.is_dataclass(getattr(cls, "Config", None)):
        print(f"seedsweep check-agent: {label}")
        print(Result("agent", "config", "FAIL", "Config is not a dataclass (see "
                     "seedsweep/agents/base.py)").line())
        return 1
    config = build_config(cls, {**values, **opts.agent})
    specs = env_specs(opts.envs, opts.config_dirs)
    torch.set_num_threads(1)
    subject = Subject(cls, config, opts.seed)
    print(f"seedsweep check-agent: {label}, seed {opts.seed}, {opts.steps} steps per loop, "
          f"envs {', '.join(opts.envs)}", flush=True)
    cases = [env_case(name, spec, subject.num_envs, subject.vector_mode) for name, spec in specs]
    results = run_checks(subject, cases, opts.steps, lambda r: print(r.line(), flush=True))
    counts = {k: sum(r.status == k for r in results) for k in ("PASS", "WARN", "SKIP", "FAIL")}
    bad_skips = sum(r.status == "SKIP" and not r.clean_skip for r in results)
    ok = all(r.ok for r in results)
    print(f"result: {'OK' if ok else 'FAILED'}: {counts['PASS']} passed, {counts['WARN']} "
          f"warning{'' if counts['WARN'] == 1 else 's'}, {counts['SKIP']} skipped"
          + (f" ({bad_skips} because of a failure)" if bad_skips else "")
          + f", {counts['FAIL']} failed", flush=True)
    return 0 if ok else 1
