"""The ``seedsweep`` command: subcommands dispatch to ``<name>_main(argv) -> exit status``.

Exit status: 0 success, 1 a run failed, 2 bad input (one line on stderr, nothing written).
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence
from pathlib import Path

from seedsweep.agents.base import ConfigError

COMMANDS = {
    "run": ("seedsweep.runner.commands.cli", "run_main", "train and evaluate one run, or a sweep with -m"),
    "configs": ("seedsweep.runner.commands.cli", "configs_main", "list the agent and env configs"),
    "status": ("seedsweep.runner.launch.status", "status_main", "what a sweep folder holds: done, running, ..."),
    "report": ("seedsweep.runner.analysis.report", "report_main", "aggregate a sweep folder into a report"),
    "compare": ("seedsweep.runner.analysis.compare", "compare_main", "is a candidate agent better than baselines?"),
    "plan-seeds": ("seedsweep.runner.analysis.compare", "plan_seeds_main", "how many seeds a comparison needs"),
    "check-agent": ("seedsweep.runner.agent_check.check_agent", "check_agent_main",
                    "check an agent against the contract"),
}


def error(message: str) -> int:
    print(f"seedsweep: error: {message}", file=sys.stderr)
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if "" not in sys.path and str(Path.cwd()) not in sys.path:
        sys.path.append(str(Path.cwd()))  # agent.entry / env.id modules of the user's project
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
    from seedsweep.envs.wrappers import WRAPPERS
    from seedsweep.runner.execution.config import group_options

    agents = ", ".join(group_options("agent"))
    envs = ", ".join(group_options("env"))
    suites = ", ".join(group_options("suite"))
    wrappers = "\n".join(f"    {n:<15}{w.doc}" for n, w in WRAPPERS.items())
    return f"""usage: seedsweep run [-m] [workers=N] [options] [key=value ...]

Train and evaluate one run (or, with -m, every combination of the values given, e.g.
seed=0,1,2 agent=dqn,random). Overrides use hydra's grammar.

config groups:
  agent=   {agents}
  env=     {envs}
  suite=   {suites}  (a set of envs with budgets; needs -m)

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

sweep options:
  -m, --multirun       run every combination of the values given
  workers=N            parallel run processes (default: physical cores)
  --sweep-file NAME    a plan from configs/sweep/NAME.yaml (or a path)
  --retry-failed       rerun failed runs (complete runs are always skipped)
  --allow-mixed-code   add runs to a folder made by another code version
  --no-estimate        skip the wall-time estimate before launching
  --progress MODE      auto | bar | lines | quiet
  --config-dir DIR     extra config folder (agent/, env/, sweep/ inside)
  --launcher NAME      local (default) | submitit (local jobs) | slurm
  --slurm KEY=VALUE    a submitit slurm parameter, e.g. --slurm partition=cpu
  --timeout-min M      submitit launchers: stop waiting after M minutes

env wrappers (env.wrappers list, in order):
{wrappers}

examples:
  seedsweep run agent=dqn env=cartpole seed=0 steps=50000
  seedsweep run -m agent=dqn,random env=cartpole,acrobot seed=0,1,2 sweep=night1"""


def run_main(argv: Sequence[str]) -> int:
    if any(a in ("-h", "--help") for a in argv):
        print(run_help())
        return 0
    from seedsweep.runner.launch.sweep import SweepOptions, plan, run_sweep

    parser = argparse.ArgumentParser(prog="seedsweep run", add_help=False)
    parser.add_argument("-m", "--multirun", action="store_true")
    parser.add_argument("--progress", choices=("auto", "bar", "lines", "quiet"), default="auto")
    parser.add_argument("--workers", type=int, default=None)
    parser.add_argument("--retry-failed", action="store_true")
    parser.add_argument("--allow-mixed-code", action="store_true")
    parser.add_argument("--no-estimate", action="store_true")
    parser.add_argument("--sweep-file", default=None)
    parser.add_argument("--config-dir", action="append", default=[])
    parser.add_argument("--launcher", choices=("local", "submitit", "slurm"), default="local")
    parser.add_argument("--slurm", action="append", default=[], metavar="KEY=VALUE")
    parser.add_argument("--timeout-min", type=float, default=0.0)
    opts, rest = parser.parse_known_args(list(argv))
    bad = [a for a in rest if a.startswith("-")]
    if bad:
        raise ConfigError("options", f"unknown option {bad[0]!r} (see seedsweep run --help)")
    overrides = [a for a in rest if not a.startswith("workers=")]
    workers = opts.workers
    for a in rest:
        if a.startswith("workers="):
            try:
                workers = int(a.split("=", 1)[1])
            except ValueError:
                value = a.split("=", 1)[1]
                raise ConfigError("workers", f"expected an integer, got {value!r}") from None
    if workers is not None and workers < 1:
        raise ConfigError("workers", f"must be >= 1 (got {workers})")
    slurm = {}
    for item in opts.slurm:
        key, sep, value = item.partition("=")
        if not sep or not key:
            raise ConfigError("--slurm", f"expected KEY=VALUE, got {item!r}")
        slurm[key] = _number_or_text(value)
    if opts.sweep_file:
        from seedsweep.runner.launch.plan_files import expand_file, find

        groups = expand_file(find(opts.sweep_file, opts.config_dir), overrides)
        planned = [p for g in groups for p in plan(g, multirun=True, extra_dirs=opts.config_dir)]
        from seedsweep.runner.launch.sweep import interleave

        planned = interleave(planned)
        multirun = True
    else:
        planned = plan(overrides, multirun=opts.multirun, extra_dirs=opts.config_dir)
        multirun = opts.multirun
    sweep_opts = SweepOptions(
        workers=workers or 0, retry_failed=opts.retry_failed,
        allow_mixed_code=opts.allow_mixed_code, progress=opts.progress,
        estimate=not opts.no_estimate, launcher=opts.launcher, slurm=slurm,
        timeout_min=opts.timeout_min,
    )
    if not multirun and opts.launcher == "local":
        return _run_single(planned[0], sweep_opts)
    return run_sweep(planned, overrides, sweep_opts)


def _number_or_text(value: str):
    for cast in (int, float):
        try:
            return cast(value)
        except ValueError:
            pass
    return value


def _run_single(p, opts) -> int:
    """One run in this process, with its own progress display; same skip/resume rules."""
    from seedsweep.runner.execution.run import RunBusy, execute, interrupt_on_sigterm
    from seedsweep.runner.launch.sweep import check_code_version

    interrupt_on_sigterm()
    check_code_version(p.run_dir.parent, opts.allow_mixed_code)
    try:
        doc = execute(p, progress=opts.progress, retry_failed=opts.retry_failed)
    except RunBusy as err:
        print(f"seedsweep: {err}; not started", file=sys.stderr)
        return 1
    except Exception as err:  # recorded in the run folder
        print(f"seedsweep: run {p.run_id} failed: {type(err).__name__}: {err} "
              f"(see {p.run_dir / 'error.log'})", file=sys.stderr)
        return 1
    if doc.get("skipped"):
        print(f"seedsweep: {p.run_id} is already {doc['status']}"
              + ("; --retry-failed reruns it" if doc["status"] == "failed" else ""),
              file=sys.stderr)
    print(f"seedsweep: {p.run_id}: {doc['status']}, final score {doc.get('final_score')}; "
          f"results in {p.run_dir}")
    return 0 if doc["status"] == "complete" else 1


# -- configs -----------------------------------------------------------------------------
def configs_main(argv: Sequence[str]) -> int:
    import yaml

    from seedsweep.runner.execution.config import config_dir, group_options

    parser = argparse.ArgumentParser(prog="seedsweep configs",
                                     description="list the agent, env, suite and sweep configs")
    parser.add_argument("--config-dir", action="append", default=[],
                        help="extra config folder (agent/, env/, suite/, sweep/ inside)")
    opts = parser.parse_args(list(argv))
    roots = [config_dir(), *map(Path, opts.config_dir)]
    for group in ("agent", "env", "suite", "sweep"):
        print(f"{group}:" if group != "sweep" else "sweep files (--sweep-file):")
        for name in group_options(group, opts.config_dir):
            path = next(r / group / f"{name}.yaml" for r in roots
                        if (r / group / f"{name}.yaml").is_file())
            doc = yaml.safe_load(path.read_text()) or {}
            detail = doc.get("id") or doc.get("entry") or doc.get("description") or ""
            print(f"  {name:<24}{detail}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
