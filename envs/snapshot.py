"""An env's state as plain data, put back into a freshly built env of the same config.

Checkpoints live in results folders that other people can write to, so nothing in them may
run code when it is read: no pickled objects. Instead the state of an env (its wrapper
chain, the env itself and the objects they hold) is walked attribute by attribute and kept
as data only: numbers, strings, numpy arrays (as raw bytes, plain dtypes only), numpy
generator states, and lists, tuples, dicts and deques of those. Restoring builds the env
from its config as usual and writes those values back into the attributes the fresh env
already has, object by object, after checking that every object is of the same class. No
constructor, ``__setstate__`` or import is driven by what the file says.

Callables, types, modules, numpy dtypes and the gymnasium ``EnvSpec`` are configuration,
not state, and are left out. Whether that loses something for a given env is not guessed:
:func:`restores_faithfully` replays a restored copy beside the original before a run relies
on it (box2d envs, for instance, keep their bodies in C objects and fail it).
"""

from __future__ import annotations

import collections
import types
from collections.abc import Callable
from typing import Any

import gymnasium as gym
import numpy as np
import torch
from gymnasium.envs.registration import EnvSpec
from seedsweep.envs.fidelity import carries_on_alike

MARK = "@"  # key of every encoded node; user dicts are encoded as item lists, never bare
MAX_DEPTH = 16  # a wrapper chain plus the objects an env holds; deeper graphs are not state
ARRAY_KINDS = "biufcSU"  # bool, integers, floats, complex, byte and unicode strings
BIT_GENERATORS = ("PCG64", "PCG64DXSM", "MT19937", "Philox", "SFC64")
PLAIN = (bool, int, float, str, type(None))


class SnapshotError(RuntimeError):
    """An env state that does not fit the env it is restored into (or is not data)."""


def capture(env: gym.Env) -> dict[str, Any]:
    """The state of ``env`` (its whole wrapper chain) as plain data."""
    return _object(env, set(), 0)


def restore(env: gym.Env, state: Any) -> None:
    """Write a :func:`capture` of an env of the same config into ``env`` (freshly built and
    reset once, so that its lazily made attributes exist)."""
    _restore_object(env, state, "env", 0)


# -- encoding ----------------------------------------------------------------------------
def _skip(value: Any) -> bool:
    return (callable(value) and not isinstance(value, np.ndarray)) or isinstance(
        value, (type, np.dtype, EnvSpec, types.ModuleType)
    )


def _encode(value: Any, seen: set[int], depth: int) -> Any:
    """Plain data for ``value``, or ``_SKIP`` for what is not state."""
    if type(value) in PLAIN:  # exact types: numpy's float64 is a float, but not plain data
        return value
    if isinstance(value, np.generic):
        return _array(np.asarray(value), scalar=True)
    if isinstance(value, np.ndarray):
        return _array(value) if value.dtype.kind in ARRAY_KINDS else _SKIP
    if isinstance(value, np.random.Generator):
        name = type(value.bit_generator).__name__
        if name not in BIT_GENERATORS:
            return _SKIP
        return {MARK: "generator", "bit_generator": name, "state": value.bit_generator.state}
    if isinstance(value, (list, tuple, collections.deque)):
        items = [_encode(v, seen, depth + 1) for v in value]
        if any(i is _SKIP for i in items):
            return _SKIP
        if isinstance(value, collections.deque):
            return {MARK: "deque", "maxlen": value.maxlen, "items": items}
        return {MARK: type(value).__name__, "items": items}
    if isinstance(value, dict):
        if not all(type(k) in PLAIN for k in value):
            return _SKIP
        pairs = [[k, _encode(v, seen, depth + 1)] for k, v in value.items()]
        if any(v is _SKIP for _, v in pairs):
            return _SKIP
        return {MARK: "dict", "items": pairs}
    if _skip(value) or depth > MAX_DEPTH or not hasattr(value, "__dict__"):
        return _SKIP
    return _object(value, seen, depth)


def _object(obj: Any, seen: set[int], depth: int) -> Any:
    if id(obj) in seen:
        return _SKIP  # shared or cyclic references are kept by the fresh env itself
    seen.add(id(obj))
    attrs = {}
    for name, value in vars(obj).items():
        encoded = _encode(value, seen, depth + 1)
        if encoded is not _SKIP:
            attrs[name] = encoded
    return {MARK: "object", "class": _class_name(type(obj)), "attrs": attrs}


def _array(a: np.ndarray, scalar: bool = False) -> dict[str, Any]:
    data = np.array(a, order="C", copy=True)  # (ascontiguousarray makes 0-d arrays 1-d)
    raw = torch.frombuffer(bytearray(data.tobytes()), dtype=torch.uint8) if data.nbytes else (
        torch.zeros(0, dtype=torch.uint8))
    return {MARK: "scalar" if scalar else "array", "dtype": data.dtype.str,
            "shape": list(data.shape), "data": raw}


class _Skip:
    pass


_SKIP = _Skip()


def _class_name(cls: type) -> str:
    return f"{cls.__module__}.{cls.__qualname__}"


# -- decoding ----------------------------------------------------------------------------
def _node(state: Any, where: str) -> str:
    if isinstance(state, dict) and isinstance(state.get(MARK), str):
        return state[MARK]
    if type(state) in PLAIN:
        return "plain"
    raise SnapshotError(f"{where}: not an encoded value ({type(state).__name__})")


def _decode(state: Any, where: str) -> Any:
    """A plain value from its encoding (objects are restored in place, not decoded)."""
    kind = _node(state, where)
    if kind == "plain":
        return state
    if kind in ("array", "scalar"):
        dtype = np.dtype(str(state["dtype"]))
        if dtype.kind not in ARRAY_KINDS:
            raise SnapshotError(f"{where}: arrays of dtype {dtype} are not restored")
        shape = tuple(int(s) for s in state["shape"])
        data = state["data"]
        if not isinstance(data, torch.Tensor) or data.dtype != torch.uint8:
            raise SnapshotError(f"{where}: array data is not a byte tensor")
        a = np.frombuffer(data.numpy().tobytes(), dtype=dtype).reshape(shape).copy()
        return a[()] if kind == "scalar" else a
    if kind == "generator":
        name = state["bit_generator"]
        if name not in BIT_GENERATORS:
            raise SnapshotError(f"{where}: unknown bit generator {name!r}")
        g = np.random.Generator(getattr(np.random, name)())
        g.bit_generator.state = state["state"]
        return g
    if kind in ("list", "tuple", "deque"):
        items = [_decode(v, f"{where}[{i}]") for i, v in enumerate(state["items"])]
        if kind == "list":
            return items
        if kind == "tuple":
            return tuple(items)
        maxlen = state["maxlen"]
        return collections.deque(items, maxlen=None if maxlen is None else int(maxlen))
    if kind == "dict":
        out = {}
        for pair in state["items"]:
            key, value = pair
            if type(key) not in PLAIN:
                raise SnapshotError(f"{where}: dict key {key!r} is not a plain value")
            out[key] = _decode(value, f"{where}[{key!r}]")
        return out
    if kind == "object":
        raise SnapshotError(f"{where}: an object where the env holds a plain value")
    raise SnapshotError(f"{where}: unknown node {kind!r}")


def _restore_object(obj: Any, state: Any, where: str, depth: int) -> None:
    if _node(state, where) != "object":
        raise SnapshotError(f"{where}: expected an object state")
    if state["class"] != _class_name(type(obj)) or depth > MAX_DEPTH:
        raise SnapshotError(f"{where}: saved from a {state['class']}, restoring into a "
                            f"{_class_name(type(obj))}")
    own = vars(obj)
    attrs = state["attrs"]
    if not isinstance(attrs, dict):
        raise SnapshotError(f"{where}: attributes are not a mapping")
    for name, value in attrs.items():
        if not isinstance(name, str) or name not in own:
            raise SnapshotError(f"{where}: the fresh env has no attribute {name!r}")
        here = f"{where}.{name}"
        current = own[name]
        if _node(value, here) == "object":
            _restore_object(current, value, here, depth + 1)
        elif _node(value, here) == "generator" and isinstance(current, np.random.Generator) \
                and type(current.bit_generator).__name__ == value["bit_generator"]:
            current.bit_generator.state = value["state"]  # keep shared references to it
        else:
            own[name] = _decode(value, here)


# -- is it enough? -------------------------------------------------------------------------
def restores_faithfully(make_env: Callable[[], gym.Env], steps: int = 30) -> bool:
    """Whether a fresh env restored from a snapshot carries on exactly like the original."""
    def load(env: gym.Env, state: Any) -> None:
        env.reset(seed=0)  # makes the lazily created attributes, then overwritten
        restore(env, state)

    return carries_on_alike(make_env, capture, load, steps)
