"""Build gymnasium environments from an env config (``configs/env/<name>.yaml``)."""

from __future__ import annotations

import dataclasses
import importlib
import logging
import warnings
from dataclasses import dataclass, field
from typing import Any

import gymnasium as gym
import numpy as np
from gymnasium.utils.env_checker import check_env
from seedsweep.configs.checks import ConfigError, check_type
from seedsweep.configs.memory import check_fits
from seedsweep.envs.batch import TrainEnvs
from seedsweep.envs.normalize import ObsNormalizer
from seedsweep.envs.wrappers import WRAPPERS, parse_wrappers

logger = logging.getLogger(__name__)

ENV_KEYS = {"name", "id", "kwargs", "max_episode_steps", "reference", "wrappers"}
# Bytes a frame stack of k observations of b bytes holds per env, over k * b: measured 11-15
# after a reset and a step (gymnasium 1.x on CartPole-v1: the stacked and flattened spaces'
# bounds, the queue and the stacked observation), rounded up.
FRAME_STACK_FACTOR = 16


@dataclass(frozen=True)
class EnvSpec:
    """A checked env config."""

    name: str
    id: str
    kwargs: dict[str, Any] = field(default_factory=dict)
    max_episode_steps: int | None = None
    reference: float | None = None
    wrappers: tuple[tuple[str, dict[str, Any]], ...] = ()
    make_id: str = ""  # what gym.make is called with (differs for module:Class entries)
    instance_bytes: int = 0  # estimated memory of one built env (observation-sized buffers)

    @property
    def env_wrappers(self) -> list[tuple[str, dict[str, Any]]]:
        return [(n, p) for n, p in self.wrappers if WRAPPERS[n].stage == "env"]

    @property
    def normalize(self) -> dict[str, Any] | None:
        found = [p for n, p in self.wrappers if WRAPPERS[n].stage == "normalize"]
        return found[-1] if found else None

    @property
    def reward_transforms(self) -> list[tuple[str, dict[str, Any]]]:
        return [(n, p) for n, p in self.wrappers if WRAPPERS[n].stage == "reward"]


_CHECKED: set[str] = set()


def parse_env_config(cfg: dict[str, Any]) -> EnvSpec:
    """Check an env config and that its environment can be built; raises ConfigError."""
    unknown = sorted(set(cfg) - ENV_KEYS)
    if unknown:
        allowed = ", ".join(sorted(ENV_KEYS))
        raise ConfigError(f"env.{unknown[0]}", f"unknown key (allowed: {allowed})")
    env_id = cfg.get("id")
    if not isinstance(env_id, str) or not env_id:
        raise ConfigError("env.id", f"expected a gymnasium id or module:Class, got {env_id!r}")
    kwargs = cfg.get("kwargs") or {}
    if not isinstance(kwargs, dict):
        raise ConfigError("env.kwargs", f"expected a mapping, got {kwargs!r}")
    mes = cfg.get("max_episode_steps")
    if mes is not None:
        mes = check_type("env.max_episode_steps", mes, int)
        if mes < 1:
            raise ConfigError("env.max_episode_steps", f"must be >= 1 or null (got {mes})")
    ref = cfg.get("reference")
    if ref is not None:
        ref = check_type("env.reference", ref, float)
    spec = EnvSpec(
        name=str(cfg.get("name") or env_id),
        id=env_id,
        make_id=_resolve_id(env_id),
        kwargs=dict(kwargs),
        max_episode_steps=mes,
        reference=ref,
        wrappers=tuple(parse_wrappers(cfg.get("wrappers"))),
    )
    spec = dataclasses.replace(spec, instance_bytes=_instance_bytes(spec))
    env = make_env(spec)
    try:
        if not _has_time_limit(env):
            raise ConfigError(
                "env.max_episode_steps",
                f"{spec.id} has no time limit; set a positive integer so every episode ends",
            )
    finally:
        env.close()
    return spec


def _resolve_id(env_id: str) -> str:
    """A registered id as is; ``module:Class`` is registered with gymnasium first.

    gymnasium reads ``a:b`` in ``gym.make`` as "import a, then make id b", so a class entry
    is registered under ``seedsweep/<module>.<Class>`` instead.
    """
    if env_id in gym.registry:
        return env_id
    if ":" in env_id:
        module_name, _, attr = env_id.partition(":")
        try:
            module = importlib.import_module(module_name)
        except ImportError as err:
            raise ConfigError("env.id", f"cannot import module {module_name!r}: {err}") from None
        target = getattr(module, attr, None)
        if isinstance(target, type) and issubclass(target, gym.Env):
            registered = f"seedsweep/{module_name}.{attr}"
            if registered not in gym.registry:
                gym.register(id=registered, entry_point=target)
            return registered
        if attr in gym.registry:  # gymnasium's "module:EnvId-v0" (the module registers it)
            return attr
        raise ConfigError(
            "env.id",
            f"{attr!r} in {module_name!r} is neither a gymnasium.Env class nor a registered id",
        )
    try:
        gym.spec(env_id)
    except gym.error.Error as err:
        first = str(err).splitlines()[0]
        raise ConfigError("env.id", f"unknown gymnasium id {env_id!r} ({first})") from None
    return env_id


def _bare_env(spec: EnvSpec) -> gym.Env:
    """The env with its kwargs and time limit, before the config's wrappers. Whatever the
    env raises on its kwargs (a TypeError, or a KeyError for an unknown map name) is one
    ConfigError line naming the kwarg when the message shows which."""
    kwargs = dict(spec.kwargs)
    if spec.max_episode_steps is not None:
        kwargs["max_episode_steps"] = spec.max_episode_steps
    try:
        return gym.make(spec.make_id, disable_env_checker=True, **kwargs)
    except ConfigError:
        raise
    except Exception as err:  # an env constructor may raise anything on a bad kwarg
        text = str(err).strip().splitlines()
        reason = f"{type(err).__name__}: {text[0] if text else ''}".rstrip(": ")
        field = "env.kwargs" if spec.kwargs else "env.id"
        named = [k for k, v in spec.kwargs.items() if str(k) in reason or (
            isinstance(v, (str, int, float)) and not isinstance(v, bool) and repr(v) in reason)]
        if len(named) == 1:
            field = f"env.kwargs.{named[0]}"
        what = f"with kwargs {spec.kwargs}" if spec.kwargs else "with no kwargs"
        raise ConfigError(field, f"{spec.id} cannot be built {what} ({reason})") from None


def make_env(spec: EnvSpec) -> gym.Env:
    """One env with the per-env wrappers of ``spec``, in list order."""
    env = _bare_env(spec)
    _check_once(spec, env)
    for i, (name, params) in enumerate(spec.wrappers):
        if WRAPPERS[name].stage != "env":
            continue
        try:
            env = WRAPPERS[name].apply(env, params)
        except Exception as err:  # e.g. a wrapper that does not fit the observation space
            text = str(err).strip().splitlines()
            raise ConfigError(f"env.wrappers[{i}]", f"{name} cannot wrap {spec.id} "
                              f"({type(err).__name__}: {text[0] if text else ''})") from None
    return env


def _instance_bytes(spec: EnvSpec) -> int:
    """Estimated bytes of one built env's observation-sized buffers; a frame stack that
    cannot fit is refused here, before it is built (building it is what would hang)."""
    env = _bare_env(spec)
    try:
        space = env.observation_space
        obs = int(np.prod(space.shape or (1,))) * np.dtype(space.dtype or np.int64).itemsize
    finally:
        env.close()
    total = 0
    for i, (name, params) in enumerate(spec.wrappers):
        if name == "one_hot" and isinstance(space, gym.spaces.Discrete):
            obs = int(space.n) * 8  # gymnasium flattens Discrete to int64 one-hot vectors
        elif name == "frame_stack":
            obs *= params["size"]
            total += FRAME_STACK_FACTOR * obs
            check_fits(f"env.wrappers[{i}].size", 2 * FRAME_STACK_FACTOR * obs,
                       f"frame_stack of {params['size']} observations (a training and an "
                       "evaluation env)")
    return total + 4 * obs


def _check_once(spec: EnvSpec, env: gym.Env) -> None:
    """Run gymnasium's env checker once per process on envs that are not gymnasium's own."""
    entry = getattr(env.spec, "entry_point", "")
    entry_name = entry if isinstance(entry, str) else f"{entry.__module__}:{entry.__name__}"
    if spec.id in _CHECKED or entry_name.startswith("gymnasium.envs"):
        return
    _CHECKED.add(spec.id)
    probe = gym.make(spec.make_id, disable_env_checker=True, **spec.kwargs)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            check_env(probe.unwrapped, skip_render_check=True)
    except Exception as err:  # the checker raises assorted types; any of them is a finding
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise ConfigError("env.id", f"{spec.id} fails gymnasium's env checker: {first}") from None
    finally:
        probe.close()
    for w in caught:
        logger.warning("env checker on %s: %s", spec.id, str(w.message).strip())


def _has_time_limit(env: gym.Env) -> bool:
    e = env
    while isinstance(e, gym.Wrapper):
        if isinstance(e, gym.wrappers.TimeLimit):
            return True
        e = e.env
    return False


def make_train_envs(spec: EnvSpec, num_envs: int = 1, vector_mode: str = "sync") -> TrainEnvs:
    """The training envs: per-env wrappers, then shared normaliser and reward transforms."""
    norm = None
    if spec.normalize is not None:
        shape = make_env(spec).observation_space.shape
        norm = ObsNormalizer(shape, epsilon=spec.normalize["epsilon"], clip=spec.normalize["clip"])
    return TrainEnvs(
        lambda: make_env(spec),
        num_envs,
        vector_mode=vector_mode,
        normalizer=norm,
        reward_transforms=spec.reward_transforms,
    )


def make_eval_env(spec: EnvSpec) -> gym.Env:
    """The evaluation env: same per-env wrappers, no reward transforms (scores stay raw).

    Observation normalisation is applied by the evaluation protocol with the training
    statistics, frozen.
    """
    return make_env(spec)
