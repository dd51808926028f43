"""``seedsweep plan-seeds``: how many seeds per agent a comparison needs, from pilot runs.
It prints only; nothing is written."""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis import power
from seedsweep.runner.analysis.compare import plan_seeds
from seedsweep.runner.analysis.scores import SCORE_METHODS
from seedsweep.runner.commands import options
from seedsweep.runner.commands.compare import add_pair
from seedsweep.runner.present import tables

HELP = "how many seeds a comparison needs"
UNITS = ("raw", "normalised")


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("plan-seeds", "Seeds per agent per env the verdict's own test (the "
                       "stratified permutation test) needs to detect the smallest difference "
                       "that matters to you, with the target power, estimated by simulation "
                       "from pilot runs.")
    add_pair(p)
    options.add_scoring(p, SCORE_METHODS)
    p.add_argument("--difference", action="append", default=None, metavar="D or ENV=D",
                   help="required: the smallest difference (candidate - baseline) that "
                   "matters, in raw score units (or normalised, see --units); ENV=D per env")
    p.add_argument("--units", choices=UNITS, default="raw",
                   help="units of --difference: raw scores, or normalised (0 = random, "
                   "1 = reference)")
    p.add_argument("--power", type=float, default=0.8, help="target power (0.8)")
    p.add_argument("--alpha", type=float, default=0.05,
                   help="the verdict's level (0.05); with several baselines the plan uses "
                   "alpha / their number")
    p.add_argument("--max-seeds", type=int, default=100, help="largest seed count tried (100)")
    p.add_argument("--resamples", type=int, default=2000,
                   help="simulated comparisons per seed count (2000)")
    p.add_argument("--seed", type=int, default=0, help="seed of the simulation (0)")
    p.add_argument("--random-episodes", type=int, default=None,
                   help="episodes when a random score must be measured (--units normalised)")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--quiet", action="store_true", help="no terminal table")
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_parser().parse_args(list(argv))
    options.check_resampling_options(opts)
    opts.confidence = 0.95  # of the random score, when --units normalised measures it
    if not 0.0 < opts.power < 1.0:
        raise ConfigError("--power", f"must be in (0, 1) (got {opts.power})")
    options.check_alpha(opts)
    if not 2 <= opts.max_seeds <= power.MAX_SEEDS_LIMIT:
        raise ConfigError("--max-seeds", f"must be in [2, {power.MAX_SEEDS_LIMIT}] "
                          f"(got {opts.max_seeds})")
    return opts


def main(argv: Sequence[str]) -> int:
    """``seedsweep plan-seeds results/<sweep> --candidate A --baseline B [options]``."""
    return options.guarded(lambda: _plan(argv))


def _plan(argv: Sequence[str]) -> int:
    opts = parse_options(argv)
    doc = options.with_random_scores(lambda: plan_seeds(opts))
    if opts.json:
        print(json.dumps(doc, indent=2))
    elif not opts.quiet:
        tables.print_plan(doc)
    return 0
