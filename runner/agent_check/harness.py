"""The bench check-agent tries an agent on: its instances, real training envs stepped by the
runner's own step function, lockstep runs of several instances, and memory measurements.
"""

from __future__ import annotations

import gc
import os
import sysconfig
import traceback
import tracemalloc
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.agents.base import Agent, Step
from seedsweep.envs.build import EnvSpec, make_eval_env, make_train_envs
from seedsweep.runner.execution.loop import env_step
from seedsweep.runner.execution.state import nbytes

ENV_SEED_OFFSET = 1000  # training env seeds: seed + 1000 + i, apart from the agent seeds


MIN_STEPS = 20  # the fewest act/observe calls a loop of check-agent makes


MEMORY_SLACK = 1 << 20


RSS_SLACK = 4 << 20


class CheckFailed(Exception):
    """A broken promise; the message is the FAIL line's reason."""


LIBRARY_ROOTS = tuple(Path(p).resolve() for key, p in sysconfig.get_paths().items()
                      if key in ("stdlib", "platstdlib", "purelib", "platlib"))


def _is_library(filename: str) -> bool:
    path = Path(filename).resolve()
    return filename.startswith("<") or any(r == path or r in path.parents
                                           for r in LIBRARY_ROOTS)


def where(err: BaseException) -> str:
    """``file:line`` of the innermost frame of ``err`` in the user's code (not in numpy,
    torch or the standard library, which a failed write goes through), relative to the
    current folder when inside it; ``""`` if there is none."""
    frames = traceback.extract_tb(err.__traceback__)
    if not frames:
        return ""
    own = [f for f in frames if not _is_library(f.filename)]
    f = (own or frames)[-1]
    try:
        name = str(Path(f.filename).resolve().relative_to(Path.cwd()))
    except ValueError:
        name = f.filename
    return f"{name}:{f.lineno}"


def describe_error(err: BaseException) -> str:
    """``Type: first line (at file:line)`` of an exception raised inside the agent."""
    text = str(err).strip().splitlines()
    at = where(err)
    return f"{type(err).__name__}: {text[0] if text else ''}" + (f" (at {at})" if at else "")


def in_place_write(what: str, err: BaseException) -> str | None:
    """The FAIL reason for a write into one of the runner's read-only arrays, or None."""
    if not (isinstance(err, ValueError) and "read-only" in str(err)):
        return None
    if what.startswith("act("):
        target = "the observations passed to act()"
    elif what.startswith("observe("):
        target = "an array of the Step passed to observe() (obs, actions, rewards, next_obs, " \
                 "terminated, truncated)"
    else:
        target = "an array the runner passed in"
    head, _, when = what.partition(" at ")
    place = ", ".join(x for x in (f"at {where(err)}" if where(err) else "", when) if x)
    return (f"{head} writes in place into {target}" + (f" ({place})" if place else "")
            + "; these arrays are read-only and shared with the runner: copy before "
            "changing them")


def call(what: str, fn: Callable[..., Any], *args: Any) -> Any:
    """Call into the agent; an exception becomes a FAIL that says which call raised (an
    in-place write into a read-only runner array is named as such, with the user's line)."""
    try:
        return fn(*args)
    except CheckFailed:
        raise
    except Exception as err:  # any exception from agent code is the finding
        raise CheckFailed(in_place_write(what, err)
                          or f"{what} raised {describe_error(err)}") from err


def frozen(a: np.ndarray) -> np.ndarray:
    """A read-only copy of ``a``: what act() and observe() get from the runner."""
    out = np.array(a, copy=True)
    out.flags.writeable = False
    return out


@dataclass
class Subject:
    """An agent class with its checked config, and how instances of it are built."""

    cls: type[Agent]
    config: Any
    seed: int

    @property
    def num_envs(self) -> int:
        return int(getattr(self.config, "num_envs", 1))

    @property
    def vector_mode(self) -> str:
        return str(getattr(self.config, "vector_mode", "sync"))

    def make(self, case: EnvCase, seed: int | None = None) -> Agent:
        seed = self.seed if seed is None else seed
        return call("construction", self.cls, case.obs_space, case.action_space, self.config,
                    seed)


class Rollout:
    """Training envs stepped by the training loop's own :func:`env_step` (same Step values)."""

    def __init__(self, case: EnvCase, num_envs: int, vector_mode: str, seed: int):
        self.spec = case.spec
        self.seed = seed
        self.envs = make_train_envs(case.spec, num_envs, vector_mode)
        self.obs = self.envs.reset(seed=seed)
        self.env_steps = 0
        self.episodes = 0

    def step(self, actions: np.ndarray) -> Step:
        try:
            step, nxt, finished = env_step(self.envs, self.obs, actions, self.env_steps)
        except Exception as err:  # the env refusing the agent's actions is the finding
            raise CheckFailed(f"the env rejected the actions {actions!r} at env step "
                              f"{self.env_steps}: {describe_error(err)}") from err
        self.env_steps = step.env_steps
        self.episodes += len(finished)
        self.obs = nxt
        return step

    def eval_batch(self) -> np.ndarray:
        """A batch of one evaluation observation, as the evaluation protocol passes it."""
        env = make_eval_env(self.spec)
        try:
            obs, _ = env.reset(seed=self.seed + 7919)
        finally:
            env.close()
        x = np.asarray(obs)[None]
        return frozen(x if self.envs.normalizer is None else self.envs.normalizer(x))

    def close(self) -> None:
        self.envs.close()

    def __enter__(self) -> Rollout:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def copy_step(step: Step) -> Step:
    """An independent read-only copy, as the runner's own Step arrays are read-only."""
    return Step(*(frozen(getattr(step, f)) for f in
                  ("obs", "actions", "rewards", "next_obs", "terminated", "truncated")),
                step.env_steps)


@dataclass
class EnvCase:
    """One env config, with the spaces the agent is built with (after the batch layer)."""

    name: str
    spec: EnvSpec
    obs_space: spaces.Space
    action_space: spaces.Space


def env_case(name: str, spec: EnvSpec, num_envs: int, vector_mode: str) -> EnvCase:
    envs = make_train_envs(spec, num_envs, vector_mode)
    try:
        return EnvCase(name, spec, envs.single_observation_space, envs.single_action_space)
    finally:
        envs.close()


def rollout(s: Subject, case: EnvCase) -> Rollout:
    """The same env seeds for every check, apart from the agent seeds."""
    return Rollout(case, s.num_envs, s.vector_mode, s.seed + ENV_SEED_OFFSET)


def lockstep(agents: list[Agent], roll: Rollout, steps: int,
             on_actions: Callable[[int, list[np.ndarray], list[np.ndarray]], None],
             episodes: int = 0, limit: int = 0) -> None:
    """Step ``roll`` with the first agent's actions; every agent acts on and observes the
    same values (read-only copies), greedy first as an evaluation would, then exploring.
    At least ``steps`` steps, then on until ``episodes`` episodes have ended since the start
    (at most ``limit`` steps in all)."""
    start = roll.episodes
    done = 0
    while done < steps or (roll.episodes - start < episodes and done < max(limit, steps)):
        done += 1
        greedy = [call("act(explore=False)", a.act, frozen(roll.obs), False) for a in agents]
        explore = [call("act(explore=True)", a.act, frozen(roll.obs), True) for a in agents]
        on_actions(roll.env_steps, greedy, explore)
        step = roll.step(explore[0])
        for i, a in enumerate(agents):
            call(f"observe() at env step {step.env_steps}", a.observe,
                 step if i == 0 else copy_step(step))


def rss_bytes() -> int | None:
    """Resident set size of this process (Linux /proc), or None where unavailable."""
    try:
        pages = int(Path("/proc/self/statm").read_text().split()[1])
    except (OSError, ValueError, IndexError):
        return None
    return pages * os.sysconf("SC_PAGE_SIZE")


def live_tensor_bytes() -> int:
    """Bytes of the storages behind every live torch tensor (which tracemalloc cannot see)."""
    storages: dict[int, int] = {}
    for obj in gc.get_objects():
        if issubclass(type(obj), torch.Tensor):  # type(), not isinstance: no proxy lookups
            try:
                storage = obj.untyped_storage()
            except Exception:  # sparse or meta tensors have no plain storage
                continue
            ptr = storage.data_ptr()
            storages[ptr] = max(storages.get(ptr, 0), storage.nbytes())
    return sum(storages.values())


@dataclass
class Growth:
    """Memory growth in bytes over the measured loop."""

    traced: int  # python objects and numpy arrays (tracemalloc)
    tensors: int  # torch tensor storages reachable from python
    rss: int | None  # resident set size, a coarse net for everything else
    state: int  # the arrays and tensors of state_dict: growth there is allowed

    def problem(self, steps: int) -> str | None:
        allowed = max(0, self.state) + MEMORY_SLACK
        mib = 2**20
        tail = (f"over the last {steps} steps (state_dict grew {self.state / mib:.2f} MiB; "
                f"allowed that + {MEMORY_SLACK / mib:.0f} MiB")
        if self.traced > allowed:
            return f"memory leak: python/numpy allocations grew {self.traced / mib:.1f} MiB {tail})"
        if self.tensors > allowed:
            return f"memory leak: live torch tensors grew {self.tensors / mib:.1f} MiB {tail})"
        if self.rss is not None and self.rss > allowed + RSS_SLACK:
            return (f"memory leak: resident memory grew {self.rss / mib:.1f} MiB {tail}, "
                    f"+ {RSS_SLACK / mib:.0f} MiB for RSS)")
        return None

    def text(self) -> str:
        rss = "n/a" if self.rss is None else f"{self.rss / 1024:+.0f}"
        return (f"traced {self.traced / 1024:+.0f} KiB, tensors {self.tensors / 1024:+.0f} KiB, "
                f"RSS {rss} KiB, state {self.state / 1024:+.0f} KiB")


def measure_growth(agent: Agent, run: Callable[[], None]) -> Growth:
    """Memory growth over ``run``. A replay buffer filling up grows the state too: growth
    the state accounts for is allowed, the rest is a leak."""
    gc.collect()
    state0 = nbytes(call("state_dict()", agent.state_dict))
    gc.collect()
    tensors0 = live_tensor_bytes()
    started = not tracemalloc.is_tracing()
    if started:
        tracemalloc.start()
    try:
        traced0 = tracemalloc.get_traced_memory()[0]
        own0 = tracemalloc.get_tracemalloc_memory()
        rss0 = rss_bytes()
        run()
        gc.collect()
        traced1 = tracemalloc.get_traced_memory()[0]
        own1 = tracemalloc.get_tracemalloc_memory()
        rss1 = rss_bytes()
    finally:
        if started:
            tracemalloc.stop()
    tensors1 = live_tensor_bytes()
    state1 = nbytes(call("state_dict()", agent.state_dict))
    rss = None if rss0 is None or rss1 is None else rss1 - rss0 - (own1 - own0)
    return Growth(traced1 - traced0, tensors1 - tensors0, rss, state1 - state0)
