"""How long the report takes on a large synthetic sweep (invented returns, real env configs).

    .venv/bin/python benchmarks/report_speed.py [--seeds 250] [--keep DIR]

Writes 4 agents x 10 envs x SEEDS runs (plus SEEDS random runs per env) in the run-record
format, then times `report` (loading, statistics, figures, HTML) and prints the numbers.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

ENVS = [  # (config name, gymnasium id, kwargs, max_episode_steps, reference, return scale)
    ("cartpole", "CartPole-v1", {}, None, None, 500.0),
    ("acrobot", "Acrobot-v1", {}, None, None, -500.0),
    ("mountaincar", "MountainCar-v0", {}, None, None, -200.0),
    ("frozenlake", "FrozenLake-v1", {"map_name": "4x4", "is_slippery": True}, None, None, 1.0),
    ("frozenlake8", "FrozenLake-v1", {"map_name": "8x8", "is_slippery": True}, 200, None, 1.0),
    ("cliffwalking", "CliffWalking-v1", {}, 200, None, -200.0),
    ("taxi", "Taxi-v4", {}, None, None, -200.0),
    ("pendulum", "Pendulum-v1", {}, None, -150.0, -1200.0),
    ("mountaincar_cont", "MountainCarContinuous-v0", {}, None, None, 100.0),
    ("cartpole_short", "CartPole-v0", {}, None, None, 200.0),
]
AGENTS = {"a1": 0.2, "a2": 0.4, "a3": 0.6, "a4": 0.8, "random": 0.0}


def write_sweep(root: Path, seeds: int, episodes: int = 10, every: int = 1000,
                steps: int = 10000) -> Path:
    sweep = root / "results" / "speed"
    rng = np.random.default_rng(0)
    n_evals = steps // every
    eval_steps = np.arange(1, n_evals + 1) * every
    header = "env_step,episode,return,discounted_return,length,episode_seed\n"
    for name, env_id, kwargs, mes, ref, scale in ENVS:
        env_cfg = {"name": name, "id": env_id, "kwargs": kwargs, "max_episode_steps": mes,
                   "reference": ref, "wrappers": []}
        for agent, level in AGENTS.items():
            for seed in range(seeds):
                rid = f"{agent}-{name}-s{seed}-0123456789"
                folder = sweep / rid
                folder.mkdir(parents=True)
                cfg = {"agent": {"name": agent, "entry": "x:y", "gamma": 0.99}, "env": env_cfg,
                       "seed": seed, "steps": steps,
                       "eval": {"every": every, "episodes": episodes, "deterministic": True}}
                (folder / "config.yaml").write_text(yaml.safe_dump(cfg))
                frac = eval_steps / steps
                returns = (level * frac)[:, None] * abs(scale) + rng.normal(
                    0, 0.05 * abs(scale), (n_evals, episodes))
                if scale < 0:
                    returns = returns + scale
                returns = np.round(returns, 3)
                rows = [f"{s},{i},{r!r},{r!r},10,{i}" for s, row in zip(eval_steps, returns,
                        strict=True) for i, r in enumerate(row.tolist())]
                (folder / "eval.csv").write_text(header + "\n".join(rows) + "\n")
                last = returns[-1].tolist()
                rec = {"run_id": rid, "agent": agent, "env": env_id, "env_config": name,
                       "seed": seed, "status": "complete", "env_steps": steps,
                       "final_score": sum(last) / len(last), "eval": cfg["eval"],
                       "provenance": {"git_commit": "bench"}}
                (folder / "run.json").write_text(json.dumps(rec))
    return sweep


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seeds", type=int, default=250)
    ap.add_argument("--keep", type=Path, default=None)
    args = ap.parse_args()
    root = args.keep or Path(tempfile.mkdtemp(prefix="report-speed-"))
    t0 = time.perf_counter()
    sweep = write_sweep(root, args.seeds)
    print(f"wrote {len(AGENTS) * len(ENVS) * args.seeds} runs in {time.perf_counter() - t0:.1f} s")
    from seedsweep.runner.analysis import report
    from seedsweep.runner.commands.report import parse_options
    from seedsweep.runner.present import report_files

    opts = parse_options([str(sweep), "--quiet"])
    t0 = time.perf_counter()
    data = report.compute_report(opts)
    t1 = time.perf_counter()
    target = report_files.write_report(data)
    t2 = time.perf_counter()
    n_compared = sum(data.n_runs.values())
    print(f"compared run scores: {n_compared} ({len(data.agents)} agents x {len(data.envs)} envs)")
    print(f"load + references + statistics: {t1 - t0:.1f} s; timing breakdown {data.timing}")
    print(f"figures, csv, html, rename: {t2 - t1:.1f} s -> {target}")
    if args.keep is None:
        shutil.rmtree(root)


if __name__ == "__main__":
    main()
