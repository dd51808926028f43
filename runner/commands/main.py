"""The ``seedsweep`` command: ``seedsweep <command> [options]``, one module per command.

Each command module has ``HELP`` (one line), ``build_parser()`` and ``main(argv) -> exit
status``; they all parse with :mod:`.options`, so every bad option or value is one line
``seedsweep: error: <field>: <message>`` and exit status 2.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from types import ModuleType

from seedsweep.configs.checks import ConfigError, suggest
from seedsweep.runner.commands import (
    check_agent,
    compare,
    configs,
    options,
    plan_seeds,
    report,
    run,
    status,
    tune,
)

COMMANDS: dict[str, ModuleType] = {
    "run": run, "configs": configs, "status": status, "report": report, "compare": compare,
    "plan-seeds": plan_seeds, "check-agent": check_agent, "tune": tune,
}


def package_version() -> str:
    try:
        return version("seedsweep")
    except PackageNotFoundError:
        return "unknown (not installed)"


def usage() -> str:
    lines = ["usage: seedsweep <command> [options]", "       seedsweep --version", "",
             "commands:"]
    lines += [f"  {name:<13}{module.HELP}" for name, module in COMMANDS.items()]
    lines += ["", "`seedsweep <command> --help` for the options of a command."]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if "" not in sys.path and str(Path.cwd()) not in sys.path:
        sys.path.append(str(Path.cwd()))  # agent.entry / env.id modules of the user's project
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(usage())
        return 0 if argv else options.EXIT_BAD_INPUT
    if argv[0] == "--version":
        print(f"seedsweep {package_version()}")
        return 0
    name = argv[0]
    if name not in COMMANDS:
        return options.guarded(lambda: _unknown(name))
    return COMMANDS[name].main(argv[1:])


def _unknown(name: str) -> int:
    raise ConfigError("command", f"unknown command {name!r} (allowed: {', '.join(COMMANDS)})"
                      + suggest(name, COMMANDS))


if __name__ == "__main__":
    sys.exit(main())
