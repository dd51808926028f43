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


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("plan-seeds", "Seeds per agent needed to detect a difference, from "
                       "pilot runs (bootstrap power analysis of Welch's t-test, Colas et al. "
                       "2018).")
    add_pair(p)
    options.add_scoring(p, SCORE_METHODS)
    options.add_resampling(p)
    p.add_argument("--difference", action="append", default=None, metavar="D or ENV=D",
                   help="difference in mean score to detect (candidate - baseline, raw score "
                   "units); ENV=D for one env (default: the observed difference)")
    p.add_argument("--power", type=float, default=0.8, help="target power (0.8)")
    p.add_argument("--alpha", type=float, default=0.05, help="test level (0.05)")
    p.add_argument("--max-seeds", type=int, default=100, help="largest seed count tried (100)")
    p.add_argument("--alternative", default="two-sided", choices=power.ALTERNATIVES,
                   help="two-sided test, or one-sided in the direction of the difference")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    p.add_argument("--quiet", action="store_true", help="no terminal table")
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_parser().parse_args(list(argv))
    options.check_resampling_options(opts)
    if not 0.0 < opts.power < 1.0:
        raise ConfigError("--power", f"must be in (0, 1) (got {opts.power})")
    if not 0.0 < opts.alpha < 1.0:
        raise ConfigError("--alpha", f"must be in (0, 1) (got {opts.alpha})")
    if not 2 <= opts.max_seeds <= power.MAX_SEEDS_LIMIT:
        raise ConfigError("--max-seeds", f"must be in [2, {power.MAX_SEEDS_LIMIT}] "
                          f"(got {opts.max_seeds})")
    return opts


def main(argv: Sequence[str]) -> int:
    """``seedsweep plan-seeds results/<sweep> --candidate A --baseline B [options]``."""
    return options.guarded(lambda: _plan(argv))


def _plan(argv: Sequence[str]) -> int:
    opts = parse_options(argv)
    doc = plan_seeds(opts)
    if opts.json:
        print(json.dumps(doc, indent=2))
    elif not opts.quiet:
        tables.print_plan(doc)
    return 0
