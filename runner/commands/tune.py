"""``seedsweep tune``: search the hyperparameters of every named agent with the same budget,
on seeds reserved for tuning; then print the command that evaluates the chosen
configurations on fresh seeds."""

from __future__ import annotations

import argparse
from collections.abc import Sequence
from pathlib import Path

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.commands import options
from seedsweep.runner.execution.config import (
    SAFE_NAME,
    TUNING_SEED_BASE,
    group_options,
    parse_overrides,
)
from seedsweep.runner.execution.run import interrupt_on_sigterm
from seedsweep.runner.launch import tune
from seedsweep.runner.launch.sweep import SweepOptions
from seedsweep.runner.present import tables

HELP = "tune every agent with the same budget, on seeds kept apart from evaluation"
# Overrides that would break the equal budget or the seed split are set by the options.
CONTROLLED = {"agent": "--agents and each agent's YAML", "env": "--envs", "seed": "--seeds",
              "steps": "--steps", "sweep": "--study", "tuning": "tune itself",
              "suite": "--envs", "hydra": "tune itself"}


def build_parser() -> argparse.ArgumentParser:
    epilog = f"""Each trial of an agent is one run per env and tuning seed ({TUNING_SEED_BASE},
{TUNING_SEED_BASE + 1}, ...), all with --steps env steps; its objective is the IQM of their
normalised final scores. Every agent gets --trials trials; round k runs trial k of every
agent. The search space of an agent is the search: section of its YAML, e.g.
  search:
    lr: {{low: 1.0e-4, high: 1.0e-2, log: true}}
    hidden: {{choices: [[64, 64], [128, 128]]}}
The same command continues an interrupted study; complete trials are never run again.

config groups:
  agents:  {', '.join(group_options('agent'))}
  envs:    {', '.join(group_options('env'))}

example:
  seedsweep tune --config-dir examples/configs --agents tile_sarsa,dqn \\
      --envs cartpole,acrobot --trials 12 --steps 20000 --seeds 2 --study fair1"""
    p = options.parser("tune", "Tune the hyperparameters of the candidate and of every "
                       "baseline with the same budget (optuna TPE, seeded), on tuning seeds; "
                       "write each agent's chosen configuration.", epilog)
    p.add_argument("overrides", nargs="*", metavar="key=value",
                   help="settings for every trial run: eval.every, eval.episodes, "
                        "eval.deterministic, checkpoint.every, log.every, torch_threads, "
                        "results_dir, env.* (workers=N is the same as --workers N)")
    p.add_argument("--agents", required=True, metavar="A,B,...",
                   help="the candidate and each baseline (agent config names)")
    p.add_argument("--envs", required=True, metavar="E,F,...", help="env config names")
    p.add_argument("--trials", type=int, required=True, help="trials per agent")
    p.add_argument("--steps", type=int, required=True, help="env steps of every trial run")
    p.add_argument("--seeds", type=int, default=2, help="tuning seeds per env per trial (2)")
    p.add_argument("--study", required=True,
                   help="study name: the folder results_dir/NAME (letters, digits, _-.)")
    p.add_argument("--sampler-seed", type=int, default=0, help="seed of the TPE sampler (0)")
    p.add_argument("--workers", type=int, default=None,
                   help="parallel run processes (default: physical cores)")
    options.add_progress(p)
    p.add_argument("--allow-mixed-code", action="store_true",
                   help="continue a study whose runs were made by another code version")
    options.add_launchers(p, "stop waiting for a round")
    return p


def _names(text: str, field: str) -> list[str]:
    names = [n.strip() for n in text.split(",")]
    if not all(names):
        raise ConfigError(field, f"expected comma-separated names, got {text!r}")
    return names


def parse_request(argv: Sequence[str]) -> tuple[tune.TuneRequest, int]:
    """The checked request (ConfigError on bad input) and the workers' count."""
    opts = build_parser().parse_intermixed_args(list(argv))
    options.take_workers(opts)
    overrides, results_dir = list(opts.overrides), "results"
    for o in parse_overrides(overrides):
        key = o.get_key_element().lstrip("+~")
        top = key.split(".")[0]
        if key in CONTROLLED or (top in CONTROLLED and top != "env"):  # env.* applies to all
            raise ConfigError(key, f"set by {CONTROLLED[top]}, not by an override "
                              "(every agent gets the same budget and settings come from its "
                              "YAML)")
        if o.is_sweep_override():
            raise ConfigError(key, "one value per key: tune searches the agents' search: "
                              "sections, not override sweeps")
        if key == "results_dir":
            results_dir = o.get_value_element_as_str()
    overrides = [o for o in overrides if o.split("=", 1)[0] != "results_dir"]
    for flag, value, least in (("--trials", opts.trials, 1), ("--steps", opts.steps, 1),
                               ("--seeds", opts.seeds, 1), ("--sampler-seed",
                                                            opts.sampler_seed, 0)):
        if value < least:
            raise ConfigError(flag, f"must be >= {least} (got {value})")
    if opts.timeout_min < 0:
        raise ConfigError("--timeout-min", f"must be >= 0 (got {opts.timeout_min})")
    if not SAFE_NAME.match(opts.study):
        raise ConfigError("--study", f"must be a folder name of letters, digits, '_', '-', "
                          f"'.' (got {opts.study!r})")
    slurm = {}
    for item in opts.slurm:
        key, sep, value = item.partition("=")
        if not sep or not key:
            raise ConfigError("--slurm", f"expected KEY=VALUE, got {item!r}")
        slurm[key] = options.number_or_text(value)
    sweep = SweepOptions(workers=opts.workers or 0, allow_mixed_code=opts.allow_mixed_code,
                         progress=opts.progress, estimate=False, launcher=opts.launcher,
                         slurm=slurm, timeout_min=opts.timeout_min)
    req = tune.TuneRequest(
        agents=_names(opts.agents, "--agents"), envs=_names(opts.envs, "--envs"),
        trials=opts.trials, steps=opts.steps, seeds=opts.seeds, study=opts.study,
        sampler_seed=opts.sampler_seed, overrides=overrides,
        config_dirs=[Path(d) for d in opts.config_dir], results_dir=Path(results_dir),
        sweep=sweep)
    return req, opts.workers or 0


def main(argv: Sequence[str]) -> int:
    """``seedsweep tune --agents A,B --envs E,F --trials N --steps S --study NAME``."""
    return options.guarded(lambda: _tune(argv))


def _tune(argv: Sequence[str]) -> int:
    req, _ = parse_request(argv)
    agents = tune.check_request(req)  # every refusal before anything is written
    interrupt_on_sigterm()
    tuner = tune.Tuner(req, agents)
    status = tuner.run()
    doc = tune.read_study(req.folder)
    if doc is not None and doc.get("summary"):
        chosen = {a.name: req.folder / tune.CHOSEN_DIR / "agent" / f"{a.name}.yaml"
                  for a in agents}
        tables.print_tuning(doc, [a.name for a in agents],
                            {k: v for k, v in chosen.items() if v.is_file()})
        if tuner.finished and any(p.is_file() for p in chosen.values()):
            print("next, evaluate the chosen configurations on fresh seeds:")
            print("  " + tune.next_command(req))
    return status
