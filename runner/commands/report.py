"""``seedsweep report``: aggregate a sweep folder into tables, figures and one HTML page.

The report is built in a temporary folder and renamed into place, so a failed or refused
report never leaves a partial one. With ``--candidate NAME`` (or when the old report folder
has a compare.json, which is then recomputed from its recorded request) the report also
carries compare.json and a Comparison section.
"""

from __future__ import annotations

import argparse
import json
from collections.abc import Sequence
from pathlib import Path

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis.compare import compute_comparison
from seedsweep.runner.analysis.report import compute_report
from seedsweep.runner.analysis.scores import SCORE_METHODS
from seedsweep.runner.commands import compare as compare_cmd
from seedsweep.runner.commands import options
from seedsweep.runner.present import report_files, tables
from seedsweep.runner.present.report_files import COMPARE_FILE, ReportComparison

HELP = "aggregate a sweep folder into a report"


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("report", "Aggregate a sweep into a report: IQM, mean, median and "
                       "optimality gap with stratified bootstrap intervals, probability of "
                       "improvement, profiles, curves, one HTML page.")
    p.add_argument("sweep", help="the sweep folder, e.g. results/<sweep>")
    p.add_argument("--agents", help="comma-separated agents to compare (default: all but random)")
    p.add_argument("--include-random", action="store_true",
                   help="also count the random agent as a compared agent")
    options.add_scoring(p, SCORE_METHODS)
    options.add_interval_options(p)
    options.add_verdict_options(p)
    options.add_resampling(p)
    p.add_argument("--interpolate", action="store_true",
                   help="interpolate curves of runs with different evaluation schedules")
    p.add_argument("--candidate", default=None,
                   help="also compare this agent with baselines (see seedsweep compare)")
    p.add_argument("--baseline", action="append", default=None,
                   help="a baseline for --candidate (repeat; default: all but random)")
    p.add_argument("--no-figures", action="store_true", help="skip figures (faster)")
    p.add_argument("--quiet", action="store_true", help="no terminal summary")
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    return options.parse_statistics_options(build_parser(), argv)


def comparison_for_report(opts: argparse.Namespace) -> ReportComparison | None:
    """The comparison a new report carries. With ``--candidate``: computed with the report's
    options (refusals refuse the report). Else, when the report folder has a compare.json:
    recomputed from its recorded request; if that is refused, the old file is kept as it is
    and the page says why it was not refreshed."""
    if opts.candidate:
        doc = options.with_random_scores(
            lambda: compute_comparison(argparse.Namespace(**{**vars(opts), "quiet": True})))
        return ReportComparison(report_files.dumps(doc), doc)
    if opts.baseline:
        raise ConfigError("--baseline", "needs --candidate")
    old = Path(opts.sweep) / "report" / COMPARE_FILE
    if not old.is_file():
        return None
    text, previous = "", None
    try:
        text = old.read_bytes().decode("utf-8", errors="replace")
        previous = json.loads(text)
        copts = compare_cmd.parse_options(compare_cmd.argv_of(previous["request"],
                                                              str(opts.sweep)))
        doc = options.with_random_scores(lambda: compute_comparison(copts))
    except (ConfigError, OSError, ValueError, KeyError, TypeError) as err:
        why = str(err) if isinstance(err, ConfigError) else f"{type(err).__name__}: {err}"
        return ReportComparison(text, previous if isinstance(previous, dict) else None,
                                f"compare.json was kept as it was: recomputing it was "
                                f"refused ({why}); run seedsweep compare again")
    return ReportComparison(report_files.dumps(doc), doc)


def main(argv: Sequence[str]) -> int:
    """``seedsweep report results/<sweep> [options]``; returns the exit status."""
    return options.guarded(lambda: _report(argv))


def _report(argv: Sequence[str]) -> int:
    opts = parse_options(argv)
    data = options.with_random_scores(lambda: compute_report(opts))
    comparison = comparison_for_report(opts)  # refusals come before anything is written
    target = report_files.write_report(data, with_figures=not opts.no_figures,
                                       comparison=comparison)
    if not opts.quiet:
        tables.print_summary(data, target, comparison)
    return 0
