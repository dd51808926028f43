"""Learning-quality check of the policy-gradient baselines: N seeds at a budget, per env.

Runs each (agent, env, seed) through ``runner.api.run`` — the real training loop and
evaluation protocol — when the runner is importable, else through a minimal loop of its
own built on the same env layer and protocol. Prints, per agent and env, the final score
(mean return of the last evaluation) of every seed, their IQM
(``scipy.stats.trim_mean(x, 0.25)``), the first env step at which an evaluation reached the
env spec's reward threshold (if it has one), and the wall time.

    .venv/bin/python benchmarks/learning_quality.py --agents reinforce,actor_critic \
        --env cartpole --seeds 3 --steps 500000
"""

from __future__ import annotations

import argparse
import csv
import json
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
from scipy.stats import trim_mean

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--agents", default="reinforce,actor_critic",
                   help="comma-separated agent config names")
    p.add_argument("--env", default="cartpole", help="comma-separated env config names")
    p.add_argument("--seeds", type=int, default=3, help="seeds 0..N-1")
    p.add_argument("--steps", type=int, default=500_000, help="training env steps per run")
    p.add_argument("--eval-every", type=int, default=25_000)
    p.add_argument("--eval-episodes", type=int, default=10)
    p.add_argument("--jobs", type=int, default=1, help="runs in parallel (1 torch thread each)")
    p.add_argument("--results-dir", default=None, help="default: a temporary folder")
    p.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                   help="extra hydra override for every run, e.g. agent.lr=0.001")
    return p.parse_args(argv)


def run_one(job: dict) -> dict:
    """One run; returns its final score, eval curve and wall time."""
    import torch

    torch.set_num_threads(1)
    t0 = time.perf_counter()
    try:
        from seedsweep.runner.launch.api import run
    except ImportError:
        run = None
    if run is not None:
        overrides = [
            f"agent={job['agent']}", f"env={job['env']}", f"seed={job['seed']}",
            f"steps={job['steps']}", f"eval.every={job['eval_every']}",
            f"eval.episodes={job['eval_episodes']}", *job["set"],
        ]
        run_dir = run(overrides, results_dir=job["results_dir"])
        doc = json.loads((run_dir / "run.json").read_text())
        curve = _eval_curve(run_dir / "eval.csv")
        final = doc["final_score"]
        how = "seedsweep.runner.launch.api.run"
    else:
        final, curve = minimal_loop(job)
        how = "minimal loop"
    return {**job, "final": final, "curve": curve, "wall_s": time.perf_counter() - t0,
            "how": how}


def _eval_curve(path: Path) -> list[tuple[int, float]]:
    by_step: dict[int, list[float]] = {}
    with path.open() as f:
        for row in csv.DictReader(f):
            by_step.setdefault(int(row["env_step"]), []).append(float(row["return"]))
    return [(s, float(np.mean(v))) for s, v in sorted(by_step.items())]


def minimal_loop(job: dict) -> tuple[float, list[tuple[int, float]]]:
    """Fallback without the runner: same env layer, same evaluation protocol."""
    import importlib

    import yaml
    from seedsweep.agents.base import Step, build_config
    from seedsweep.envs.build import make_eval_env, make_train_envs, parse_env_config
    from seedsweep.runner.execution.protocol import evaluate
    from seedsweep.runner.execution.seeding import derive_seeds

    if job["set"]:
        raise SystemExit("--set needs runner.api (the minimal loop takes the YAML as is)")
    agent_cfg = yaml.safe_load((ROOT / "configs/agent" / f"{job['agent']}.yaml").read_text())
    env_cfg = yaml.safe_load((ROOT / "configs/env" / f"{job['env']}.yaml").read_text())
    module, _, name = agent_cfg.pop("entry").partition(":")
    agent_cfg.pop("name")
    cls = getattr(importlib.import_module(module), name)
    config = build_config(cls, agent_cfg)
    spec = parse_env_config(env_cfg)
    num_envs = getattr(config, "num_envs", 1)
    seeds = derive_seeds(job["seed"], job["eval_episodes"], num_envs)
    envs = make_train_envs(spec, num_envs, getattr(config, "vector_mode", "sync"))
    eval_env = make_eval_env(spec)
    agent = cls(envs.single_observation_space, envs.single_action_space, config, seeds.agent)
    obs = envs.reset(seed=seeds.train_env)
    steps, next_eval, curve = 0, job["eval_every"], []
    while steps < job["steps"]:
        actions = agent.act(obs, True)
        nxt, rewards, next_obs, term, trunc, _ = envs.step(actions)
        steps += num_envs
        agent.observe(Step(obs, actions, rewards, next_obs, term, trunc, steps))
        obs = nxt
        if steps >= next_eval or steps >= job["steps"]:
            next_eval += job["eval_every"]
            recs = evaluate(agent, eval_env, seeds.eval_episodes, steps, True, envs.normalizer)
            curve.append((steps, float(np.mean([r.ret for r in recs]))))
    envs.close()
    eval_env.close()
    return curve[-1][1], curve


def threshold_of(env_name: str) -> float | None:
    import gymnasium as gym
    import yaml

    cfg = yaml.safe_load((ROOT / "configs/env" / f"{env_name}.yaml").read_text())
    return gym.spec(cfg["id"]).reward_threshold


def report(results: list[dict], agent: str, env: str) -> None:
    rows = sorted((r for r in results if r["agent"] == agent and r["env"] == env),
                  key=lambda r: r["seed"])
    if not rows:
        return
    threshold = threshold_of(env)
    finals = np.array([r["final"] for r in rows], dtype=np.float64)
    print(f"\n{agent} on {env}: {len(rows)} seeds x {rows[0]['steps']} steps ({rows[0]['how']})")
    for r in rows:
        best_step, best = max(r["curve"], key=lambda c: c[1])
        hit = next((s for s, v in r["curve"] if threshold is not None and v >= threshold), None)
        reached = "" if threshold is None else f"  first eval >= {threshold:g}: {hit}"
        print(f"  seed {r['seed']}: final {r['final']:9.2f}  best eval {best:9.2f} "
              f"@ {best_step}{reached}  wall {r['wall_s']:6.1f} s")
    print(f"  IQM of finals: {trim_mean(finals, 0.25):.2f}  (mean {finals.mean():.2f}, "
          f"min {finals.min():.2f}, max {finals.max():.2f})")
    if threshold is not None:
        print(f"  final >= {threshold:g}: {(finals >= threshold).sum()}/{len(rows)} seeds")


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    agents = [a for a in args.agents.split(",") if a]
    envs = [e for e in args.env.split(",") if e]
    tmp = None
    results_dir = args.results_dir
    if results_dir is None:
        tmp = tempfile.TemporaryDirectory(prefix="learning_quality_")
        results_dir = tmp.name
    jobs = [
        {"agent": a, "env": e, "seed": s, "steps": args.steps, "eval_every": args.eval_every,
         "eval_episodes": args.eval_episodes, "results_dir": results_dir, "set": args.set}
        for a in agents for e in envs for s in range(args.seeds)
    ]
    t0 = time.perf_counter()
    if args.jobs > 1:
        with ProcessPoolExecutor(args.jobs) as pool:
            results = list(pool.map(run_one, jobs))
    else:
        results = [run_one(j) for j in jobs]
    for a in agents:
        for e in envs:
            report(results, a, e)
    print(f"\ntotal wall time {time.perf_counter() - t0:.1f} s ({args.jobs} job(s) in parallel)")
    if tmp is not None:
        tmp.cleanup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
