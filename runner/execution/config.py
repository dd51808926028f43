"""One run's config: hydra composition, per-env agent settings and the runner's own checks.

The launch layer expands sweeps into single-run override lists and composes each here, so
every run of a sweep is checked before the first one starts and a bad value never leaves a
half-made results folder behind.

hydra reads ``configs/`` (and every ``--config-dir``) as a config tree whose groups are
``agent/`` and ``env/``; ``suite/`` and ``plan/`` sit beside them but are plans of runs,
read by the launch layer, never selected by hydra (no top-level key shares their names).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import seedsweep.configs
import yaml
from hydra import compose as hydra_compose
from hydra import initialize_config_dir
from hydra.core.override_parser.overrides_parser import OverridesParser
from hydra.errors import HydraException
from omegaconf import OmegaConf
from omegaconf.errors import OmegaConfBaseException
from seedsweep.configs.checks import ConfigError, check_type, suggest, unknown_key

TOP_KEYS = {
    "agent", "env", "seed", "steps", "eval", "sweep", "results_dir", "torch_threads",
    "checkpoint", "log", "tuning",
}
# Seeds from here up belong to tuning trials (``tuning: true``), the seeds below to every
# other run: a configuration chosen on tuning seeds is never judged on the same seeds.
TUNING_SEED_BASE = 1_000_000
HYDRA_GROUPS = ("agent", "env")  # config folders that hydra composes
PLAN_GROUPS = ("suite", "plan")  # config folders read by the launch layer only
# Sections of an agent YAML that are not hyperparameters: settings per env config
# (applied under the command line's own overrides) and the search space of ``tune``.
AGENT_SECTIONS = ("per_env", "search")
# Keys of an agent section that are records, not hyperparameters: the agent's name, its class
# and, in a configuration chosen by ``tune``, how it was tuned (kept in the run's config, so it
# is part of the run id and of config.yaml).
AGENT_RECORDS = ("name", "entry", "tuned")
SECTION_KEYS = {"eval": ("batched", "deterministic", "episodes", "every"), "checkpoint": ("every",),
                "log": ("every",)}
DEFAULTS = "defaults"  # the folder of the top-level config.yaml (hydra's primary folder)
SAFE_NAME = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.-]*$")
MAX_NAME = 100  # a run id joins two names; a path component may have 255 bytes
MAX_EVAL_EPISODES = 100_000  # episode seeds are drawn up front, during the checks


def check_name(field: str, value: Any) -> str:
    """A name that becomes part of a folder name (``sweep``, ``agent.name``, ``env.name``):
    letters, digits, ``_``, ``-``, ``.``, not starting with ``.`` or ``-``, so it can
    neither leave ``results_dir`` nor hide from ``status`` and ``report``."""
    if value is None:
        raise ConfigError(field, "missing (a name of letters, digits, '_', '-', '.')")
    name = check_type(field, value, str)
    if not SAFE_NAME.match(name) or len(name) > MAX_NAME:
        raise ConfigError(field, f"must be a name of letters, digits, '_', '-', '.' (not "
                          f"starting with '.' or '-', at most {MAX_NAME} characters; got "
                          f"{name!r})")
    return name


def config_dir() -> Path:
    """The shipped configs (package data of ``seedsweep.configs``)."""
    return seedsweep.configs.folder()


def config_roots(extra_dirs: Sequence[Path | str] = ()) -> list[Path]:
    """The shipped config folder, then the user's ``--config-dir`` folders (each checked:
    it must exist, and a ``sweep/`` folder inside would capture hydra's ``sweep=`` key)."""
    roots = [config_dir()]
    for d in map(Path, extra_dirs):
        if not d.is_dir():
            raise ConfigError("--config-dir", f"{d} is not a folder")
        if (d / "sweep").is_dir():
            raise ConfigError("--config-dir", f"{d / 'sweep'}: plan files go in a plan/ "
                              "folder (a sweep/ folder would clash with the sweep= key)")
        roots.append(d)
    return roots


def group_options(group: str, extra_dirs: Sequence[Path | str] = ()) -> list[str]:
    """Names of the YAML files of a config group (``agent``, ``env``, ``suite``, ``plan``)."""
    names = set()
    for root in config_roots(extra_dirs):
        folder = root / group
        if folder.is_dir():
            names.update(p.stem for p in folder.glob("*.yaml"))
    return sorted(names)


def group_file(group: str, name: str, extra_dirs: Sequence[Path | str] = (),
               what: str = "option") -> Path:
    """The YAML file of ``name`` in ``group`` (the last ``--config-dir`` that has it wins,
    as in hydra's search path); ConfigError naming the allowed names otherwise."""
    found = [r / group / f"{name}.yaml" for r in config_roots(extra_dirs)
             if (r / group / f"{name}.yaml").is_file()]
    if not found:
        allowed = group_options(group, extra_dirs)
        raise ConfigError(group, f"unknown {what} {name!r} (allowed: {', '.join(allowed)})"
                          + suggest(name, allowed))
    return found[-1]


def read_yaml(path: Path, field: str) -> Any:
    """A YAML file's content; one ConfigError line for unreadable, non-UTF-8 or bad YAML."""
    try:
        return yaml.safe_load(path.read_bytes().decode("utf-8"))
    except UnicodeDecodeError:
        raise ConfigError(field, f"{path} is not UTF-8 text") from None
    except yaml.YAMLError as err:
        mark = getattr(err, "problem_mark", None)
        problem = getattr(err, "problem", None)
        if problem and mark is not None:
            where = f"{problem}, line {mark.line + 1}, column {mark.column + 1}"
        else:
            where = " ".join(str(err).strip().split())[:200]
        raise ConfigError(field, f"{path} is not valid YAML ({where})") from None
    except OSError as err:
        raise ConfigError(field, f"cannot read {path} ({err.strerror or err})") from None


NAME_KEYS = ("sweep", "agent.name", "env.name")  # values checked by check_name


def parse_overrides(overrides: Sequence[str]) -> list[Any]:
    """hydra's parsed overrides; a syntax error is one ConfigError line naming the key of
    the override that does not parse."""
    parser = OverridesParser.create()
    try:
        return parser.parse_overrides(list(overrides))
    except Exception:  # hydra's lexer raises its own types on odd characters
        for one in overrides:
            try:
                parser.parse_overrides([one])
            except Exception as err:  # the same assorted types, one override at a time
                raise _unparsable(one, err) from None
        raise ConfigError("overrides", f"cannot parse {' '.join(overrides)!r}") from None


def _unparsable(override: str, err: Exception) -> ConfigError:
    key, sep, value = override.partition("=")
    key = key.strip().lstrip("+~")
    if not sep or not re.fullmatch(r"[A-Za-z_][\w.\-/]*", key):
        return ConfigError("overrides", f"expected key=value, got {override!r}")
    if key in NAME_KEYS:
        try:
            check_name(key, value)
        except ConfigError as bad:
            return bad
    text = str(err).strip().splitlines()
    why = text[0] if text and not text[0].startswith(("LexerNoViable", "no viable")) else (
        "characters the override grammar does not take unquoted")
    return ConfigError(key, f"cannot read the value {value!r} ({why}); quote text with "
                       f"other characters: {key}='...'")


def hydra_value(value: Any) -> str:
    """A python value in hydra's override grammar (strings quoted, so any text survives)."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return "'" + value.replace("\\", "\\\\").replace("'", "\\'") + "'"
    if isinstance(value, (list, tuple)):
        return "[" + ",".join(hydra_value(v) for v in value) + "]"
    if isinstance(value, dict):
        for k in value:
            if not (isinstance(k, str) and k.isidentifier()):
                raise ConfigError("env.kwargs", f"key {k!r} cannot be passed as an override; "
                                  "add random-agent runs to the sweep instead")
        return "{" + ",".join(f"{k}:{hydra_value(v)}" for k, v in value.items()) + "}"
    raise ConfigError("env", f"cannot pass {value!r} as an override")



def compose(overrides: Sequence[str], extra_dirs: Sequence[Path | str] = ()) -> dict[str, Any]:
    """The resolved config of one run as a plain dict; raises ConfigError on bad input.

    The agent YAML's ``per_env`` settings for the run's env config are applied under the
    command line's own ``agent.*`` overrides, and the ``per_env`` and ``search`` sections are
    dropped: the result holds only the values the run uses (so they are part of its id).
    """
    _check_groups(overrides, extra_dirs)
    overrides = list(overrides)
    # every config folder on hydra's search path, where the first entry that has a file wins:
    # the last --config-dir first, the shipped configs last (see _primary_dir)
    roots = ",".join(f"file://{d.resolve()}" for d in reversed(config_roots(extra_dirs)))
    search = [f"hydra.searchpath=[{roots}]"]
    while True:
        try:
            with initialize_config_dir(config_dir=str(_primary_dir()), version_base=None):
                cfg = hydra_compose(config_name="config", overrides=overrides + search)
            resolved = OmegaConf.to_container(cfg, resolve=True)
            break
        except (HydraException, OmegaConfBaseException) as err:
            added = _as_addition(str(err), overrides)
            if added is None:
                raise ConfigError(_failing_key(str(err)), _first_line(str(err))) from None
            overrides = added
    return apply_per_env(resolved, overrides)


def _primary_dir() -> Path:
    """hydra's primary config folder: ``configs/defaults/``, which holds only the top-level
    ``config.yaml``. hydra lets its primary folder win over every search-path entry; were
    the folder with the groups primary, its agent/dqn.yaml would shadow a dqn.yaml under
    --config-dir (such as a configuration chosen by ``seedsweep tune``). With the groups only
    on the search path, the last --config-dir that has a file wins, as :func:`group_file`
    says."""
    return config_dir() / DEFAULTS


def _as_addition(message: str, overrides: list[str]) -> list[str] | None:
    """An ``agent.KEY=V``, ``env.KEY=V`` or ``env.kwargs.KEY=V`` override whose YAML lacks
    KEY becomes ``+agent.KEY=V``: the agent's Config (or the env schema, or the env itself)
    then accepts it or refuses it naming the allowed keys, so no one has to know hydra's
    ``+`` rule."""
    m = re.search(r"Could not override '((?:agent|env|env\.kwargs)\.[^'.]+)'", message)
    if not m:
        return None
    key = m.group(1)
    out = [f"+{o}" if o.split("=", 1)[0] == key else o for o in overrides]
    return out if out != overrides else None


def apply_per_env(resolved: dict[str, Any], overrides: Sequence[str]) -> dict[str, Any]:
    """Merge ``agent.per_env[<env config name>]`` into the agent section, except keys the
    command line sets; drop the sections that are not hyperparameters."""
    agent = resolved.get("agent")
    if not isinstance(agent, dict):
        return resolved
    per_env = agent.pop("per_env", None) or {}
    agent.pop("search", None)
    if not isinstance(per_env, dict):
        raise ConfigError("agent.per_env", f"expected a mapping env name -> settings, got "
                          f"{per_env!r}")
    env_name = (resolved.get("env") or {}).get("name")
    settings = per_env.get(env_name) or {}
    if not isinstance(settings, dict):
        raise ConfigError(f"agent.per_env.{env_name}", f"expected a mapping of settings, got "
                          f"{settings!r}")
    given = {o.get_key_element().lstrip("+~") for o in parse_overrides(
        [o for o in overrides if not o.startswith("hydra.")])}
    for key, value in settings.items():
        if key in (*AGENT_RECORDS, *AGENT_SECTIONS):
            raise ConfigError(f"agent.per_env.{env_name}.{key}", "only hyperparameters can "
                              "differ by env")
        if f"agent.{key}" not in given:
            agent[key] = value
    return resolved


def _check_groups(overrides: Sequence[str], extra_dirs: Sequence[Path | str]) -> None:
    """The chosen agent and env configs exist and are readable YAML mappings (hydra would
    otherwise stop with a YAML or decoding traceback)."""
    chosen = dict(default_groups())
    for o in parse_overrides(overrides):
        key = o.get_key_element().lstrip("+~")
        if key in PLAN_GROUPS:
            flag = "-m suite=NAME" if key == "suite" else "--plan NAME"
            raise ConfigError(key, f"{key} files are plans of runs: use {flag}")
        if key in HYDRA_GROUPS and not o.is_sweep_override():
            value = o.get_value_element_as_str()
            allowed = group_options(key, extra_dirs)
            if value not in allowed:
                raise ConfigError(key, f"unknown option {value!r} (allowed: "
                                  f"{', '.join(allowed)})" + suggest(value, allowed))
            chosen[key] = value
    for group, name in chosen.items():
        path = group_file(group, name, extra_dirs)
        doc = read_yaml(path, group)
        if not isinstance(doc, dict):
            raise ConfigError(group, f"{path} must hold a mapping of settings (name: ..., "
                              f"...), not a {type(doc).__name__}")


def default_groups() -> dict[str, str]:
    """The agent and env configs ``configs/defaults/config.yaml`` chooses by default."""
    doc = read_yaml(config_dir() / DEFAULTS / "config.yaml", "config")
    out = {}
    for item in doc.get("defaults", []):
        if isinstance(item, dict):
            out.update({k: v for k, v in item.items() if k in HYDRA_GROUPS})
    return out


def _failing_key(message: str) -> str:
    m = (re.search(r"override '([^']+)'", message) or re.search(r"Key '([^']+)'", message)
         or re.search(r"full_key: (\S+)", message))
    if m:
        return m.group(1)
    return "overrides"


def _first_line(message: str) -> str:
    lines = [ln.strip() for ln in message.strip().splitlines()
             if ln.strip() and not ln.strip().startswith(("full_key:", "object_type="))]
    text = " ".join(lines[:2]) if lines else "invalid config"
    m = re.search(r"Could not override '([^']+)'", text)
    if m:
        return unknown_override(m.group(1))
    if "not in struct" in text:
        return f"unknown key ({text}); top-level keys: {', '.join(sorted(TOP_KEYS))}"
    return text


def unknown_override(key: str) -> str:
    """Message for a key the config does not have: the nearest known key, never a hint to
    add it with ``+`` (the run would then refuse it anyway)."""
    section, _, leaf = key.rpartition(".")
    if not section:
        return f"unknown key (allowed: {', '.join(sorted(TOP_KEYS))})" + suggest(key, TOP_KEYS)
    allowed = SECTION_KEYS.get(section)
    if allowed is None:
        return f"unknown key {leaf!r} in {section}"
    return (f"unknown key {leaf!r} in {section} (allowed: {', '.join(allowed)})"
            + suggest(leaf, allowed))


def check_run_config(cfg: dict[str, Any]) -> None:
    """Check the runner's own keys (the agent and env sections are checked by their layers)."""
    unknown = sorted(set(cfg) - TOP_KEYS)
    if unknown:
        raise unknown_key(unknown[0], unknown[0], TOP_KEYS, "key")
    seed = check_type("seed", cfg.get("seed"), int)
    if seed < 0:
        raise ConfigError("seed", f"must be a non-negative integer (got {seed})")
    tuning = check_type("tuning", cfg.get("tuning", False), bool)
    if tuning and seed < TUNING_SEED_BASE:
        raise ConfigError("seed", f"tuning trials use seeds >= {TUNING_SEED_BASE} (got {seed}); "
                          "the seeds below are for evaluation runs")
    if not tuning and seed >= TUNING_SEED_BASE:
        raise ConfigError("seed", f"seeds >= {TUNING_SEED_BASE} are reserved for tuning trials "
                          f"(got {seed}); evaluation runs use seeds below {TUNING_SEED_BASE}")
    _positive_int(cfg, "steps")
    ev = cfg.get("eval") or {}
    _positive_int(ev, "every", "eval.every")
    episodes = _positive_int(ev, "episodes", "eval.episodes")
    if episodes > MAX_EVAL_EPISODES:
        raise ConfigError("eval.episodes", f"must be at most {MAX_EVAL_EPISODES} (got "
                          f"{episodes}); every evaluation plays them all")
    check_type("eval.deterministic", ev.get("deterministic"), bool)
    if "batched" in ev:  # absent (a config written before the key existed): batched
        check_type("eval.batched", ev["batched"], bool)
    _positive_int(cfg, "torch_threads")
    ck = cfg.get("checkpoint") or {}
    every = check_type("checkpoint.every", ck.get("every", 0), int)
    if every < 0:
        raise ConfigError("checkpoint.every", f"must be >= 0 (got {every})")
    log = cfg.get("log") or {}
    _positive_int(log, "every", "log.every")
    check_name("sweep", cfg.get("sweep"))
    results_dir = check_type("results_dir", cfg.get("results_dir"), str)
    if not results_dir.strip():
        raise ConfigError("results_dir", "must be a folder path (got an empty string)")
    for group in HYDRA_GROUPS:
        if not isinstance(cfg.get(group), dict):
            raise ConfigError(group, "missing config group")
        check_name(f"{group}.name", cfg[group].get("name"))


def _positive_int(section: dict[str, Any], key: str, field: str | None = None) -> int:
    field = field or key
    value = check_type(field, section.get(key), int)
    if value < 1:
        raise ConfigError(field, f"must be a positive integer (got {value})")
    return value
