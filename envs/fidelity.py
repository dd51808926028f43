"""Whether a way of saving an env's state is enough, tried on throwaway envs before a run
relies on it: saved, put through a checkpoint's serialisation, rebuilt into a fresh env, and
stepped beside the original."""

from __future__ import annotations

import io
from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
import torch


def carries_on_alike(make_env: Callable[[], gym.Env], save: Callable[[gym.Env], Any],
                     load: Callable[[gym.Env, Any], None], steps: int = 30) -> bool:
    """Whether a fresh env given ``load(env, save(original))`` steps exactly like the original.

    The original takes seeded random actions across episode ends, then an unseeded reset
    (its next episode begins from its generator, as after an autoreset) and more actions;
    then it is saved, the state goes through the same ``torch.save``/``torch.load(
    weights_only=True)`` as a checkpoint, and both envs take the same actions, compared step
    by step and through episode ends.
    """
    original, copy_ = make_env(), make_env()
    try:
        original.reset(seed=12345)
        original.action_space.seed(12345)
        actions = [original.action_space.sample() for _ in range(3 * steps)]
        for i, a in enumerate(actions[:2 * steps]):
            if i == steps:
                original.reset()
            if any(original.step(a)[2:4]):
                original.reset()
        buf = io.BytesIO()
        torch.save(save(original), buf)
        buf.seek(0)
        load(copy_, torch.load(buf, weights_only=True))
        for a in actions[2 * steps:]:
            ours, theirs = original.step(a), copy_.step(a)
            if not (np.array_equal(ours[0], theirs[0]) and ours[1:4] == theirs[1:4]):
                return False
            if any(ours[2:4]):
                if not np.array_equal(original.reset()[0], copy_.reset()[0]):
                    return False
        return True
    except Exception:  # state that is not data, or an env that fails once rebuilt
        return False
    finally:
        original.close()
        copy_.close()
