"""One run, start to finish: check everything, then train, evaluate and record.

``prepare`` does every check (config, env, agent, action space) without touching the
disk, so bad input never leaves a run folder behind. ``execute`` makes the folder and
writes each record atomically; ``run.json`` says ``complete`` only after everything else
is on disk.
"""

from __future__ import annotations

import importlib
import io
import sys
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch

from agents.base import Agent, ConfigError, build_config
from envs.build import EnvSpec, make_eval_env, make_train_envs, parse_env_config
from runner import records
from runner.config import check_run_config
from runner.loop import Schedule, Trainer
from runner.progress import RunProgress
from runner.seeding import RunSeeds, derive_seeds, seed_globals

CHECKPOINT = "checkpoint.pt"


@dataclass
class PreparedRun:
    """A fully checked run: everything needed to start it, nothing written yet."""

    config: dict[str, Any]
    env: EnvSpec
    agent_cls: type[Agent]
    agent_config: Any
    seeds: RunSeeds
    run_id: str
    run_dir: Path

    @property
    def label(self) -> str:
        return self.run_id


def load_agent_class(entry: Any) -> type[Agent]:
    """``module:Class`` (or ``path/to/file.py:Class``) to the agent class."""
    if not isinstance(entry, str) or ":" not in entry:
        raise ConfigError("agent.entry", f"expected 'module:Class', got {entry!r}")
    module_name, _, cls_name = entry.rpartition(":")
    try:
        if module_name.endswith(".py"):
            spec = importlib.util.spec_from_file_location(Path(module_name).stem, module_name)
            if spec is None or spec.loader is None:
                raise ImportError(f"no such file {module_name}")
            module = importlib.util.module_from_spec(spec)
            spec.loader.exec_module(module)
        else:
            module = importlib.import_module(module_name)
    except (ImportError, FileNotFoundError) as err:
        raise ConfigError("agent.entry", f"cannot import {module_name!r}: {err}") from None
    cls = getattr(module, cls_name, None)
    if cls is None:
        raise ConfigError("agent.entry", f"{module_name!r} has no attribute {cls_name!r}")
    for attr in ("act", "observe", "state_dict", "load_state_dict", "Config", "supports"):
        if not hasattr(cls, attr):
            raise ConfigError("agent.entry", f"{entry} is not an agent (missing {attr}); "
                              "see agents/base.py")
    return cls


def prepare(cfg: dict[str, Any]) -> PreparedRun:
    """Check one resolved config end to end; raises ConfigError, writes nothing."""
    check_run_config(cfg)
    agent_section = dict(cfg["agent"])
    name = agent_section.pop("name", None)
    if not isinstance(name, str) or not name:
        raise ConfigError("agent.name", "missing (every agent YAML sets name)")
    agent_cls = load_agent_class(agent_section.pop("entry", None))
    agent_config = build_config(agent_cls, agent_section)
    gamma = getattr(agent_config, "gamma", None)
    if not isinstance(gamma, float) or not 0.0 < gamma <= 1.0:
        raise ConfigError("agent.gamma", f"must be in (0, 1] (got {gamma!r})")
    num_envs = getattr(agent_config, "num_envs", 1)
    if not isinstance(num_envs, int) or num_envs < 1:
        raise ConfigError("agent.num_envs", f"must be a positive integer (got {num_envs!r})")
    mode = getattr(agent_config, "vector_mode", "sync")
    if mode not in ("sync", "async"):
        raise ConfigError("agent.vector_mode", f"must be 'sync' or 'async' (got {mode!r})")
    env = parse_env_config(cfg["env"])
    probe = make_eval_env(env)
    try:
        if not agent_cls.supports(probe.action_space):
            allowed = ", ".join(s.__name__ for s in agent_cls.action_spaces)
            raise ConfigError(
                "agent", f"{name} does not support {env.id}'s action space {probe.action_space} "
                f"(supports: {allowed})")
    finally:
        probe.close()
    seeds = derive_seeds(cfg["seed"], cfg["eval"]["episodes"], num_envs)
    rid = records.run_id(cfg)
    run_dir = Path(cfg["results_dir"]) / cfg["sweep"] / rid
    return PreparedRun(cfg, env, agent_cls, agent_config, seeds, rid, run_dir)


def _run_json(p: PreparedRun, status: str, started: str, **extra: Any) -> dict[str, Any]:
    doc = {
        "run_id": p.run_id,
        "agent": p.config["agent"]["name"],
        "env": p.env.id,
        "env_config": p.env.name,
        "seed": p.config["seed"],
        "status": status,
        "env_steps": 0,
        "final_score": None,
        "wall_s": 0.0,
        "started": started,
        "finished": None,
        "error": None,
        "steps": p.config["steps"],
        "eval": dict(p.config["eval"]),
        "seeds": p.seeds.as_dict(),
        "provenance": records.provenance(),
    }
    doc.update(extra)
    return doc


def write_records(run_dir: Path, trainer: Trainer) -> None:
    """eval.csv, train.csv and scalars.csv as they stand now (each atomic)."""
    r = trainer.records
    records.atomic_write_text(run_dir / "eval.csv",
                              records.csv_text(records.EVAL_COLUMNS, (e.row() for e in r.evals)))
    records.atomic_write_text(run_dir / "train.csv", records.csv_text(records.TRAIN_COLUMNS, r.train))
    records.atomic_write_text(run_dir / "scalars.csv",
                              records.csv_text(records.SCALAR_COLUMNS, r.scalars))


def save_state(path: Path, trainer: Trainer) -> None:
    """Final (or periodic) checkpoint: agent state, normaliser, loop counters and records."""
    state = {
        "agent": trainer.agent.state_dict(),
        "normalizer": trainer.envs.normalizer.state_dict() if trainer.envs.normalizer else None,
        "loop": trainer.loop_state(),
    }
    buf = io.BytesIO()
    torch.save(state, buf)
    records.atomic_write_bytes(path, buf.getvalue())


def execute(p: PreparedRun, progress: str = "auto") -> dict[str, Any]:
    """Train, evaluate and record one prepared run; returns its final ``run.json``."""
    from omegaconf import OmegaConf

    run_dir = p.run_dir
    run_dir.mkdir(parents=True, exist_ok=True)
    (run_dir / "error.log").unlink(missing_ok=True)
    started = records.now_iso()
    t0 = time.perf_counter()
    records.atomic_write_text(run_dir / "config.yaml", OmegaConf.to_yaml(OmegaConf.create(p.config)))
    records.atomic_write_json(run_dir / "run.json", _run_json(p, "running", started))
    trainer = None
    try:
        torch.set_num_threads(int(p.config["torch_threads"]))
        seed_globals(p.seeds.global_rngs)
        envs = make_train_envs(p.env, getattr(p.agent_config, "num_envs", 1),
                               getattr(p.agent_config, "vector_mode", "sync"))
        eval_env = make_eval_env(p.env)
        agent = p.agent_cls(envs.single_observation_space, envs.single_action_space,
                            p.agent_config, p.seeds.agent)
        ev = p.config["eval"]
        schedule = Schedule(
            budget=p.config["steps"], eval_every=ev["every"], eval_episodes=ev["episodes"],
            deterministic=ev["deterministic"], log_every=p.config["log"]["every"],
            checkpoint_every=p.config["checkpoint"]["every"],
        )
        from torch.utils.tensorboard import SummaryWriter

        tb = SummaryWriter(log_dir=str(run_dir / "tb"))
        bar = RunProgress(p.label, schedule.budget, mode=progress)
        trainer = Trainer(
            agent, envs, eval_env, schedule, p.seeds.train_env, p.seeds.eval_episodes, bar,
            on_evaluation=lambda t: write_records(run_dir, t),
            on_checkpoint=lambda t: save_state(run_dir / CHECKPOINT, t),
            tb=tb,
        )
        loop_start = time.perf_counter()
        try:
            trainer.run()
        finally:
            loop_s = time.perf_counter() - loop_start
            bar.close()
            tb.close()
            envs.close()
            eval_env.close()
        write_records(run_dir, trainer)
        save_state(run_dir / CHECKPOINT, trainer)
        last = trainer.records.evals[-1].env_step
        finals = [e.ret for e in trainer.records.evals if e.env_step == last]
        doc = _run_json(
            p, "complete", started, env_steps=trainer.env_steps,
            final_score=sum(finals) / len(finals), wall_s=round(time.perf_counter() - t0, 3),
            loop_s=round(loop_s, 3),
            finished=records.now_iso(),
        )
        records.atomic_write_json(run_dir / "run.json", doc)
        return doc
    except BaseException as err:
        reason = f"{type(err).__name__}: {err}".splitlines()[0]
        records.atomic_write_text(run_dir / "error.log", traceback.format_exc())
        doc = _run_json(
            p, "failed", started, env_steps=trainer.env_steps if trainer else 0,
            wall_s=round(time.perf_counter() - t0, 3), finished=records.now_iso(), error=reason,
        )
        records.atomic_write_json(run_dir / "run.json", doc)
        raise


def main_error(message: str) -> int:
    print(f"seedsweep: error: {message}", file=sys.stderr)
    return 2
