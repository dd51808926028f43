"""``seedsweep run``: one run in this process, or with ``-m`` a sweep on local workers or a
cluster; also a plan file (``--plan``) or a suite (``-m suite=NAME``)."""

from __future__ import annotations

import argparse
import logging
from collections.abc import Sequence

from seedsweep.configs.checks import ConfigError
from seedsweep.envs.wrappers import WRAPPERS
from seedsweep.runner.commands import options
from seedsweep.runner.execution.config import group_options
from seedsweep.runner.execution.prepare import PreparedRun
from seedsweep.runner.execution.run import RunBusy, execute, interrupt_on_sigterm
from seedsweep.runner.launch import estimate
from seedsweep.runner.launch.display import RunProgress
from seedsweep.runner.launch.plan import check_plan, plan
from seedsweep.runner.launch.plan_files import expand_plan, find
from seedsweep.runner.launch.sweep import SweepOptions, check_code_version, run_sweep
from seedsweep.runner.launch.workers import context

logger = logging.getLogger(__name__)

HELP = "train and evaluate one run, or a sweep with -m"


def build_parser() -> argparse.ArgumentParser:
    wrappers = "\n".join(f"  {n:<15}{w.doc}" for n, w in WRAPPERS.items())
    epilog = f"""config groups:
  agent=   {', '.join(group_options('agent'))}
  env=     {', '.join(group_options('env'))}
  suite=   {', '.join(group_options('suite'))}  (a set of envs with budgets; needs -m)

top-level keys (defaults in configs/defaults/config.yaml):
  seed              run seed (int); every other seed is derived from it and recorded
  tuning            true only for the trial runs of seedsweep tune (seeds >= 1000000)
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
  seedsweep run -m agent=dqn,random env=cartpole,acrobot 'seed=range(3)' sweep=night1
  seedsweep run --plan demo"""
    p = options.parser("run", "Train and evaluate one run (or, with -m, every combination of "
                       "the values given, e.g. seed=0,1,2 agent=dqn,random). Overrides use "
                       "hydra's grammar: key=value.", epilog)
    p.add_argument("overrides", nargs="*", metavar="key=value",
                   help="config overrides (workers=N is the same as --workers N)")
    p.add_argument("-m", "--multirun", action="store_true",
                   help="run every combination of the values given")
    p.add_argument("--workers", type=int, default=None,
                   help="parallel run processes (default: physical cores)")
    p.add_argument("--plan", default=None, metavar="NAME",
                   help="a plan file: configs/plan/NAME.yaml, a --config-dir, or a path")
    p.add_argument("--retry-failed", action="store_true",
                   help="rerun failed runs (complete runs are always skipped)")
    p.add_argument("--allow-mixed-code", action="store_true",
                   help="add runs to a folder made by another code version")
    p.add_argument("--no-estimate", action="store_true",
                   help="skip the wall-time estimate before launching")
    options.add_progress(p)
    options.add_launchers(p)
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_parser().parse_intermixed_args(list(argv))
    options.take_workers(opts)
    if opts.timeout_min < 0:
        raise ConfigError("--timeout-min", f"must be >= 0 (got {opts.timeout_min})")
    opts.slurm_params = {}
    for item in opts.slurm:
        key, sep, value = item.partition("=")
        if not sep or not key:
            raise ConfigError("--slurm", f"expected KEY=VALUE, got {item!r}")
        opts.slurm_params[key] = options.number_or_text(value)
    return opts


def main(argv: Sequence[str]) -> int:
    """``seedsweep run [-m] [options] [key=value ...]``; the exit status."""
    return options.guarded(lambda: _run(argv))


def _run(argv: Sequence[str]) -> int:
    opts = parse_options(argv)
    if (opts.plan or opts.multirun) and opts.launcher == "local":
        context()  # the run processes' server imports while the sweep is planned
    if opts.plan:
        groups = expand_plan(find(opts.plan, opts.config_dir), opts.overrides)
        planned = check_plan([p for g in groups
                              for p in plan(g, multirun=True, extra_dirs=opts.config_dir)])
        multirun = True
    else:
        planned = plan(opts.overrides, multirun=opts.multirun, extra_dirs=opts.config_dir)
        multirun = opts.multirun
    sweep_opts = SweepOptions(
        workers=opts.workers or 0, retry_failed=opts.retry_failed,
        allow_mixed_code=opts.allow_mixed_code, progress=opts.progress,
        estimate=not opts.no_estimate, launcher=opts.launcher, slurm=opts.slurm_params,
        timeout_min=opts.timeout_min,
    )
    if not multirun and opts.launcher == "local":
        return run_single(planned[0], sweep_opts)
    interrupt_on_sigterm()  # a SIGTERM to the sweep stops its runs resumably, as Ctrl-C does
    return run_sweep(planned, opts.overrides, sweep_opts)


def run_single(p: PreparedRun, opts: SweepOptions) -> int:
    """One run in this process, with its own progress display; same skip/resume rules."""
    interrupt_on_sigterm()
    check_code_version(p.run_dir.parent, opts.allow_mixed_code, p.agent_code)
    try:
        doc = execute(p, RunProgress(p.label, int(p.config["steps"]), mode=opts.progress),
                      retry_failed=opts.retry_failed)
    except RunBusy as err:
        logger.info("%s; not started", err)
        return 1
    except Exception as err:  # recorded in the run folder
        logger.info("run %s failed: %s: %s (see %s)", p.run_id, type(err).__name__, err,
                    p.run_dir / "error.log")
        return 1
    estimate.remember_run(p, doc)
    if doc.get("skipped"):
        logger.info("%s is already %s%s", p.run_id, doc["status"],
                    "; --retry-failed reruns it" if doc["status"] == "failed" else "")
    print(f"seedsweep: {p.run_id}: {doc['status']}, final score {doc.get('final_score')}; "
          f"results in {p.run_dir}")
    return 0 if doc["status"] == "complete" else 1
