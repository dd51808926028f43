"""The checks of ``seedsweep check-agent``: does an agent keep the contract?

The runner trusts every agent to act inside its action space, to be a function of its seed
and of what it is shown only, to save all it needs in ``state_dict`` and to leave the global
RNGs alone. A breach shows up much later as a wrong or irreproducible result, so each
promise is tried directly, on real training envs stepped the way the training loop steps
them; each check gives one line:

* PASS, or WARN (a pass with a caveat worth reading);
* SKIP: the env's action space is not supported and ``supports()`` said so (a pass);
* FAIL, with the reason.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from gymnasium import spaces
from seedsweep.agents.base import CONTRACT_VERSION, Agent
from seedsweep.runner.agent_check.harness import (
    MIN_STEPS,
    CheckFailed,
    EnvCase,
    Rollout,
    Subject,
    call,
    describe_error,
    frozen,
    lockstep,
    measure_growth,
    rollout,
)
from seedsweep.runner.agent_check.inspect import (
    PROBE_OBS_SPACE,
    STANDARD_SPACES,
    _names,
    action_problem,
    declared,
    metrics_problem,
    same_actions,
    supports,
)
from seedsweep.runner.agent_check.round_trip import check_round_trip
from seedsweep.runner.execution.seeding import (
    capture_global_rngs,
    restore_global_rngs,
    seed_globals,
)
from seedsweep.runner.execution.state import first_difference, nonfinite_path

DEFAULT_ENVS = ("cartpole", "pendulum", "frozenlake")


DEFAULT_STEPS = 300  # act/observe calls per loop; "a few hundred" keeps a check run short



ACTION_STEPS = 50  # training steps between the two action probes of the actions check


MIN_MEMORY_STEPS = 300  # the measured loop: a 1 MB / 100 steps leak grows >= 3 MB in it


GLOBAL_SEED = 20_250_101  # the known state the global RNGs are put in (any value works)


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
    obs = frozen(np.stack([obs_space.sample() for _ in range(2)]))
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
            actions = call(f"act({label}, explore={explore})", agent.act, frozen(obs),
                           explore)
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
            actions = call("act(explore=True)", agent.act, frozen(roll.obs), True)
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


RNG_NAMES = {"python": "python random", "numpy": "numpy.random (legacy global)",
             "torch": "torch global"}


def changed_rngs(before: dict) -> list[str]:
    """The global RNGs whose state differs from ``before`` (a :func:`capture_global_rngs`)."""
    now = capture_global_rngs()
    return [text for key, text in RNG_NAMES.items()
            if first_difference(before[key], now[key]) is not None]


def check_global_rng(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    saved = capture_global_rngs()  # put back afterwards: the caller's streams are not ours
    try:
        return _check_global_rng(s, case, max(MIN_STEPS, steps // 2))
    finally:
        restore_global_rngs(saved)


def _check_global_rng(s: Subject, case: EnvCase, steps: int) -> tuple[str, str]:
    with rollout(s, case) as roll:
        eval_obs = roll.eval_batch()
        seed_globals(GLOBAL_SEED)
        before = capture_global_rngs()
        agent = s.make(case)
        at_build = changed_rngs(before)
        for _ in range(steps):
            for what, explore, obs in (("act(explore=False)", False, eval_obs),
                                       ("act(explore=True)", True, roll.obs)):
                before = capture_global_rngs()
                actions = call(what, agent.act, frozen(obs), explore)
                if changed_rngs(before):
                    raise CheckFailed(f"{what} at env step {roll.env_steps} changed the "
                                      f"{' and '.join(changed_rngs(before))} RNG state")
            step = roll.step(actions)  # the env may use what it likes; only the agent is timed
            before = capture_global_rngs()
            call(f"observe() at env step {step.env_steps}", agent.observe, step)
            if changed_rngs(before):
                raise CheckFailed(f"observe() at env step {step.env_steps} changed the "
                                  f"{' and '.join(changed_rngs(before))} RNG state")
        before = capture_global_rngs()
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
