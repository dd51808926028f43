"""check-agent's round-trip check: does ``state_dict`` hold everything, wherever a run stops?

A checkpoint can be taken at any step, and what a state_dict forgets shows only if the
forgotten thing is used after the restore: an exploration generator that is drawn from only
while epsilon is above 0, a statistic of the episode in progress that matters only when the
episode ends. So one training run is saved and restored at several points -- right after
the first episode end, in the middle of an episode, right after a later episode end and at
the last step -- and after each restore the restored copy runs beside the original (same
observations, read-only copies) for a while and through at least one more episode end,
with every action and the final state_dict compared bit for bit.
"""

from __future__ import annotations

import numpy as np
from seedsweep.agents.base import Agent
from seedsweep.runner.agent_check.harness import (
    MIN_STEPS,
    CheckFailed,
    EnvCase,
    Rollout,
    Subject,
    call,
    frozen,
    lockstep,
    rollout,
)
from seedsweep.runner.agent_check.inspect import roundtrip_bytes, same_actions
from seedsweep.runner.execution.state import first_difference


class SavePoints:
    """When to save during a loop of ``steps`` steps, each point once."""

    def __init__(self, steps: int):
        self.steps = steps
        self.done: set[str] = set()

    def due(self, n: int, episode_ended: bool) -> str | None:
        """The point reached at loop step ``n`` (1-based), or None."""
        wanted = [
            ("right after the first episode end", episode_ended),
            ("in the middle of an episode", n >= self.steps // 2 and not episode_ended),
            ("right after a later episode end", n >= 2 * self.steps // 3 and episode_ended),
            ("at the last step", n == self.steps),
        ]
        for name, ok in wanted:
            if ok and name not in self.done:
                self.done.add(name)
                return name
        return None


def restore_and_compare(s: Subject, case: EnvCase, original: Agent, roll: Rollout, point: str,
                        window: int, limit: int) -> tuple[int, int]:
    """Save ``original`` now, restore a fresh copy and run both; CheckFailed on the first
    difference. Returns (env step saved at, bytes of the saved state)."""
    saved_at = roll.env_steps
    where = f"saved {point} (env step {saved_at})"
    loaded, size = roundtrip_bytes(call("state_dict()", original.state_dict))
    restored = s.make(case)
    call("load_state_dict(torch.load(...))", restored.load_state_dict, loaded)
    diff = first_difference(call("state_dict()", original.state_dict),
                            call("state_dict()", restored.state_dict))
    if diff:
        raise CheckFailed(f"{where}: right after load_state_dict, state_dict() differs from the "
                          f"saved one at {diff}")

    def compare(env_step: int, greedy: list[np.ndarray], explore: list[np.ndarray]) -> None:
        for kind, acts in (("greedy", greedy), ("exploring", explore)):
            if not same_actions(acts[0], acts[1]):
                raise CheckFailed(f"{where}: the restored copy's {kind} actions differ at env "
                                  f"step {env_step}: {acts[0]!r} vs {acts[1]!r} (state_dict is "
                                  "missing something)")

    lockstep([original, restored], roll, window, compare, episodes=1, limit=limit)
    diff = first_difference(call("state_dict()", original.state_dict),
                            call("state_dict()", restored.state_dict))
    if diff:
        raise CheckFailed(f"{where}: after {roll.env_steps - saved_at} more env steps the "
                          f"restored copy's state_dict differs at {diff} (state_dict is "
                          "missing something)")
    return saved_at, size


def check_round_trip(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    original = s.make(case)
    window = max(MIN_STEPS, steps // 5)
    points = SavePoints(steps)
    saved: list[tuple[str, int]] = []
    largest = 0
    with rollout(s, case) as roll:
        for n in range(1, steps + 1):
            before = roll.episodes
            step = roll.step(call("act(explore=True)", original.act, frozen(roll.obs), True))
            call(f"observe() at env step {step.env_steps}", original.observe, step)
            point = points.due(n, roll.episodes > before)
            if point is not None:
                at, size = restore_and_compare(s, case, original, roll, point, window,
                                               window + steps)
                saved.append((point, at))
                largest = max(largest, size)
    where = "; ".join(f"{name} (env step {at})" for name, at in saved)
    return "PASS", (f"saved and restored at {len(saved)} points: {where}; up to "
                    f"{largest / 1024:.0f} KiB, weights_only load; each restored copy acted and "
                    f"learned identically for at least {window} env steps and through the next "
                    "episode end")
