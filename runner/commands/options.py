"""The one layer over argparse every command uses: one-line errors, one error printer.

Every bad option or value becomes :class:`ConfigError`, and :func:`guarded` turns it into
the single line ``seedsweep: error: <field>: <message>`` with exit status 2 — for argparse's
own errors too (``--workers abc``, an unknown option, a missing argument).
"""

from __future__ import annotations

import argparse
import re
import sys
from collections.abc import Callable
from typing import Any, NoReturn

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis.scores import MissingRandomScore
from seedsweep.runner.execution import logs
from seedsweep.runner.launch.random_scores import measure_random

EXIT_BAD_INPUT = 2
INTERVALS = ("bca", "percentile")
EXIT_INTERRUPTED = 130


class OneLineParser(argparse.ArgumentParser):
    """argparse that reports bad options as one ConfigError line instead of usage text."""

    def error(self, message: str) -> NoReturn:  # type: ignore[override]
        m = re.match(r"argument ([^:]+): (.*)", message)
        if m:
            field = m.group(1).split("/")[-1]
            raise ConfigError(field, m.group(2))
        m = re.match(r"the following arguments are required: (.*)", message)
        if m:
            raise ConfigError(m.group(1).split(",")[0].strip(), "missing")
        m = re.match(r"unrecognized arguments: (.*)", message)
        if m:
            raise ConfigError("options", f"unknown option {m.group(1).split()[0]!r} "
                              f"(see {self.prog} --help)")
        raise ConfigError("options", message)


def parser(command: str, description: str, epilog: str | None = None,
           usage: str | None = None) -> OneLineParser:
    """The argument parser of ``seedsweep <command>``."""
    return OneLineParser(prog=f"seedsweep {command}", description=description, epilog=epilog,
                         usage=usage, formatter_class=argparse.RawDescriptionHelpFormatter)


def guarded(body: Callable[[], int | None]) -> int:
    """Run a command's body; its exit status, 2 with one line for bad input, 130 when
    interrupted. argparse's ``--help`` exit (status 0) is returned, not raised."""
    logs.setup()
    try:
        return int(body() or 0)
    except ConfigError as err:
        print(f"seedsweep: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("seedsweep: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except SystemExit as exit_:  # argparse's --help and --version
        return int(exit_.code or 0)


def number_or_text(value: str) -> Any:
    """A ``--slurm KEY=VALUE`` value: an int, a float, or the text itself."""
    for cast in (int, float):
        try:
            return cast(value)
        except ValueError:
            pass
    return value


def add_config_dirs(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config-dir", action="append", default=[], metavar="DIR",
                   help="an extra config folder with agent/, env/, suite/ and plan/ inside "
                        "(repeatable)")


# -- options of the statistics commands (report, compare, plan-seeds) -------------------------
PROGRESS = ("auto", "bar", "lines", "quiet")
LAUNCHERS = ("local", "submitit", "slurm")


def add_progress(p: argparse.ArgumentParser) -> None:
    p.add_argument("--progress", choices=PROGRESS, default="auto",
                   help="auto (a live table on a terminal, lines otherwise), bar, lines, quiet")


def add_launchers(p: argparse.ArgumentParser, wait: str = "stop waiting") -> None:
    """Where runs execute: local processes, or submitit jobs (locally or on SLURM)."""
    add_config_dirs(p)
    p.add_argument("--launcher", choices=LAUNCHERS, default="local",
                   help="local (default), submitit (local submitit jobs), slurm")
    p.add_argument("--slurm", action="append", default=[], metavar="KEY=VALUE",
                   help="a submitit parameter for the slurm launcher (repeatable)")
    p.add_argument("--timeout-min", type=float, default=0.0, metavar="M",
                   help=f"submitit launchers: {wait} after M minutes (0: wait)")


def take_workers(opts: argparse.Namespace) -> None:
    """``workers=N`` among the key=value overrides is ``--workers N``: move it there, checked."""
    rest = []
    for item in opts.overrides:
        if item.startswith("workers="):
            value = item.split("=", 1)[1]
            try:
                opts.workers = int(value)
            except ValueError:
                raise ConfigError("workers", f"expected an integer, got {value!r}") from None
        else:
            rest.append(item)
    opts.overrides = rest
    if opts.workers is not None and opts.workers < 1:
        raise ConfigError("workers", f"must be >= 1 (got {opts.workers})")


def parse_statistics_options(p: argparse.ArgumentParser, argv: Any) -> argparse.Namespace:
    """Parse a statistics command's options and check the ones that depend on each other."""
    opts = p.parse_args(list(argv))
    check_statistics_options(opts)
    check_alpha(opts)
    return opts


def add_resampling(p: argparse.ArgumentParser) -> None:
    p.add_argument("--resamples", type=int, default=2000, help="bootstrap resamples (2000)")
    p.add_argument("--seed", type=int, default=0, help="seed of the resampling (0)")


def add_scoring(p: argparse.ArgumentParser, score_methods: tuple[str, ...]) -> None:
    p.add_argument("--envs", help="comma-separated envs (gymnasium ids or env config names)")
    p.add_argument("--score", default="final", choices=score_methods,
                   help="run score: last evaluation, mean of the last K, or area under curve")
    p.add_argument("--last-k", type=int, default=3, help="K for --score last-k (default 3)")


def add_interval_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--confidence", type=float, default=0.95, help="interval level (0.95)")
    p.add_argument("--allow-few", action="store_true",
                   help="use agent-env cells with a single complete run")
    p.add_argument("--random-episodes", type=int, default=None,
                   help="episodes when the random score must be measured (default: max(100, "
                   "eval.episodes))")


def add_verdict_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--alpha", type=float, default=0.05,
                   help="level of the verdict's test (0.05); the IQM-difference interval "
                   "shown with a verdict has level 1 - alpha")
    p.add_argument("--interval", choices=INTERVALS, default="bca",
                   help="bootstrap interval of the IQM difference: bca (default) or percentile")


def check_alpha(opts: Any) -> None:
    if not 0.0 < opts.alpha < 0.5:
        raise ConfigError("--alpha", f"must be in (0, 0.5) (got {opts.alpha})")


def check_statistics_options(opts: Any) -> None:
    """Range checks of the options report and compare share (one line, exit 2 on error)."""
    if not 0.0 < opts.confidence < 1.0:
        raise ConfigError("--confidence", f"must be in (0, 1) (got {opts.confidence})")
    check_resampling_options(opts)
    if opts.random_episodes is not None and opts.random_episodes < 2:
        raise ConfigError("--random-episodes", f"must be >= 2 (got {opts.random_episodes})")


def check_resampling_options(opts: Any) -> None:
    """Range checks of --resamples, --seed and --last-k (report, compare, plan-seeds)."""
    if opts.resamples < 100:
        raise ConfigError("--resamples", f"must be >= 100 (got {opts.resamples})")
    if opts.seed < 0:
        raise ConfigError("--seed", f"must be >= 0 (got {opts.seed})")
    if opts.last_k < 1:
        raise ConfigError("--last-k", f"must be >= 1 (got {opts.last_k})")


def with_random_scores(compute: Callable[[], Any]) -> Any:
    """``compute()``, first measuring each random score it finds missing (the report side
    reads records only; measuring is a launch, asked for here)."""
    asked: set[str] = set()
    while True:
        try:
            return compute()
        except MissingRandomScore as missing:
            key = str(missing.request.folder)
            if key in asked:  # measured, yet still missing: do not loop
                raise ConfigError("random", f"{missing}; the measured random run in {key} "
                                  "was not usable") from None
            asked.add(key)
            measure_random(missing.request)
