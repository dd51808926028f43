"""Every seed of a run, derived from the run seed by numpy's SeedSequence and recorded.

Training env seeds and evaluation episode seeds are disjoint by construction, so an
evaluation never replays an episode the agent trained on from the same start.
"""

from __future__ import annotations

import random
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import torch


@dataclass(frozen=True)
class RunSeeds:
    run: int
    train_env: int  # env i of the training batch is reset with train_env + i
    eval_episodes: tuple[int, ...]  # the same episode seeds at every evaluation of the run
    agent: int
    global_rngs: int  # python/numpy/torch global RNGs, seeded as a safety net

    def as_dict(self) -> dict:
        d = asdict(self)
        d["eval_episodes"] = list(self.eval_episodes)
        return d


def _draw31(ss: np.random.SeedSequence, n: int = 1) -> list[int]:
    return [int(x >> 1) for x in ss.generate_state(n, np.uint32)]


def derive_seeds(seed: int, eval_episodes: int, num_envs: int = 1) -> RunSeeds:
    """Derive all seeds of a run from ``seed``; deterministic and collision-free."""
    env_ss, eval_ss, agent_ss, global_ss = np.random.SeedSequence(seed).spawn(4)
    train_env = _draw31(env_ss)[0]
    reserved = set(range(train_env, train_env + num_envs))
    eval_seeds: list[int] = []
    n = eval_episodes
    while len(eval_seeds) < eval_episodes:
        n *= 2
        eval_seeds = []
        taken = set(reserved)  # a set: the draw stays linear in eval_episodes
        for s in _draw31(eval_ss, n):
            if s not in taken:
                taken.add(s)
                eval_seeds.append(s)
                if len(eval_seeds) == eval_episodes:
                    break
    return RunSeeds(
        run=seed,
        train_env=train_env,
        eval_episodes=tuple(eval_seeds),
        agent=_draw31(agent_ss)[0],
        global_rngs=_draw31(global_ss)[0],
    )


def seed_globals(seed: int) -> None:
    """Seed python, numpy and torch global RNGs (agents should not use them)."""
    random.seed(seed)
    np.random.seed(seed % 2**32)
    torch.manual_seed(seed)


def capture_global_rngs() -> dict[str, Any]:
    """The python, numpy and torch global RNG states, as tensors and plain values (so a
    checkpoint holding them loads with ``torch.load(weights_only=True)``)."""
    kind, keys, pos, has_gauss, cached = np.random.get_state()
    return {
        "python": random.getstate(),
        "numpy": {"kind": kind, "keys": torch.from_numpy(keys.astype(np.int64)), "pos": int(pos),
                  "has_gauss": int(has_gauss), "cached": float(cached)},
        "torch": torch.get_rng_state(),
    }


def restore_global_rngs(state: dict[str, Any]) -> None:
    """Put back what :func:`capture_global_rngs` returned."""
    py = state["python"]
    random.setstate((py[0], tuple(py[1]), py[2]))
    n = state["numpy"]
    np.random.set_state((n["kind"], n["keys"].numpy().astype(np.uint32), n["pos"], n["has_gauss"],
                         n["cached"]))
    torch.set_rng_state(state["torch"])
