"""``seedsweep configs``: the agent, env, suite and plan configs this installation knows."""

from __future__ import annotations

import argparse
from collections.abc import Sequence

from seedsweep.runner.commands import options
from seedsweep.runner.execution.config import group_file, group_options, read_yaml

HELP = "list the agent, env, suite and plan configs"
TITLES = {"agent": "agents (agent=NAME)", "env": "envs (env=NAME)",
          "suite": "suites (-m suite=NAME)", "plan": "plans (--plan NAME)"}


def build_parser() -> argparse.ArgumentParser:
    p = options.parser("configs", "List the agent, env, suite and plan configs, shipped and "
                       "in --config-dir folders.")
    options.add_config_dirs(p)
    return p


def main(argv: Sequence[str]) -> int:
    return options.guarded(lambda: _configs(argv))


def _configs(argv: Sequence[str]) -> int:
    opts = build_parser().parse_args(list(argv))
    for group, title in TITLES.items():
        print(f"{title}:")
        for name in group_options(group, opts.config_dir):
            doc = read_yaml(group_file(group, name, opts.config_dir), group) or {}
            detail = (doc.get("id") or doc.get("entry") or doc.get("description") or ""
                      ) if isinstance(doc, dict) else ""
            print(f"  {name:<24}{detail}")
    return 0
