"""What an agent says about itself, and whether what it returns is well formed.

Pure inspections, no training: declared action spaces and ``supports()``, a batch of
actions against its space, ``observe``'s metrics, a state through a checkpoint round trip.
"""

from __future__ import annotations

import io
import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent
from seedsweep.runner.agent_check.harness import CheckFailed, call, describe_error

STANDARD_SPACES: tuple[spaces.Space, ...] = (
    spaces.Discrete(3),
    spaces.Box(-1.0, 1.0, (2,), np.float32),
    spaces.MultiDiscrete([2, 3]),
    spaces.MultiBinary(3),
)


PROBE_OBS_SPACE = spaces.Box(-1.0, 1.0, (4,), np.float32)


def declared(cls: type[Agent]) -> tuple[type, ...]:
    found = getattr(cls, "action_spaces", None)
    if not isinstance(found, tuple) or not found:
        raise CheckFailed(f"action_spaces must be a non-empty tuple of gymnasium space "
                          f"classes, got {found!r}")
    bad = [x for x in found if not (isinstance(x, type) and issubclass(x, spaces.Space))]
    if bad:
        raise CheckFailed(f"action_spaces holds {bad[0]!r}, not a gymnasium space class")
    return found


def supports(cls: type[Agent], space: spaces.Space) -> bool:
    answer = call(f"supports({space})", cls.supports, space)
    if not isinstance(answer, (bool, np.bool_)):
        raise CheckFailed(f"supports({space}) returned {answer!r}, expected a bool")
    return bool(answer)


def _names(classes: Sequence[type]) -> str:
    return ", ".join(c.__name__ for c in classes)


def same_actions(a: Any, b: Any) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    return a.dtype == b.dtype and a.shape == b.shape and np.array_equal(a, b)


def action_problem(actions: Any, n: int, space: spaces.Space) -> str | None:
    """Why ``actions`` is not a valid batch of ``n`` actions of ``space``, or None."""
    if not isinstance(actions, np.ndarray):
        return f"returned {type(actions).__name__}, expected numpy.ndarray"
    want = (n, *(space.shape or ()))
    if actions.shape != want:
        return f"shape {actions.shape}, expected {want}"
    if not np.can_cast(actions.dtype, space.dtype):  # gymnasium's Box.contains rule
        return f"dtype {actions.dtype} does not fit the space's {space.dtype}"
    for i in range(n):
        if not space.contains(actions[i]):
            return f"action [{i}] = {actions[i]!r} is not in {space}"
    return None


def metrics_problem(metrics: Any) -> str | None:
    """Why an ``observe`` return value breaks ``dict[str, float]`` with finite values."""
    if not isinstance(metrics, dict):
        return f"returned {type(metrics).__name__}, expected a dict of floats"
    for key, value in metrics.items():
        if not isinstance(key, str):
            return f"metric key {key!r} is not a string"
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
            return f"metric {key!r} is a {type(value).__name__}, expected a float"
        if not math.isfinite(value):
            return f"metric {key!r} is {value}"
    return None


def roundtrip_bytes(state: Any) -> tuple[Any, int]:
    """``state`` through ``torch.save`` and ``torch.load(weights_only=True)``, as a checkpoint."""
    buffer = io.BytesIO()
    try:
        torch.save(state, buffer)
    except Exception as err:  # what torch cannot save is the finding
        raise CheckFailed(f"torch.save(state_dict()) raised {describe_error(err)}") from err
    size = buffer.tell()
    buffer.seek(0)
    try:
        return torch.load(buffer, weights_only=True), size
    except Exception as err:  # e.g. numpy objects, which weights_only refuses
        first = str(err).strip().splitlines()
        reason = next((ln.strip() for ln in first if "Unsupported" in ln or "global" in ln),
                      first[0] if first else type(err).__name__)
        raise CheckFailed(f"state_dict() does not load with torch.load(weights_only=True): "
                          f"{reason}") from err
