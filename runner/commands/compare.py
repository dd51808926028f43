"""``seedsweep compare``: a candidate against baselines, with a verdict each; writes
``results/<sweep>/report/compare.json`` (and refreshes the page's Comparison section)."""

from __future__ import annotations

import argparse
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from seedsweep.runner.analysis.compare import compute_comparison
from seedsweep.runner.analysis.scores import SCORE_METHODS
from seedsweep.runner.commands import options
from seedsweep.runner.present import report_files, tables

HELP = "is a candidate agent better than the baselines?"


def add_pair(p: argparse.ArgumentParser) -> None:
    """The sweep, the candidate and its baselines (compare and plan-seeds)."""
    p.add_argument("sweep", help="the sweep folder, e.g. results/<sweep>")
    p.add_argument("--candidate", required=True, help="the agent under test")
    p.add_argument("--baseline", action="append", default=None,
                   help="a baseline agent (repeat, or comma-separate; default: all but random)")


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("compare", "Compare a candidate agent with baselines, with a verdict "
                       "each.")
    add_pair(p)
    options.add_scoring(p, SCORE_METHODS)
    options.add_interval_options(p)
    options.add_verdict_options(p)
    options.add_resampling(p)
    p.add_argument("--quiet", action="store_true", help="no terminal table")
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    return options.parse_statistics_options(build_parser(), argv)


def argv_of(request: dict[str, Any], sweep: str) -> list[str]:
    """The command line that recomputes a comparison from its recorded request."""
    argv = [sweep, "--candidate", str(request["candidate"])]
    for b in request.get("baseline") or []:
        argv += ["--baseline", str(b)]
    if request.get("envs"):
        argv += ["--envs", str(request["envs"])]
    for key in ("score", "last_k", "confidence", "resamples", "seed", "random_episodes",
                "alpha", "interval"):
        if request.get(key) is not None:
            argv += ["--" + key.replace("_", "-"), str(request[key])]
    if request.get("allow_few"):
        argv.append("--allow-few")
    return argv


def main(argv: Sequence[str]) -> int:
    """``seedsweep compare results/<sweep> --candidate NAME [options]``; the exit status."""
    return options.guarded(lambda: _compare(argv))


def _compare(argv: Sequence[str]) -> int:
    opts = parse_options(argv)
    report_files.check_output_folder(Path(opts.sweep))
    doc = options.with_random_scores(lambda: compute_comparison(opts))
    target = report_files.write_comparison(doc, Path(opts.sweep))
    if not opts.quiet:
        tables.print_comparison(doc, target)
    return 0
