"""An agent's search space: the ``search:`` section of its YAML, checked against its Config.

Each key of ``search:`` names a hyperparameter of the agent's ``Config`` and gives either a
range or a list of choices::

    search:
      lr: {low: 1.0e-4, high: 1.0e-2, log: true}      # float: any value in the range
      target_period_steps: {low: 100, high: 2000, log: true}  # int field: integers only
      hidden: {choices: [[64, 64], [128, 128]]}       # any type the field takes

A range needs a numeric field (``int``, ``float``, optionally ``| None``); an ``int`` field
gets integer suggestions. ``step`` (optional) spaces the values evenly; it cannot be combined
with ``log``. Every bound and every choice is also built into the agent's Config, so a value
the agent would refuse is refused here, before any trial starts.
"""

from __future__ import annotations

import dataclasses
import json
import math
import types
import typing
from dataclasses import dataclass
from typing import Any

from optuna.distributions import (
    BaseDistribution,
    CategoricalDistribution,
    FloatDistribution,
    IntDistribution,
)
from seedsweep.agents.base import Agent, build_config
from seedsweep.configs.checks import ConfigError, check_type, unknown_key
from seedsweep.runner.execution.config import AGENT_RECORDS, AGENT_SECTIONS, hydra_value

RANGE_KEYS = ("low", "high", "log", "step")
SPEC_KEYS = (*RANGE_KEYS, "choices")
PRIMITIVE = (type(None), bool, int, float, str)


@dataclass(frozen=True)
class Dimension:
    """One searched hyperparameter: a range (``low``/``high``) or a list of ``choices``."""

    key: str
    kind: str  # "int" | "float" | "choice"
    low: float | int | None = None
    high: float | int | None = None
    log: bool = False
    step: float | int | None = None
    choices: tuple[Any, ...] = ()

    @property
    def encoded(self) -> bool:
        """Choices that are not plain scalars (e.g. layer widths) go to optuna as JSON text."""
        return self.kind == "choice" and not all(isinstance(c, PRIMITIVE) for c in self.choices)

    def distribution(self) -> BaseDistribution:
        if self.kind == "int":
            return IntDistribution(int(self.low), int(self.high), log=self.log,
                                   step=int(self.step or 1))
        if self.kind == "float":
            return FloatDistribution(float(self.low), float(self.high), log=self.log,
                                     step=None if self.step is None else float(self.step))
        options = [json.dumps(c) for c in self.choices] if self.encoded else list(self.choices)
        return CategoricalDistribution(options)

    def decode(self, value: Any) -> Any:
        """optuna's parameter value as the agent's value."""
        if self.kind == "int":
            return int(value)
        if self.kind == "float":
            return float(value)
        return json.loads(value) if self.encoded else value

    def describe(self) -> dict[str, Any]:
        """As recorded in study.json (and compared when a study is continued)."""
        if self.kind == "choice":
            return {"choices": list(self.choices)}
        out = {"low": self.low, "high": self.high, "log": self.log, "type": self.kind}
        if self.step is not None:
            out["step"] = self.step
        return out


@dataclass(frozen=True)
class SearchSpace:
    agent: str
    dimensions: tuple[Dimension, ...]

    @property
    def keys(self) -> list[str]:
        return [d.key for d in self.dimensions]

    def distributions(self) -> dict[str, BaseDistribution]:
        return {d.key: d.distribution() for d in self.dimensions}

    def decode(self, params: dict[str, Any]) -> dict[str, Any]:
        return {d.key: d.decode(params[d.key]) for d in self.dimensions}

    def complete(self, params: dict[str, Any]) -> bool:
        """Whether a trial drew a value for every key (a trial cut short while drawing
        did not)."""
        return set(params) == set(self.keys)

    def overrides(self, values: dict[str, Any]) -> list[str]:
        """``agent.KEY=VALUE`` command-line overrides for a trial's values."""
        return [f"agent.{k}={hydra_value(values[k])}" for k in self.keys]

    def describe(self) -> dict[str, Any]:
        return {d.key: d.describe() for d in self.dimensions}


def parse(agent: str, doc: dict[str, Any], agent_cls: type[Agent], where: str) -> SearchSpace:
    """The checked search space of agent config ``agent`` (its YAML ``doc``, read from
    ``where``); ConfigError naming ``<agent>.search.<key>`` otherwise."""
    field = f"{agent}.search"
    section = doc.get("search")
    if section is None:
        raise ConfigError(field, f"{where} has no search: section, so {agent} cannot be tuned; "
                          "add one, e.g. search: {lr: {low: 1.0e-4, high: 1.0e-2, log: true}}")
    if not isinstance(section, dict) or not section:
        raise ConfigError(field, f"expected a mapping of hyperparameter -> range or choices "
                          f"(in {where}), got {section!r}")
    fields = {f.name for f in dataclasses.fields(agent_cls.Config)}
    hints = typing.get_type_hints(agent_cls.Config)
    base = {k: v for k, v in doc.items() if k not in (*AGENT_RECORDS, *AGENT_SECTIONS)}
    dims = []
    for key, spec in section.items():
        key_field = f"{field}.{key}"
        if key not in fields:
            raise unknown_key(key_field, str(key), fields, "hyperparameter")
        dim = _dimension(key_field, str(key), spec, hints[key])
        _check_with_agent(key_field, agent_cls, base, dim)
        dims.append(dim)
    return SearchSpace(agent, tuple(dims))


def _numeric_kind(hint: Any) -> str | None:
    """"int" or "float" for a field typed int/float (optionally ``| None``), else None."""
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        inner = [a for a in typing.get_args(hint) if a is not type(None)]
        hint = inner[0] if len(inner) == 1 else None
    return {int: "int", float: "float"}.get(hint)


def _type_name(hint: Any) -> str:
    return getattr(hint, "__name__", None) if isinstance(hint, type) else str(hint)


def _dimension(field: str, key: str, spec: Any, hint: Any) -> Dimension:
    if not isinstance(spec, dict):
        raise ConfigError(field, f"expected {{low: ..., high: ...}} or {{choices: [...]}}, got "
                          f"{spec!r}")
    for k in spec:
        if k not in SPEC_KEYS:
            raise unknown_key(f"{field}.{k}", str(k), SPEC_KEYS, "key")
    if "choices" in spec:
        extra = [k for k in RANGE_KEYS if k in spec]
        if extra:
            raise ConfigError(field, f"give either choices or a range, not both (found "
                              f"choices and {extra[0]})")
        choices = spec["choices"]
        if not isinstance(choices, list) or not choices:
            raise ConfigError(field, f"choices must be a non-empty list, got {choices!r}")
        checked = [check_type(f"{field}.choices[{i}]", c, hint) for i, c in enumerate(choices)]
        texts = [json.dumps(c, sort_keys=True) for c in checked]
        if len(set(texts)) != len(texts):
            raise ConfigError(field, f"choices repeat a value ({choices!r})")
        return Dimension(key, "choice", choices=tuple(checked))
    kind = _numeric_kind(hint)
    if kind is None:
        raise ConfigError(field, f"a range needs a numeric hyperparameter, and {key} is "
                          f"{_type_name(hint)}; give choices: [...] instead")
    for k in ("low", "high"):
        if k not in spec:
            raise ConfigError(field, f"a range needs low and high (missing {k})")
    number = int if kind == "int" else float
    low = check_type(f"{field}.low", spec["low"], number)
    high = check_type(f"{field}.high", spec["high"], number)
    if not low < high:
        raise ConfigError(field, f"empty range: low must be < high (got low={low!r}, "
                          f"high={high!r})")
    log = check_type(f"{field}.log", spec.get("log", False), bool)
    if log and low <= 0:
        raise ConfigError(field, f"a log scale needs low > 0 (got low={low!r})")
    step = spec.get("step")
    if step is not None:
        step = check_type(f"{field}.step", step, number)
        if log:
            raise ConfigError(field, "step cannot be combined with log: true")
        if not step > 0 or not math.isfinite(step):
            raise ConfigError(f"{field}.step", f"must be > 0 (got {step!r})")
        if step > high - low:
            raise ConfigError(f"{field}.step", f"is wider than the range ({step!r} > "
                              f"{high - low!r})")
    return Dimension(key, kind, low, high, log, step)


def _check_with_agent(field: str, agent_cls: type[Agent], base: dict[str, Any],
                      dim: Dimension) -> None:
    """Build the agent's Config at each bound (or choice): its own range checks apply."""
    probes = list(dim.choices) if dim.kind == "choice" else [dim.low, dim.high]
    names = [f"choice {c!r}" for c in probes] if dim.kind == "choice" else [
        f"low={dim.low!r}", f"high={dim.high!r}"]
    for value, name in zip(probes, names, strict=True):
        try:
            build_config(agent_cls, {**base, dim.key: value})
        except ConfigError as err:
            raise ConfigError(field, f"{name} is refused by the agent ("
                              f"{str(err).split(': ', 1)[-1]})") from None
