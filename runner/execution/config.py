"""Composing, expanding and checking run configs (hydra's compose API and override grammar).

The CLI expands a sweep into single-run override lists itself and composes each with
hydra, so every run of a sweep is checked before the first one starts and a bad value
never leaves a half-made results folder behind.
"""

from __future__ import annotations

import itertools
import re
from collections import OrderedDict
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import seedsweep.configs
from seedsweep.agents.base import ConfigError, check_type

TOP_KEYS = {
    "agent", "env", "seed", "steps", "eval", "sweep", "results_dir", "torch_threads",
    "checkpoint", "log",
}
GROUPS = ("agent", "env")
SAFE_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]*$")


HYDRA_GROUPS = ("agent", "env")  # config folders that are hydra groups


def config_dir() -> Path:
    """The shipped configs (package data of ``seedsweep.configs``)."""
    return Path(seedsweep.configs.__file__).resolve().parent


_HYDRA_ROOTS: dict[str, str] = {}


def _hydra_root(source: Path) -> str:
    """A folder hydra may read as a config tree: links to ``source``'s run configs only.

    hydra reads every sub-folder of a config folder as a config group, and a group named
    ``sweep`` would capture the ``sweep=NAME`` key; sweep files are plans, not run configs.
    """
    key = str(source.resolve())
    if key not in _HYDRA_ROOTS:
        import atexit
        import shutil
        import tempfile

        root = Path(tempfile.mkdtemp(prefix="seedsweep-configs-"))
        atexit.register(shutil.rmtree, root, True)
        for name in ("config.yaml", *HYDRA_GROUPS):
            if (source / name).exists():
                (root / name).symlink_to(source.resolve() / name)
        _HYDRA_ROOTS[key] = str(root)
    return _HYDRA_ROOTS[key]


def group_options(group: str, extra_dirs: Sequence[Path] = ()) -> list[str]:
    """Names of the YAML files of a config group (``agent``, ``env``, ...)."""
    names = set()
    for root in [config_dir(), *map(Path, extra_dirs)]:
        folder = root / group
        if folder.is_dir():
            names.update(p.stem for p in folder.glob("*.yaml"))
    return sorted(names)


def parse_overrides(overrides: Sequence[str]):
    from hydra.core.override_parser.overrides_parser import OverridesParser
    from hydra.errors import OverrideParseException

    parser = OverridesParser.create()
    try:
        return parser.parse_overrides(list(overrides))
    except OverrideParseException as err:
        raise ConfigError("overrides", str(err).strip().splitlines()[0]) from None


def expand(overrides: Sequence[str], multirun: bool) -> list[list[str]]:
    """One override list per run: the cross product of every swept key (hydra grammar)."""
    parsed = parse_overrides(overrides)
    axes: OrderedDict[str, list[str]] = OrderedDict()
    for o in parsed:
        key = o.get_key_element()
        if o.is_sweep_override():
            if not multirun:
                raise ConfigError(key, "several values given; add -m to run a sweep")
            if not o.is_discrete_sweep():
                raise ConfigError(key, "only lists, range() and choice() sweeps are supported")
            values = [f"{key}={v}" for v in o.sweep_string_iterator()]
            if not values:
                raise ConfigError(key, "the sweep over this key is empty")
            axes[key] = values
        else:
            axes[key] = [f"{key}={o.get_value_element_as_str()}"]
    return [list(combo) for combo in itertools.product(*axes.values())]


SUITE_KEYS = {"name", "description", "envs", "steps", "eval"}


def apply_suite(overrides: Sequence[str], extra_dirs: Sequence[Path] = ()) -> list[list[str]]:
    """Replace ``suite=NAME`` by the suite's envs, budgets and evaluation settings.

    Returns override groups (one per distinct budget); keys the user gives explicitly
    (``steps=``, ``eval.every=``, ``eval.episodes=``, ``sweep=``) win over the suite's.
    """
    import yaml

    suites = [o for o in overrides if o.split("=", 1)[0] == "suite"]
    if not suites:
        return [list(overrides)]
    if len(suites) > 1 or "," in suites[0]:
        raise ConfigError("suite", "give one suite per sweep")
    name = suites[0].split("=", 1)[1]
    allowed = group_options("suite", extra_dirs)
    if name not in allowed:
        raise ConfigError("suite", f"unknown suite {name!r} (allowed: {', '.join(allowed)})")
    path = next(p for p in [config_dir(), *map(Path, extra_dirs)]
                if (p / "suite" / f"{name}.yaml").is_file()) / "suite" / f"{name}.yaml"
    doc = yaml.safe_load(path.read_text()) or {}
    unknown = sorted(set(doc) - SUITE_KEYS)
    if unknown:
        raise ConfigError(f"suite.{unknown[0]}", f"unknown key in {path} (allowed: "
                          f"{', '.join(sorted(SUITE_KEYS))})")
    rest = [o for o in overrides if o.split("=", 1)[0] != "suite"]
    given = {o.split("=", 1)[0].lstrip("+") for o in rest}
    if "env" in given:
        raise ConfigError("env", f"suite={name} chooses the envs; drop env=")
    common = [] if "sweep" in given else [f"sweep={name}"]
    for key, value in (doc.get("eval") or {}).items():
        if f"eval.{key}" not in given:
            common.append(f"eval.{key}={value}")
    envs = doc.get("envs") or []
    steps = doc.get("steps")
    if isinstance(steps, dict) and "steps" not in given:
        missing = [e for e in envs if e not in steps]
        if missing:
            raise ConfigError("suite.steps", f"no budget for env {missing[0]!r} in {path}")
        return [[f"env={e}", f"steps={steps[e]}", *common, *rest] for e in envs]
    budget = [f"steps={steps}"] if steps is not None and "steps" not in given else []
    return [[f"env={','.join(envs)}", *budget, *common, *rest]]


def compose(overrides: Sequence[str], extra_dirs: Sequence[Path] = ()) -> dict[str, Any]:
    """The resolved config of one run as a plain dict; raises ConfigError on bad input."""
    from hydra import compose as hydra_compose
    from hydra import initialize_config_dir
    from hydra.errors import HydraException
    from omegaconf import OmegaConf
    from omegaconf.errors import OmegaConfBaseException

    _check_groups(overrides, extra_dirs)
    overrides = list(overrides)
    if extra_dirs:
        roots = ",".join(f"file://{_hydra_root(Path(d))}" for d in extra_dirs)
        overrides.append(f"hydra.searchpath=[{roots}]")
    try:
        with initialize_config_dir(config_dir=_hydra_root(config_dir()), version_base=None):
            cfg = hydra_compose(config_name="config", overrides=overrides)
        resolved = OmegaConf.to_container(cfg, resolve=True)
    except (HydraException, OmegaConfBaseException) as err:
        raise ConfigError(_failing_key(str(err), overrides), _first_line(str(err))) from None
    return resolved


def _check_groups(overrides: Sequence[str], extra_dirs: Sequence[Path]) -> None:
    for o in parse_overrides(overrides):
        key = o.get_key_element().lstrip("+~")
        if key in GROUPS and not o.is_sweep_override():
            value = o.get_value_element_as_str()
            allowed = group_options(key, extra_dirs)
            if value not in allowed:
                raise ConfigError(key, f"unknown option {value!r} (allowed: {', '.join(allowed)})")


def _failing_key(message: str, overrides: Sequence[str]) -> str:
    m = re.search(r"override '([^']+)'", message) or re.search(r"Key '([^']+)'", message)
    if m:
        return m.group(1)
    return "overrides"


def _first_line(message: str) -> str:
    lines = [ln.strip() for ln in message.strip().splitlines() if ln.strip()]
    text = " ".join(lines[:2]) if lines else "invalid config"
    m = re.search(r"Could not override '([^']+)'", text)
    if m:
        return f"unknown key (add a new key with +{m.group(1)}=...)"
    if "not in struct" in text:
        return f"unknown key ({text}); top-level keys: {', '.join(sorted(TOP_KEYS))}"
    return text


def check_run_config(cfg: dict[str, Any]) -> None:
    """Check the runner's own keys (the agent and env sections are checked by their layers)."""
    unknown = sorted(set(cfg) - TOP_KEYS)
    if unknown:
        raise ConfigError(unknown[0], f"unknown key (allowed: {', '.join(sorted(TOP_KEYS))})")
    seed = check_type("seed", cfg.get("seed"), int)
    if seed < 0:
        raise ConfigError("seed", f"must be a non-negative integer (got {seed})")
    _positive_int(cfg, "steps")
    ev = cfg.get("eval") or {}
    _positive_int(ev, "every", "eval.every")
    _positive_int(ev, "episodes", "eval.episodes")
    check_type("eval.deterministic", ev.get("deterministic"), bool)
    _positive_int(cfg, "torch_threads")
    ck = cfg.get("checkpoint") or {}
    every = check_type("checkpoint.every", ck.get("every", 0), int)
    if every < 0:
        raise ConfigError("checkpoint.every", f"must be >= 0 (got {every})")
    log = cfg.get("log") or {}
    _positive_int(log, "every", "log.every")
    sweep = check_type("sweep", cfg.get("sweep"), str)
    if not SAFE_NAME.match(sweep):
        raise ConfigError(
            "sweep", f"must be a folder name of letters, digits, '_', '-', '.' (got {sweep!r})")
    check_type("results_dir", cfg.get("results_dir"), str)
    for group in GROUPS:
        if not isinstance(cfg.get(group), dict):
            raise ConfigError(group, "missing config group")


def _positive_int(section: dict[str, Any], key: str, field: str | None = None) -> int:
    field = field or key
    value = check_type(field, section.get(key), int)
    if value < 1:
        raise ConfigError(field, f"must be a positive integer (got {value})")
    return value
