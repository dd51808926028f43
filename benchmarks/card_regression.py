"""Regression check against a baseline card: rerun a few seeds of chosen cells and say, per
agent x env, whether the new scores are consistent with the card.

Run it after any change under ``agents/`` (or ``envs/``)::

    .venv/bin/python benchmarks/card_regression.py benchmarks/cards/card_classic-v1.json \\
        --agents ppo,actor_critic --envs CartPole-v1 --seeds 3

The new runs use seeds the card did not (``--first-seed``, default 100), the card's budget
and evaluation settings, through ``seedsweep run`` (so they resume if interrupted). Per cell
it prints the card's IQM and interval, the new final scores and their IQM, and the verdict's
own test (the stratified permutation test, one env) of new against card seeds: "consistent"
when it does not reject at alpha (default 0.05), else "changed: better/worse". With 3 new
seeds against 10 card seeds the test can reject (smallest two-sided p = 2 / C(13, 3) =
0.007), but only a large change will be seen: say so when you quote it.

Before anything runs, each cell's agent settings as shipped now (``per_env`` applied) are
compared with those the card recorded: a cell whose settings moved on since the card is not
run but listed with the keys that differ ("settings changed"), since its card no longer
describes the shipped agent; check it against the newer card that has it. An option the
card does not record (added to the agent later) counts as unchanged while it is shipped at
its dataclass default, since new options are added so that their default keeps the old
behaviour. Cards written before settings were recorded are run and marked "settings not on
the card".
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
from seedsweep.runner.analysis import scores
from seedsweep.runner.analysis.permutation import stratified_permutation_test
from seedsweep.runner.analysis.runs import load_sweep
from seedsweep.runner.analysis.stats import interquartile_mean
from seedsweep.runner.execution.prepare import load_agent_class
from seedsweep.runner.launch.plan import plan


def _overrides(c: dict, seeds: list[int], sweep: str, results_dir: Path) -> list[str]:
    ev = c["eval"]
    return [f"agent={c['agent']}", f"env={c['env_config']}", f"steps={c['steps']}",
            f"eval.every={ev['every']}", f"eval.episodes={ev['episodes']}",
            f"seed={','.join(map(str, seeds))}", f"sweep={sweep}", f"results_dir={results_dir}"]


def settings_change(c: dict, seeds: list[int], results_dir: Path) -> list[str] | None:
    """Keys whose shipped value differs from the card's, as "key: card -> now"; None when the
    card recorded no settings."""
    recorded = c.get("agent_settings")
    if recorded is None:
        return None
    now = plan(_overrides(c, seeds, "settings-check", results_dir), multirun=True)[0]
    shipped = now.config["agent"]
    defaults = _config_defaults(shipped["entry"])
    return [f"{k}: {recorded.get(k)!r} -> {shipped.get(k)!r}"
            for k in sorted(set(recorded) | set(shipped))
            if recorded.get(k) != shipped.get(k)
            and not (k not in recorded and k in defaults and shipped.get(k) == defaults[k])]


def _config_defaults(entry: str) -> dict:
    """The agent's hyperparameter defaults, from its ``Config`` dataclass."""
    return dataclasses.asdict(load_agent_class(entry).Config())


def run_cells(cells: list[dict], card: str, seeds: list[int], results_dir: Path,
              workers: int) -> Path:
    sweep = f"regression-{card}"
    for c in cells:
        cmd = [sys.executable, "-m", "seedsweep.runner.commands.main", "run", "-m",
               *_overrides(c, seeds, sweep, results_dir), f"workers={workers}",
               "--progress=lines"]
        subprocess.run(cmd, check=False)
    return results_dir / sweep


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("card", type=Path, help="a card JSON written by baseline_card.py")
    p.add_argument("--agents", default=None, help="comma-separated agents (default: all)")
    p.add_argument("--envs", default=None, help="comma-separated gymnasium ids (default: all)")
    p.add_argument("--seeds", type=int, default=3, help="new seeds per cell (3)")
    p.add_argument("--first-seed", type=int, default=100, help="first new seed (100)")
    p.add_argument("--alpha", type=float, default=0.05)
    p.add_argument("--workers", type=int, default=1)
    p.add_argument("--results-dir", type=Path, default=Path("results"))
    args = p.parse_args(argv)
    card = json.loads(args.card.read_text())
    wanted_agents = set(args.agents.split(",")) if args.agents else None
    wanted_envs = set(args.envs.split(",")) if args.envs else None
    cells = [c for c in card["cells"]
             if (wanted_agents is None or c["agent"] in wanted_agents)
             and (wanted_envs is None or c["env"] in wanted_envs)]
    if not cells:
        print("no card cell matches --agents/--envs", file=sys.stderr)
        return 2
    seeds = list(range(args.first_seed, args.first_seed + args.seeds))
    moved = {}
    for c in cells:
        diff = settings_change(c, seeds, args.results_dir)
        if diff:
            moved[(c["agent"], c["env"])] = diff
    runnable = [c for c in cells if (c["agent"], c["env"]) not in moved]
    folder = run_cells(runnable, card["sweep"], seeds, args.results_dir, args.workers)
    runs = load_sweep(folder).runs if runnable else []
    print(f"\n## {card['sweep']}: {args.seeds} new seeds ({seeds[0]}-{seeds[-1]}) per cell\n")
    print("| agent | env | card IQM [95% CI] (seeds) | new finals | new IQM | p | |")
    print("|---|---|---|---|---|---|---|")
    changed = 0
    for c in cells:
        if (c["agent"], c["env"]) in moved:
            print(f"| {c['agent']} | {c['env']} | | (not run) | | | settings changed since the "
                  f"card: {'; '.join(moved[(c['agent'], c['env'])])} |")
            changed += 1
            continue
        new = np.array([scores.score_run(r, "final") for r in runs
                        if r.label == c["agent"] and r.env_id == c["env"]
                        and r.seed in seeds])
        if new.size == 0:
            print(f"| {c['agent']} | {c['env']} | | (no complete new run) | | | missing |")
            changed += 1
            continue
        old = np.array(c["finals"])
        unrecorded = "" if "agent_settings" in c else " (settings not on the card)"
        test = stratified_permutation_test([new], [old], rng=np.random.default_rng(0))
        if test.p_value > args.alpha:
            word = "consistent"
        else:
            word = "changed: " + ("better" if test.statistic > 0.5 else "worse")
            changed += 1
        print(f"| {c['agent']} | {c['env']} | {c['iqm_final']:.4g} [{c['iqm_final_low']:.4g}, "
              f"{c['iqm_final_high']:.4g}] ({old.size}) | "
              f"{', '.join(f'{v:.4g}' for v in new)} | {interquartile_mean(new):.4g} | "
              f"{test.p_value:.3g} | {word}{unrecorded} |")
    print(f"\n{changed} of {len(cells)} cell(s) changed at alpha {args.alpha}.")
    return 1 if changed else 0


if __name__ == "__main__":
    sys.exit(main())
