"""The ``seedsweep`` command: subcommands dispatch to ``<name>_main(argv) -> exit status``.

Exit status: 0 success, 1 a run failed, 2 bad input (one line on stderr, nothing written).
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from agents.base import ConfigError

COMMANDS = {
    "run": ("runner.cli", "run_main", "train and evaluate one run, or a sweep with -m"),
    "configs": ("runner.cli", "configs_main", "list the agent and env configs"),
    "report": ("runner.report", "report_main", "aggregate a sweep folder into a report"),
}


def error(message: str) -> int:
    print(f"seedsweep: error: {message}", file=sys.stderr)
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(_usage())
        return 0 if argv else 2
    name, rest = argv[0], argv[1:]
    if name not in COMMANDS:
        return error(f"command: unknown command {name!r} (allowed: {', '.join(COMMANDS)})")
    module, func, _ = COMMANDS[name]
    handler = getattr(importlib.import_module(module), func)
    try:
        return int(handler(rest) or 0)
    except ConfigError as err:
        return error(str(err))
    except KeyboardInterrupt:
        print("seedsweep: interrupted", file=sys.stderr)
        return 130


def _usage() -> str:
    lines = ["usage: seedsweep <command> [options]", "", "commands:"]
    for name, (_, _, doc) in COMMANDS.items():
        lines.append(f"  {name:<12}{doc}")
    lines.append("")
    lines.append("`seedsweep <command> --help` for the options of a command.")
    return "\n".join(lines)


# -- run ---------------------------------------------------------------------------------
def run_help() -> str:
    from envs.wrappers import WRAPPERS
    from runner.config import group_options

    agents = ", ".join(group_options("agent"))
    envs = ", ".join(group_options("env"))
    wrappers = "\n".join(f"    {n:<15}{w.doc}" for n, w in WRAPPERS.items())
    return f"""usage: seedsweep run [-m] [--progress auto|bar|lines|quiet] [key=value ...]

Train and evaluate one run (or, with -m, every combination of the values given, e.g.
seed=0,1,2 agent=dqn,random). Overrides use hydra's grammar.

config groups:
  agent=   {agents}
  env=     {envs}

top-level keys (defaults in configs/config.yaml):
  seed              run seed (int); every other seed is derived from it and recorded
  steps             training budget in env steps
  eval.every        env steps between evaluations (plus one at the end)
  eval.episodes     episodes per evaluation
  eval.deterministic  greedy/mean actions in evaluation (default true)
  sweep             results folder under results_dir
  results_dir       output root (default: results)
  torch_threads     torch threads per run (default 1)
  checkpoint.every  env steps between checkpoints (0: final only)
  log.every         env steps between logged training scalars
  agent.<name>      an agent hyperparameter (see configs/agent/<agent>.yaml)
  env.<name>        id, kwargs, max_episode_steps, reference, wrappers

env wrappers (env.wrappers list, in order):
{wrappers}

examples:
  seedsweep run agent=dqn env=cartpole seed=0 steps=50000
  seedsweep run -m agent=dqn,random env=cartpole,acrobot seed=0,1,2 sweep=night1"""


def run_main(argv: Sequence[str]) -> int:
    if any(a in ("-h", "--help") for a in argv):
        print(run_help())
        return 0
    parser = argparse.ArgumentParser(prog="seedsweep run", add_help=False)
    parser.add_argument("-m", "--multirun", action="store_true")
    parser.add_argument("--progress", choices=("auto", "bar", "lines", "quiet"), default="auto")
    opts, overrides = parser.parse_known_args(list(argv))
    bad = [a for a in overrides if a.startswith("-")]
    if bad:
        raise ConfigError("options", f"unknown option {bad[0]!r} (allowed: -m, --progress, --help)")
    from runner.sweep import plan, run_planned

    planned = plan(overrides, multirun=opts.multirun)
    return run_planned(planned, progress=opts.progress)


# -- configs -----------------------------------------------------------------------------
def configs_main(argv: Sequence[str]) -> int:
    import yaml

    from runner.config import config_dir, group_options

    root = config_dir()
    for group in ("agent", "env"):
        print(f"{group}:")
        for name in group_options(group):
            doc = yaml.safe_load((root / group / f"{name}.yaml").read_text()) or {}
            detail = doc.get("id") or doc.get("entry") or ""
            print(f"  {name:<24}{detail}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
