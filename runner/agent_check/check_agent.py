"""``seedsweep check-agent``: does an agent keep the contract of :mod:`seedsweep.agents.base`?

The runner trusts every agent to act inside its action space, to be a function of its seed
and of what it is shown only, to save all it needs in ``state_dict`` and to leave the global
RNGs alone. A breach shows up much later as a wrong or irreproducible result, so this
command tries each promise directly, on real training envs stepped the way
:class:`runner.loop.Trainer` steps them, and prints one line per check:

* PASS, or WARN (a pass with a caveat worth reading);
* SKIP: the env's action space is not supported and ``supports()`` said so (a pass);
* FAIL, with the reason. Exit status 0 only when nothing failed.
"""

from __future__ import annotations

import dataclasses
import gc
import io
import math
import os
import pickle
import random
import sys
import time
import traceback
import tracemalloc
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import torch
from gymnasium import spaces

from seedsweep.agents.base import CONTRACT_VERSION, Agent, ConfigError, Step, build_config, check_type
from seedsweep.envs.build import EnvSpec, make_eval_env, make_train_envs, parse_env_config

DEFAULT_ENVS = ("cartpole", "pendulum", "frozenlake")
DEFAULT_STEPS = 300  # act/observe calls per loop; "a few hundred" keeps a check run short
MIN_STEPS = 20
ACTION_STEPS = 50  # training steps between the two action probes of the actions check
MIN_MEMORY_STEPS = 300  # the measured loop: a 1 MB / 100 steps leak grows >= 3 MB in it
# Growth a healthy loop may show beyond its state (common practice, no source): the shipped
# agents measured <= 16 KiB traced and 0 tensor bytes over 300 steps, a 1 MB / 100 steps leak
# 2.9 MiB. RSS is noisy (the allocator reuses freed pages), so it only catches big leaks.
MEMORY_SLACK = 1 << 20
RSS_SLACK = 4 << 20
GLOBAL_SEED = 20_250_101  # the known state the global RNGs are put in (any value works)
ENV_SEED_OFFSET = 1000  # training env seeds: seed + 1000 + i, apart from the agent seeds

# One instance of every standard numeric gymnasium space an agent may list.
STANDARD_SPACES: tuple[spaces.Space, ...] = (
    spaces.Discrete(3),
    spaces.Box(-1.0, 1.0, (2,), np.float32),
    spaces.MultiDiscrete([2, 3]),
    spaces.MultiBinary(3),
)
PROBE_OBS_SPACE = spaces.Box(-1.0, 1.0, (4,), np.float32)

USAGE = f"""usage: seedsweep check-agent TARGET [env=NAME ...] [agent.KEY=VALUE ...]
                             [seed=N] [steps=N] [--config-dir DIR]

Check that an agent keeps the contract of agents/base.py, on real training envs.

TARGET     an agent config name (configs/agent/NAME.yaml), module:Class or
           path/to/file.py:Class (hyperparameters: the Config defaults)
env=NAME   env configs to check on (repeat or comma-separate; default:
           {", ".join(DEFAULT_ENVS)})
agent.KEY=VALUE  a hyperparameter override (hydra value grammar)
seed=N     agent seed (default 0; the different-seed instance uses N+1)
steps=N    act/observe calls per loop (default {DEFAULT_STEPS}; at least {MIN_STEPS})
--config-dir DIR  extra config folder (agent/, env/ inside), as for seedsweep run

checks, one line each per env: spaces, actions, determinism, round_trip, global_rng,
learn_loop; once per agent: contract_version, config, declares, refuses.
Learning checks only mean something if the agent learns within `steps`: lower e.g.
agent.replay_warmup_steps for agents that wait before their first update."""


# -- results ------------------------------------------------------------------------------
@dataclass
class Result:
    scope: str  # an env config name, or "agent"
    check: str
    status: str  # PASS | WARN | SKIP | FAIL
    detail: str
    seconds: float = 0.0
    clean_skip: bool = False  # a SKIP that is a pass: unsupported space, refused cleanly

    @property
    def ok(self) -> bool:
        return self.status in ("PASS", "WARN") or (self.status == "SKIP" and self.clean_skip)

    def line(self) -> str:
        return (f"{self.scope:<14}{self.status:<6}{self.check:<18}{self.detail} "
                f"({self.seconds:.1f} s)")


class CheckFailed(Exception):
    """A broken promise; the message is the FAIL line's reason."""


def describe_error(err: BaseException) -> str:
    """``Type: first line (at file:line)`` of an exception raised inside the agent."""
    text = str(err).strip().splitlines()
    frames = traceback.extract_tb(err.__traceback__)
    where = ""
    if frames:
        f = frames[-1]
        try:
            name = str(Path(f.filename).resolve().relative_to(Path.cwd()))
        except ValueError:
            name = f.filename
        where = f" (at {name}:{f.lineno})"
    return f"{type(err).__name__}: {text[0] if text else ''}{where}"


def call(what: str, fn: Callable[..., Any], *args: Any) -> Any:
    """Call into the agent; an exception becomes a FAIL that says which call raised."""
    try:
        return fn(*args)
    except CheckFailed:
        raise
    except Exception as err:  # any exception from agent code is the finding
        raise CheckFailed(f"{what} raised {describe_error(err)}") from err


# -- comparing states and actions ----------------------------------------------------------
def first_difference(a: Any, b: Any, path: str = "state") -> str | None:
    """Where two nested states differ (bit for bit), or None if they are identical."""
    if isinstance(a, torch.Tensor) or isinstance(b, torch.Tensor):
        if not (isinstance(a, torch.Tensor) and isinstance(b, torch.Tensor)):
            return f"{path}: {type(a).__name__} vs {type(b).__name__}"
        if a.dtype != b.dtype or a.shape != b.shape:
            return f"{path}: {a.dtype}{tuple(a.shape)} vs {b.dtype}{tuple(b.shape)}"
        same = (torch.equal(a, b) if not a.is_floating_point()
                else bool(torch.isclose(a, b, rtol=0, atol=0, equal_nan=True).all()))
        return None if same else f"{path}: tensor values differ"
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        if not (isinstance(a, np.ndarray) and isinstance(b, np.ndarray)):
            return f"{path}: {type(a).__name__} vs {type(b).__name__}"
        if a.dtype != b.dtype or a.shape != b.shape:
            return f"{path}: {a.dtype}{a.shape} vs {b.dtype}{b.shape}"
        nan_ok = a.dtype.kind in "fc"
        return None if np.array_equal(a, b, equal_nan=nan_ok) else f"{path}: array values differ"
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            extra = sorted(map(str, set(a) ^ set(b)))
            return f"{path}: keys differ ({', '.join(extra)})"
        for key in a:
            found = first_difference(a[key], b[key], f"{path}.{key}")
            if found:
                return found
        return None
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        if type(a) is not type(b) or len(a) != len(b):
            return f"{path}: {type(a).__name__} of {len(a)} vs {type(b).__name__} of {len(b)}"
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            found = first_difference(x, y, f"{path}[{i}]")
            if found:
                return found
        return None
    if type(a) is not type(b):
        return f"{path}: {type(a).__name__} vs {type(b).__name__}"
    if isinstance(a, float):
        same = a == b or (math.isnan(a) and math.isnan(b))
        return None if same else f"{path}: {a!r} vs {b!r}"
    try:
        if a == b:
            return None
        if type(a).__eq__ is object.__eq__:  # no value equality: compare what it pickles to
            return None if pickle.dumps(a) == pickle.dumps(b) else f"{path}: objects differ"
    except Exception:  # an unpicklable or oddly comparing object: report it as different
        pass
    return f"{path}: {a!r} vs {b!r}"


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


def state_nbytes(state: Any) -> int:
    """Bytes of the arrays and tensors in a nested state."""
    if isinstance(state, torch.Tensor):
        return state.numel() * state.element_size()
    if isinstance(state, np.ndarray):
        return int(state.nbytes)
    if isinstance(state, (bytes, bytearray)):
        return len(state)
    if isinstance(state, dict):
        return sum(state_nbytes(v) for v in state.values())
    if isinstance(state, (list, tuple)):
        return sum(state_nbytes(v) for v in state)
    return 0


def nonfinite_path(state: Any, path: str = "state") -> str | None:
    """The first floating tensor or array in a nested state holding NaN or inf."""
    if isinstance(state, torch.Tensor):
        bad = state.is_floating_point() and not bool(torch.isfinite(state).all())
        return path if bad else None
    if isinstance(state, np.ndarray):
        return path if state.dtype.kind == "f" and not np.isfinite(state).all() else None
    if isinstance(state, float):
        return path if not math.isfinite(state) else None
    items = (state.items() if isinstance(state, dict)
             else enumerate(state) if isinstance(state, (list, tuple)) else ())
    for key, value in items:
        found = nonfinite_path(value, f"{path}.{key}" if isinstance(state, dict)
                               else f"{path}[{key}]")
        if found:
            return found
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


# -- the agent under test and its envs -----------------------------------------------------
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
    """Training envs stepped the way ``runner.loop.Trainer`` steps them (same Step values)."""

    def __init__(self, case: EnvCase, num_envs: int, vector_mode: str, seed: int):
        self.spec = case.spec
        self.seed = seed
        self.envs = make_train_envs(case.spec, num_envs, vector_mode)
        self.obs = self.envs.reset(seed=seed)
        self.env_steps = 0
        self.episodes = 0

    def step(self, actions: np.ndarray) -> Step:
        try:
            nxt, rewards, next_obs, terminated, truncated, finished = self.envs.step(actions)
        except Exception as err:  # the env refusing the agent's actions is the finding
            raise CheckFailed(f"the env rejected the actions {actions!r} at env step "
                              f"{self.env_steps}: {describe_error(err)}") from err
        self.env_steps += self.envs.num_envs
        self.episodes += len(finished)
        step = Step(self.obs, actions, rewards, next_obs, terminated, truncated, self.env_steps)
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
        return x if self.envs.normalizer is None else self.envs.normalizer(x)

    def close(self) -> None:
        self.envs.close()

    def __enter__(self) -> Rollout:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def copy_step(step: Step) -> Step:
    """An independent copy, so one agent's in-place edits cannot reach another agent."""
    return Step(*(np.array(getattr(step, f), copy=True) for f in
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


# -- agent-level checks --------------------------------------------------------------------
def check_contract_version(s: Subject) -> tuple[str, str]:
    for attr in ("contract_version", "CONTRACT_VERSION"):
        value = getattr(s.cls, attr, None)
        if value is not None:
            if isinstance(value, bool) or value != CONTRACT_VERSION:
                raise CheckFailed(f"{attr} = {value!r}, but this runner implements contract "
                                  f"version {CONTRACT_VERSION} (agents.base.CONTRACT_VERSION)")
            return "PASS", f"{attr} = {value} matches agents.base.CONTRACT_VERSION"
    return "PASS", (f"not declared (no contract_version attribute); agents.base contract "
                    f"version {CONTRACT_VERSION} applies")


def check_config(s: Subject) -> tuple[str, str]:
    gamma = getattr(s.config, "gamma", None)
    if isinstance(gamma, bool) or not isinstance(gamma, (int, float)) or not 0 < gamma <= 1:
        raise CheckFailed(f"Config.gamma must be a number in (0, 1], got {gamma!r} "
                          "(the runner reports discounted returns with it)")
    n = getattr(s.config, "num_envs", 1)
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise CheckFailed(f"Config.num_envs must be a positive integer, got {n!r}")
    mode = getattr(s.config, "vector_mode", "sync")
    if mode not in ("sync", "async"):
        raise CheckFailed(f"Config.vector_mode must be 'sync' or 'async', got {mode!r}")
    return "PASS", f"gamma {gamma}, num_envs {n}, vector_mode {mode}"


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


def check_declares(s: Subject) -> tuple[str, str]:
    listed = declared(s.cls)
    yes = []
    for space in STANDARD_SPACES:
        if supports(s.cls, space):
            if not isinstance(space, listed):
                raise CheckFailed(f"supports({space}) is True, but action_spaces "
                                  f"({_names(listed)}) does not list {type(space).__name__}")
            yes.append(type(space).__name__)
    return "PASS", (f"action_spaces = ({_names(listed)}); of the standard spaces supports() "
                    f"is True for {', '.join(yes) or 'none'}")


def refusal(s: Subject, obs_space: spaces.Space, space: spaces.Space) -> tuple[bool, str]:
    """Build the agent for an unsupported ``space``: (refused, what it raised or did)."""
    try:
        agent = s.cls(obs_space, space, s.config, s.seed)
    except Exception as err:  # refusing is what is asked for; any exception type will do
        return True, describe_error(err)
    obs_space.seed(0)
    obs = np.stack([obs_space.sample() for _ in range(2)])
    try:
        actions = agent.act(obs, True)
    except Exception as err:  # constructed, then failed at the first act: not a clean refusal
        return False, f"built for {space} without complaint; act() then raised " \
                      f"{describe_error(err)}"
    problem = action_problem(actions, 2, space)
    return False, (f"built for {space} without complaint and "
                   + (f"acted with invalid actions ({problem})" if problem else "acted in it"))


def check_refuses(s: Subject) -> tuple[str, str]:
    listed = declared(s.cls)
    unsupported = [sp for sp in STANDARD_SPACES if not supports(s.cls, sp)]
    if not unsupported:
        return "PASS", "supports every standard action space; nothing to refuse"
    raised = []
    for space in unsupported:
        if isinstance(space, listed):
            continue  # listed, but narrowed by supports(): not a space it disowns
        refused, what = refusal(s, PROBE_OBS_SPACE, space)
        if not refused:
            return "WARN", f"supports({space}) is False, but it was {what}"
        raised.append(what)
    names = ", ".join(str(sp) for sp in unsupported)
    if not raised:
        return "PASS", f"supports() False for {names}, all of them listed classes (narrowed)"
    return "PASS", f"supports() False for {names}; building it anyway raises ({raised[0]})"


def _names(classes: Sequence[type]) -> str:
    return ", ".join(c.__name__ for c in classes)


# -- per-env checks ------------------------------------------------------------------------
class Unsupported(Exception):
    """The env's action space is refused by ``supports()``: the other checks are skipped."""


def check_spaces(s: Subject, case: EnvCase) -> tuple[str, str]:
    listed = declared(s.cls)
    space = case.action_space
    if not supports(s.cls, space):
        raise Unsupported(f"{space} not supported (action_spaces: {_names(listed)}); "
                          "not constructed")
    if not isinstance(space, listed):
        raise CheckFailed(f"supports({space}) is True but action_spaces ({_names(listed)}) "
                          f"does not list {type(space).__name__}")
    t0 = time.perf_counter()
    s.make(case)
    ms = 1000 * (time.perf_counter() - t0)
    return "PASS", f"{space} supported; constructed in {ms:.0f} ms"


def probe_actions(agent: Agent, batches: list[tuple[str, np.ndarray]], space: spaces.Space,
                  when: str) -> int:
    count = 0
    for label, obs in batches:
        for explore in (False, True):
            actions = call(f"act({label}, explore={explore})", agent.act, obs.copy(), explore)
            problem = action_problem(actions, len(obs), space)
            if problem:
                raise CheckFailed(f"{when}, act(explore={explore}) on a {label}: {problem}")
            count += 1
    return count


def check_actions(s: Subject, case: EnvCase) -> tuple[str, str]:
    agent = s.make(case)
    space = case.action_space
    with rollout(s, case) as roll:
        batches = [(f"training batch of {s.num_envs}", roll.obs),
                   ("evaluation batch of 1", roll.eval_batch())]
        probes = probe_actions(agent, batches, space, "fresh agent")
        for _ in range(ACTION_STEPS):
            actions = call("act(explore=True)", agent.act, roll.obs.copy(), True)
            problem = action_problem(actions, s.num_envs, space)
            if problem:
                raise CheckFailed(f"training step at env step {roll.env_steps}: {problem}")
            step = roll.step(actions)
            call(f"observe() at env step {step.env_steps}", agent.observe, step)
        batches[0] = (f"training batch of {s.num_envs}", roll.obs)
        probes += probe_actions(agent, batches, space, f"after {roll.env_steps} env steps")
    dtype = np.asarray(actions).dtype
    shape = "(n,)" if not space.shape else f"(n, {', '.join(map(str, space.shape))})"
    return "PASS", (f"{probes} probes (training batch of {s.num_envs}, evaluation batch of 1; "
                    f"explore True/False; fresh and after {ACTION_STEPS} steps) and "
                    f"{ACTION_STEPS} training batches: ndarray {shape} of {dtype}, every action "
                    f"in {space}")


def lockstep(agents: list[Agent], roll: Rollout, steps: int,
             on_actions: Callable[[int, list[np.ndarray], list[np.ndarray]], None]) -> None:
    """Step ``roll`` with the first agent's actions; every agent acts on and observes the
    same values (copies), greedy first as an evaluation would, then exploring."""
    for _ in range(steps):
        greedy = [call("act(explore=False)", a.act, roll.obs.copy(), False) for a in agents]
        explore = [call("act(explore=True)", a.act, roll.obs.copy(), True) for a in agents]
        on_actions(roll.env_steps, greedy, explore)
        step = roll.step(explore[0])
        for i, a in enumerate(agents):
            call(f"observe() at env step {step.env_steps}", a.observe,
                 step if i == 0 else copy_step(step))


def check_determinism(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    first, twin, other = s.make(case), s.make(case), s.make(case, s.seed + 1)
    other_differs: list[int] = []

    def compare(env_step: int, greedy: list[np.ndarray], explore: list[np.ndarray]) -> None:
        for kind, acts in (("greedy", greedy), ("exploring", explore)):
            if not same_actions(acts[0], acts[1]):
                raise CheckFailed(f"same seed, same inputs, different {kind} actions at env "
                                  f"step {env_step}: {acts[0]!r} vs {acts[1]!r}")
        if not other_differs and not same_actions(explore[0], explore[2]):
            other_differs.append(env_step)

    with rollout(s, case) as roll:
        lockstep([first, twin, other], roll, steps, compare)
        env_steps = roll.env_steps
    diff = first_difference(call("state_dict()", first.state_dict),
                            call("state_dict()", twin.state_dict))
    if diff:
        raise CheckFailed(f"same seed, same inputs: state_dict differs after {env_steps} env "
                          f"steps at {diff}")
    done = f"seed {s.seed} twice: identical actions and state_dict over {env_steps} env steps"
    if not other_differs:
        return "WARN", (f"{done}; but seed {s.seed + 1} gave the same exploring actions "
                        "throughout (a deterministic policy, or the seed is ignored?)")
    return "PASS", f"{done}; seed {s.seed + 1} differs from env step {other_differs[0]}"


def check_round_trip(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    original = s.make(case)
    more = max(MIN_STEPS, steps // 5)
    with rollout(s, case) as roll:
        for _ in range(steps):
            step = roll.step(call("act(explore=True)", original.act, roll.obs.copy(), True))
            call(f"observe() at env step {step.env_steps}", original.observe, step)
        saved_at = roll.env_steps
        loaded, size = roundtrip_bytes(call("state_dict()", original.state_dict))
        restored = s.make(case)
        call("load_state_dict(torch.load(...))", restored.load_state_dict, loaded)
        diff = first_difference(call("state_dict()", original.state_dict),
                                call("state_dict()", restored.state_dict))
        if diff:
            raise CheckFailed(f"right after load_state_dict, state_dict() differs from the "
                              f"saved one at {diff}")

        def compare(env_step: int, greedy: list[np.ndarray], explore: list[np.ndarray]) -> None:
            for kind, acts in (("greedy", greedy), ("exploring", explore)):
                if not same_actions(acts[0], acts[1]):
                    raise CheckFailed(
                        f"saved at env step {saved_at}, restored copy's {kind} actions differ "
                        f"at env step {env_step}: {acts[0]!r} vs {acts[1]!r} (state_dict is "
                        "missing something)")

        lockstep([original, restored], roll, more, compare)
        env_steps = roll.env_steps
    diff = first_difference(call("state_dict()", original.state_dict),
                            call("state_dict()", restored.state_dict))
    if diff:
        raise CheckFailed(f"saved at env step {saved_at}; after {env_steps - saved_at} more env "
                          f"steps the restored copy's state_dict differs at {diff}")
    return "PASS", (f"saved at env step {saved_at} ({size / 1024:.0f} KiB, "
                    f"weights_only load), restored copy identical for {env_steps - saved_at} "
                    "more env steps")


def global_rng_state() -> tuple[Any, Any, torch.Tensor]:
    return random.getstate(), np.random.get_state(), torch.get_rng_state()


def changed_rngs(before: tuple[Any, Any, torch.Tensor]) -> list[str]:
    now = global_rng_state()
    found = []
    if before[0] != now[0]:
        found.append("python random")
    b, n = before[1], now[1]
    if not (b[0] == n[0] and np.array_equal(b[1], n[1]) and b[2:] == n[2:]):
        found.append("numpy.random (legacy global)")
    if not torch.equal(before[2], now[2]):
        found.append("torch global")
    return found


def seed_globals(seed: int) -> None:
    random.seed(seed)
    np.random.seed(seed % 2**32)
    torch.manual_seed(seed)


def check_global_rng(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    saved = global_rng_state()  # put back afterwards: the caller's streams are not ours
    try:
        return _check_global_rng(s, case, max(MIN_STEPS, steps // 2))
    finally:
        random.setstate(saved[0])
        np.random.set_state(saved[1])
        torch.set_rng_state(saved[2])


def _check_global_rng(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    with rollout(s, case) as roll:
        eval_obs = roll.eval_batch()
        seed_globals(GLOBAL_SEED)
        before = global_rng_state()
        agent = s.make(case)
        at_build = changed_rngs(before)
        for _ in range(steps):
            for what, explore, obs in (("act(explore=False)", False, eval_obs),
                                       ("act(explore=True)", True, roll.obs)):
                before = global_rng_state()
                actions = call(what, agent.act, obs.copy(), explore)
                if changed_rngs(before):
                    raise CheckFailed(f"{what} at env step {roll.env_steps} changed the "
                                      f"{' and '.join(changed_rngs(before))} RNG state")
            step = roll.step(actions)  # the env may use what it likes; only the agent is timed
            before = global_rng_state()
            call(f"observe() at env step {step.env_steps}", agent.observe, step)
            if changed_rngs(before):
                raise CheckFailed(f"observe() at env step {step.env_steps} changed the "
                                  f"{' and '.join(changed_rngs(before))} RNG state")
        before = global_rng_state()
        call("state_dict()", agent.state_dict)
        if changed_rngs(before):
            raise CheckFailed(f"state_dict() changed the {' and '.join(changed_rngs(before))} "
                              "RNG state")
        env_steps = roll.env_steps
    done = f"act/observe/state_dict left python, numpy and torch global RNGs untouched for " \
           f"{env_steps} env steps"
    if not at_build:
        return "PASS", f"construction and {done}"
    return construction_draws(s, case, at_build, done)


def construction_draws(s: Subject, case: EnvCase, rngs: list[str], done: str) -> tuple[str, str]:
    """Construction advanced a global RNG: a FAIL if the agent depends on the draws."""
    seed_globals(GLOBAL_SEED)
    a = s.make(case)
    seed_globals(GLOBAL_SEED + 1)
    b = s.make(case)
    diff = first_difference(call("state_dict()", a.state_dict), call("state_dict()", b.state_dict))
    if diff:
        raise CheckFailed(f"construction draws from the {' and '.join(rngs)} RNG and the "
                          f"agent depends on it (state_dict differs at {diff} when only the "
                          "global seed differs)")
    return "WARN", (f"construction advances the {' and '.join(rngs)} RNG, but the agent does "
                    f"not depend on it (e.g. torch's default nn.Linear init, then re-drawn "
                    f"from the seed); {done}")


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
    state0 = state_nbytes(call("state_dict()", agent.state_dict))
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
    state1 = state_nbytes(call("state_dict()", agent.state_dict))
    rss = None if rss0 is None or rss1 is None else rss1 - rss0 - (own1 - own0)
    return Growth(traced1 - traced0, tensors1 - tensors0, rss, state1 - state0)


def check_learn_loop(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    agent = s.make(case)
    measured = max(steps, MIN_MEMORY_STEPS)
    with_metrics = [0]
    keys: set[str] = set()

    def loop(roll: Rollout, n: int) -> None:
        for _ in range(n):
            step = roll.step(call("act(explore=True)", agent.act, roll.obs, True))
            where = f"observe() at env step {step.env_steps}"
            metrics = call(where, agent.observe, step)
            problem = metrics_problem(metrics)
            if problem:
                raise CheckFailed(f"{where} {problem}" if problem.startswith("returned")
                                  else f"{where}: {problem}")
            if metrics:
                with_metrics[0] += 1
                keys.update(metrics)

    with rollout(s, case) as roll:
        loop(roll, steps)
        growth = measure_growth(agent, lambda: loop(roll, measured))
        env_steps, episodes = roll.env_steps, roll.episodes
    bad = nonfinite_path(call("state_dict()", agent.state_dict))
    if bad:
        raise CheckFailed(f"after {env_steps} env steps {bad} holds NaN or inf")
    leak = growth.problem(measured)
    if leak:
        raise CheckFailed(leak)
    which = f" ({', '.join(sorted(keys))})" if keys else " (none returned)"
    return "PASS", (f"{env_steps} env steps, {episodes} episodes; metrics on {with_metrics[0]} "
                    f"steps{which}, all finite; state finite; memory over the last {measured} "
                    f"steps: {growth.text()}")


# -- running the checks ---------------------------------------------------------------------
def timed(scope: str, check: str, fn: Callable[[], tuple[str, str]]) -> Result:
    t0 = time.perf_counter()
    try:
        status, detail = fn()
        clean = False
    except Unsupported as err:
        status, detail, clean = "SKIP", str(err), True
    except CheckFailed as err:
        status, detail, clean = "FAIL", str(err), False
    except Exception as err:  # an env or checker error: still one line, not a traceback
        status, detail, clean = "FAIL", f"check raised {describe_error(err)}", False
    return Result(scope, check, status, detail, time.perf_counter() - t0, clean)


def run_checks(s: Subject, cases: Sequence[EnvCase], steps: int,
               report: Callable[[Result], None] = lambda r: None) -> list[Result]:
    """Every check on every env; ``report`` sees each result as soon as it is known."""
    results: list[Result] = []

    def add(result: Result) -> Result:
        results.append(result)
        report(result)
        return result

    for name, fn in (("contract_version", check_contract_version), ("config", check_config),
                     ("declares", check_declares)):
        add(timed("agent", name, lambda fn=fn: fn(s)))
    if not all(r.ok for r in results[1:]):
        return results  # no usable config or no declared spaces: nothing to try per env
    add(timed("agent", "refuses", lambda: check_refuses(s)))
    per_env: list[tuple[str, Callable[[EnvCase], tuple[str, str]]]] = [
        ("actions", lambda c: check_actions(s, c)),
        ("determinism", lambda c: check_determinism(s, c, steps)),
        ("round_trip", lambda c: check_round_trip(s, c, steps)),
        ("global_rng", lambda c: check_global_rng(s, c, steps)),
        ("learn_loop", lambda c: check_learn_loop(s, c, steps)),
    ]
    for case in cases:
        first = add(timed(case.name, "spaces", lambda c=case: check_spaces(s, c)))
        if first.status == "SKIP":
            add(timed(case.name, "refuses", lambda c=case: refuses_env(s, c)))
        for name, fn in per_env:
            if first.status == "PASS":
                add(timed(case.name, name, lambda fn=fn, c=case: fn(c)))
            else:
                why = "action space not supported" if first.clean_skip else "spaces check failed"
                add(Result(case.name, name, "SKIP", why, 0.0, first.clean_skip))
    return results


def refuses_env(s: Subject, case: EnvCase) -> tuple[str, str]:
    refused, what = refusal(s, case.obs_space, case.action_space)
    if not refused:
        return "WARN", f"supports() is False, but it was {what}"
    return "PASS", f"building it anyway for {case.action_space} raises ({what})"


# -- the command ----------------------------------------------------------------------------
@dataclass
class Options:
    target: str
    envs: list[str]
    agent: dict[str, Any]
    seed: int = 0
    steps: int = DEFAULT_STEPS
    config_dirs: list[str] = field(default_factory=list)


def parse_args(argv: Sequence[str]) -> Options:
    from seedsweep.runner.execution.config import parse_overrides

    argv, config_dirs = list(argv), []
    while "--config-dir" in argv:
        i = argv.index("--config-dir")
        if i + 1 >= len(argv):
            raise ConfigError("--config-dir", "expected a folder after --config-dir")
        config_dirs.append(argv[i + 1])
        del argv[i:i + 2]
    options = [a for a in argv if a.startswith("-")]
    if options:
        raise ConfigError("options", f"unknown option {options[0]!r} (see seedsweep "
                          "check-agent --help)")
    targets = [a for a in argv if "=" not in a]
    if len(targets) != 1:
        raise ConfigError("target", ("missing" if not targets else
                                     f"one target expected, got {len(targets)}")
                          + ": an agent config name, module:Class or path/to/file.py:Class")
    opts = Options(targets[0], [], {}, config_dirs=config_dirs)
    for o in parse_overrides([a for a in argv if "=" in a]):
        key = o.get_key_element().lstrip("+")
        if key == "env":
            if o.is_sweep_override():
                opts.envs += [str(v) for v in o.sweep_string_iterator()]
            else:
                opts.envs.append(o.get_value_element_as_str())
            continue
        if o.is_sweep_override():
            raise ConfigError(key, "one value expected (check-agent runs no sweeps)")
        if key.startswith("agent.") and len(key) > len("agent."):
            opts.agent[key.removeprefix("agent.")] = o.value()
        elif key in ("seed", "steps"):
            value = check_type(key, o.value(), int)
            low = 0 if key == "seed" else MIN_STEPS
            if value < low:
                raise ConfigError(key, f"must be an integer >= {low} (got {value})")
            setattr(opts, key, value)
        else:
            raise ConfigError(key, "unknown option (allowed: env=NAME, agent.KEY=VALUE, "
                              "seed=N, steps=N)")
    opts.envs = list(dict.fromkeys(opts.envs or DEFAULT_ENVS))
    return opts


def resolve_target(target: str, config_dirs: Sequence[str] = ()
                   ) -> tuple[type[Agent], dict[str, Any], str]:
    """The agent class, its hyperparameters from YAML (if a config name) and a label."""
    from seedsweep.runner.execution.config import compose, group_options
    from seedsweep.runner.execution.run import load_agent_class

    values: dict[str, Any] = {}
    entry = target
    if ":" not in target:
        allowed = group_options("agent", config_dirs)
        if target not in allowed:
            raise ConfigError("target", f"unknown agent config {target!r} (allowed: "
                              f"{', '.join(allowed)}; or module:Class, or path/to/file.py:Class)")
        values = dict(compose([f"agent={target}"], [Path(d) for d in config_dirs])["agent"])
        values.pop("name", None)
        entry = values.pop("entry", None)
    try:
        cls = load_agent_class(entry)
    except ConfigError as err:
        raise ConfigError("target", str(err).split(": ", 1)[-1]) from None
    return cls, values, (f"{target} ({entry})" if entry != target else target)


def env_specs(names: Sequence[str], config_dirs: Sequence[str] = ()
              ) -> list[tuple[str, EnvSpec]]:
    from seedsweep.runner.execution.config import compose, group_options

    dirs = [Path(d) for d in config_dirs]
    allowed = group_options("env", dirs)
    for name in names:
        if name not in allowed:
            raise ConfigError("env", f"unknown option {name!r} (allowed: {', '.join(allowed)})")
    return [(name, parse_env_config(compose([f"env={name}"], dirs)["env"])) for name in names]


def check_agent_main(argv: Sequence[str]) -> int:
    """``seedsweep check-agent``: 0 if every check passed, 1 if any failed, 2 bad input."""
    if any(a in ("-h", "--help") for a in argv):
        print(USAGE)
        return 0
    opts = parse_args(argv)
    cls, values, label = resolve_target(opts.target, opts.config_dirs)
    if not dataclasses.is_dataclass(getattr(cls, "Config", None)):
        print(f"seedsweep check-agent: {label}")
        print(Result("agent", "config", "FAIL", "Config is not a dataclass (see agents/base.py)")
              .line())
        return 1
    config = build_config(cls, {**values, **opts.agent})
    specs = env_specs(opts.envs, opts.config_dirs)
    torch.set_num_threads(1)
    subject = Subject(cls, config, opts.seed)
    print(f"seedsweep check-agent: {label}, seed {opts.seed}, {opts.steps} steps per loop, "
          f"envs {', '.join(opts.envs)}", flush=True)
    cases = [env_case(name, spec, subject.num_envs, subject.vector_mode) for name, spec in specs]
    results = run_checks(subject, cases, opts.steps, lambda r: print(r.line(), flush=True))
    counts = {k: sum(r.status == k for r in results) for k in ("PASS", "WARN", "SKIP", "FAIL")}
    bad_skips = sum(r.status == "SKIP" and not r.clean_skip for r in results)
    ok = all(r.ok for r in results)
    print(f"result: {'OK' if ok else 'FAILED'}: {counts['PASS']} passed, {counts['WARN']} "
          f"warning{'' if counts['WARN'] == 1 else 's'}, {counts['SKIP']} skipped"
          + (f" ({bad_skips} because of a failure)" if bad_skips else "")
          + f", {counts['FAIL']} failed", flush=True)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(check_agent_main(sys.argv[1:]))
