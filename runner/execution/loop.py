"""The training loop: step the training envs, feed the agent, evaluate on schedule.

The loop is the same for every agent: it calls only the :class:`seedsweep.agents.base.Agent`
interface. Its whole state (counters, records so far, the current observations and the
agent's own state) can be captured between two steps for checkpoints.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from seedsweep.agents.base import Agent, Step
from seedsweep.envs.batch import TrainEnvs
from seedsweep.runner.execution.progress import RunListener
from seedsweep.runner.execution.protocol import (
    EpisodeRecord,
    evaluate,
    evaluate_batched,
    mean_and_stderr,
)
from seedsweep.runner.execution.seeding import capture_global_rngs, restore_global_rngs
from seedsweep.runner.execution.state import nonfinite_path

CHECK_EVERY = 256  # steps between looks at the clock (progress display)


class NonFiniteError(FloatingPointError):
    """A loss, metric or parameter became NaN or infinite: the run cannot go on."""


def check_finite(state: Any, env_steps: int, path: str = "agent") -> None:
    """Raise NonFiniteError if any floating value in a (nested) state is NaN or infinite."""
    bad = nonfinite_path(state, path)
    if bad is not None:
        raise NonFiniteError(f"{bad} has NaN or inf values at env step {env_steps}")


def env_step(envs: TrainEnvs, obs: np.ndarray, actions: np.ndarray,
             env_steps: int) -> tuple[Step, np.ndarray, Sequence[tuple[float, int]]]:
    """Step the training envs once: the agent's :class:`Step`, the observations to act on
    next, and the (raw return, length) of episodes that ended. The one place a training
    step is made, for the loop and for check-agent alike."""
    nxt, rewards, next_obs, terminated, truncated, finished = envs.step(actions)
    step = Step(obs, actions, rewards, next_obs, terminated, truncated,
                env_steps + envs.num_envs)
    return step, nxt, finished


@dataclass
class Schedule:
    budget: int
    eval_every: int
    eval_episodes: int
    deterministic: bool
    log_every: int
    checkpoint_every: int


@dataclass
class Records:
    """What the run has produced so far; written to the run folder as CSV files."""

    evals: list[EpisodeRecord] = field(default_factory=list)
    train: list[tuple[int, float, int]] = field(default_factory=list)
    scalars: list[tuple[int, str, float]] = field(default_factory=list)


class Trainer:
    """Runs one training run of ``agent`` to its budget."""

    def __init__(
        self,
        agent: Agent,
        envs: TrainEnvs,
        eval_env,
        schedule: Schedule,
        train_seed: int,
        eval_seeds: tuple[int, ...],
        progress: RunListener,
        on_evaluation: Callable[[Trainer], None] | None = None,
        on_checkpoint: Callable[[Trainer], None] | None = None,
        eval_envs: Sequence[Any] = (),
    ):
        self.agent = agent
        self.envs = envs
        self.eval_env = eval_env
        self.eval_envs = list(eval_envs)  # for the batched protocol (more than one env)
        self.schedule = schedule
        self.train_seed = train_seed
        self.eval_seeds = eval_seeds
        self.progress = progress
        self.on_evaluation = on_evaluation
        self.on_checkpoint = on_checkpoint
        self.tb: Any = None  # a TensorBoard writer, set by the run once its folder exists
        self.records = Records()
        self.env_steps = 0
        self.next_eval = schedule.eval_every
        self.next_log = schedule.log_every
        self.next_checkpoint = schedule.checkpoint_every or math.inf
        self.latest: dict[str, float] = {}
        self.obs: np.ndarray | None = None
        self.snapshot_kind = "none"
        self._checkpoint_pending = False
        self._clock = time.perf_counter()
        self._clock_steps = 0
        self.steps_per_s = 0.0
        self._logged_episodes = 0
        self.eval_s = 0.0  # seconds spent evaluating in this process (for estimates)
        self.eval_steps = 0  # env steps played by those evaluations

    def run(self) -> Records:
        """Train to the budget; evaluate every ``eval_every`` steps and once at the end."""
        if self.obs is None:
            self.obs = self.envs.reset(seed=self.train_seed)
        agent, envs, sched = self.agent, self.envs, self.schedule
        n = envs.num_envs
        obs = self.obs
        steps = self.env_steps
        next_check = steps + CHECK_EVERY
        budget = sched.budget
        train = self.records.train
        latest = self.latest
        # One comparison per step: the nearest of all periodic events decides when to look.
        next_event = self._next_event(next_check)
        try:
            while steps < budget:
                step, nxt, finished = env_step(envs, obs, agent.act(obs, True), steps)
                steps = step.env_steps
                metrics = agent.observe(step)
                if metrics:
                    for key, value in metrics.items():
                        if not math.isfinite(value):
                            raise NonFiniteError(f"{key} is {value} at env step {steps}")
                    latest.update(metrics)
                if finished:
                    for ret, length in finished:
                        train.append((steps, ret, length))
                obs = nxt
                if steps < next_event:
                    continue
                self.obs, self.env_steps = obs, steps
                if steps >= next_check:
                    next_check = steps + CHECK_EVERY
                    self._tick()
                if steps >= self.next_log:
                    self._log_scalars()
                if steps >= self.next_eval:
                    self._evaluate()
                if steps >= self.next_checkpoint:
                    while self.next_checkpoint <= steps:
                        self.next_checkpoint += sched.checkpoint_every
                    self._checkpoint_pending = True
                if self._checkpoint_pending and (finished or self.snapshot_kind != "reset"):
                    # "reset" snapshots exist only right after an episode ended and reset
                    self._checkpoint_pending = False
                    if self.on_checkpoint is not None:
                        self.on_checkpoint(self)
                # while a checkpoint waits for an episode end, look at every step
                next_event = steps + n if self._checkpoint_pending else self._next_event(
                    next_check)
        finally:
            self.obs, self.env_steps = obs, steps
        if not self.records.evals or self.records.evals[-1].env_step != steps:
            self._evaluate()
        return self.records

    # -- periodic work -------------------------------------------------------------------
    def _next_event(self, next_check: int) -> float:
        return min(next_check, self.next_log, self.next_eval, self.next_checkpoint)

    def _tick(self) -> None:
        now = time.perf_counter()
        if now > self._clock:
            self.steps_per_s = (self.env_steps - self._clock_steps) / (now - self._clock)
        if now - self._clock > 2.0:
            self._clock, self._clock_steps = now, self.env_steps
        self.progress.update(self.env_steps, self.steps_per_s)

    def _log_scalars(self) -> None:
        while self.next_log <= self.env_steps:
            self.next_log += self.schedule.log_every
        self._tick()
        items = dict(self.latest)
        items["steps_per_s"] = float(self.steps_per_s)
        recent = self.records.train[self._logged_episodes:]
        self._logged_episodes = len(self.records.train)
        if recent:  # TensorBoard gets the mean per log interval; train.csv has every episode
            items["episode_return"] = sum(r[1] for r in recent) / len(recent)
        for key, value in items.items():
            self.records.scalars.append((self.env_steps, key, float(value)))
            if self.tb is not None:
                self.tb.add_scalar(f"train/{key}", float(value), self.env_steps)

    def _evaluate(self) -> None:
        check_finite(self.agent.state_dict(), self.env_steps)
        while self.next_eval <= self.env_steps:
            self.next_eval += self.schedule.eval_every
        normalize = self.envs.normalizer
        start = time.perf_counter()
        if len(self.eval_envs) > 1:
            recs = evaluate_batched(self.agent, self.eval_envs, self.eval_seeds, self.env_steps,
                                    normalize)
        else:
            recs = evaluate(self.agent, self.eval_env, self.eval_seeds, self.env_steps,
                            self.schedule.deterministic, normalize)
        self.eval_s += time.perf_counter() - start
        self.eval_steps += sum(r.length for r in recs)
        self.records.evals.extend(recs)
        mean, se = mean_and_stderr([r.ret for r in recs])
        if self.tb is not None:
            self.tb.add_scalar("eval/mean_return", mean, self.env_steps)
        self.progress.evaluation(self.env_steps, mean, se)
        if self.on_evaluation is not None:
            self.on_evaluation(self)

    # -- state ---------------------------------------------------------------------------
    def loop_state(self) -> dict[str, Any]:
        """Counters and records (the agent and env states are saved beside this)."""
        return {
            "env_steps": self.env_steps,
            "next_eval": self.next_eval,
            "next_log": self.next_log,
            "next_checkpoint": self.next_checkpoint if math.isfinite(self.next_checkpoint) else -1,
            "latest": dict(self.latest),
            "logged_episodes": self._logged_episodes,
            "evals": [r.row() for r in self.records.evals],
            "train": list(self.records.train),
            "scalars": list(self.records.scalars),
        }

    def capture(self, final: bool = False) -> dict[str, Any]:
        """Everything needed to continue this run from here (or its final state)."""
        return {
            "agent": self.agent.state_dict(),
            "envs": self.envs.state_dict("final" if final else self.snapshot_kind),
            "loop": self.loop_state(),
            "global_rngs": capture_global_rngs(),
        }

    def restore(self, state: dict[str, Any]) -> None:
        self.agent.load_state_dict(state["agent"])
        self.obs = self.envs.load_state_dict(state["envs"])
        self.load_loop_state(state["loop"])
        restore_global_rngs(state["global_rngs"])

    def load_loop_state(self, state: dict[str, Any]) -> None:
        self.env_steps = int(state["env_steps"])
        self.next_eval = int(state["next_eval"])
        self.next_log = int(state["next_log"])
        nc = int(state["next_checkpoint"])
        self.next_checkpoint = math.inf if nc < 0 else nc
        self.latest = dict(state["latest"])
        self._logged_episodes = int(state["logged_episodes"])
        self.records = Records(
            evals=[EpisodeRecord(*row) for row in state["evals"]],
            train=[tuple(r) for r in state["train"]],
            scalars=[tuple(r) for r in state["scalars"]],
        )
        self._clock_steps = self.env_steps
