"""One run, start to finish: check everything, then train, evaluate and record.

``prepare`` does every check (config, env, agent, action space) without touching the
disk, so bad input never leaves a run folder behind. ``execute`` makes the folder and
writes each record atomically; ``run.json`` says ``complete`` only after everything else
is on disk.
"""

from __future__ import annotations

import importlib
import json
import math
import sys
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
from filelock import FileLock, Timeout

from seedsweep.agents.base import Agent, ConfigError, build_config
from seedsweep.envs.build import EnvSpec, make_eval_env, make_train_envs, parse_env_config
from seedsweep.runner.execution import checkpoints
from seedsweep.runner.execution import records
from seedsweep.runner.execution.config import check_run_config
from seedsweep.runner.execution.loop import Schedule, Trainer
from seedsweep.runner.launch.progress import RunProgress
from seedsweep.runner.execution.seeding import RunSeeds, derive_seeds, seed_globals

CHECKPOINT = "checkpoint.pt"
LOCK = ".lock"


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
            path = Path(module_name).resolve()
            if not path.is_file():
                raise ImportError(f"no such file {module_name}")
            unique = f"seedsweep_agent_{path.stem}_{abs(hash(str(path))):x}"
            module = sys.modules.get(unique)
            if module is None:
                spec = importlib.util.spec_from_file_location(unique, path)
                module = importlib.util.module_from_spec(spec)
                sys.modules[unique] = module  # dataclasses look their module up here
                try:
                    spec.loader.exec_module(module)
                except BaseException:
                    del sys.modules[unique]
                    raise
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
    records.atomic_write_text(run_dir / "train.csv",
                              records.csv_text(records.TRAIN_COLUMNS, r.train))
    records.atomic_write_text(run_dir / "scalars.csv",
                              records.csv_text(records.SCALAR_COLUMNS, r.scalars))


def _progress_records(p: PreparedRun, run_dir: Path, trainer: Trainer, started: str) -> None:
    """After each evaluation: the CSV records, and run.json's env_steps for ``status``."""
    write_records(run_dir, trainer)
    records.atomic_write_json(run_dir / "run.json",
                              _run_json(p, "running", started, env_steps=trainer.env_steps))


def interrupt_on_sigterm() -> None:
    """Turn SIGTERM (what a cluster sends before killing a job) into KeyboardInterrupt, so
    the run records itself as interrupted, not failed, and resumes next time."""
    import signal

    def handler(signum, frame):
        raise KeyboardInterrupt(f"signal {signum}")

    try:
        signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread: leave the default
        pass


class RunBusy(RuntimeError):
    """Another process holds this run's lock: it is running elsewhere right now."""


def read_run_json(run_dir: Path) -> dict[str, Any] | None:
    try:
        return json.loads((run_dir / "run.json").read_text())
    except (OSError, ValueError):
        return None


def lock_for(run_dir: Path) -> FileLock:
    """The run's lock: an OS file lock, so a crashed holder releases it by dying."""
    return FileLock(str(run_dir / LOCK), timeout=0)


def execute(p: PreparedRun, progress: Any = "auto", retry_failed: bool = False,
            log=None) -> dict[str, Any]:
    """Train, evaluate and record one prepared run; returns its final ``run.json``.

    A complete run is skipped; a failed one too unless ``retry_failed``; an interrupted
    one resumes from its newest usable checkpoint. Raises RunBusy if the run's lock is held.
    """
    log = log or (lambda msg: print(msg, file=sys.stderr))
    run_dir = p.run_dir
    run_dir.mkdir(parents=True, exist_ok=True)
    lock = lock_for(run_dir)
    try:
        lock.acquire()
    except Timeout:
        raise RunBusy(f"{p.run_id} is running in another process") from None
    try:
        existing = read_run_json(run_dir)
        if existing and existing.get("status") == "complete":
            return {**existing, "skipped": True}
        if existing and existing.get("status") == "failed" and not retry_failed:
            return {**existing, "skipped": True}
        return _train(p, progress, log, existing)
    finally:
        lock.release()


def _train(p: PreparedRun, progress: Any, log, existing: dict[str, Any] | None) -> dict[str, Any]:
    from omegaconf import OmegaConf

    run_dir = p.run_dir
    (run_dir / "error.log").unlink(missing_ok=True)
    started = (existing or {}).get("started") or records.now_iso()
    prior_wall = float((existing or {}).get("wall_s") or 0.0)
    t0 = time.perf_counter()
    records.atomic_write_text(run_dir / "config.yaml",
                              OmegaConf.to_yaml(OmegaConf.create(p.config)))
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
        bar = (RunProgress(p.label, schedule.budget, mode=progress) if isinstance(progress, str)
               else progress.for_run(p.label, schedule.budget))
        trainer = Trainer(
            agent, envs, eval_env, schedule, p.seeds.train_env, p.seeds.eval_episodes, bar,
            on_evaluation=lambda t: _progress_records(p, run_dir, t, started),
            on_checkpoint=lambda t: checkpoints.save(run_dir, t.capture(), t.env_steps),
        )
        if schedule.checkpoint_every:
            trainer.snapshot_kind = envs.snapshot_kind()
            envs.track_resets = trainer.snapshot_kind == "reset"
            if trainer.snapshot_kind == "none":
                trainer.next_checkpoint = math.inf
                log(f"seedsweep: warning: {p.run_id}: the state of its {envs.num_envs} envs "
                    "cannot be saved (async vector env, or envs that do not pickle); "
                    "no training checkpoints, an interrupted run restarts")
        resumed = _resume(trainer, run_dir, log) if existing else None
        from torch.utils.tensorboard import SummaryWriter

        trainer.tb = SummaryWriter(log_dir=str(run_dir / "tb"),
                                   purge_step=trainer.env_steps if resumed else None)
        loop_start = time.perf_counter()
        try:
            trainer.run()
        finally:
            loop_s = time.perf_counter() - loop_start
            bar.close()
            trainer.tb.close()
            envs.close()
            eval_env.close()
        write_records(run_dir, trainer)
        final = checkpoints.to_bytes(trainer.capture(final=True))
        records.atomic_write_bytes(run_dir / CHECKPOINT, final)
        last = trainer.records.evals[-1].env_step
        finals = [e.ret for e in trainer.records.evals if e.env_step == last]
        doc = _run_json(
            p, "complete", started, env_steps=trainer.env_steps,
            final_score=sum(finals) / len(finals),
            wall_s=round(prior_wall + time.perf_counter() - t0, 3), loop_s=round(loop_s, 3),
            finished=records.now_iso(), resumed_from=resumed,
        )
        records.atomic_write_json(run_dir / "run.json", doc)
        checkpoints.clear(run_dir)
        if loop_s > 0 and not resumed:
            from seedsweep.runner.launch.estimate import remember

            remember(p, loop_s / max(1, trainer.env_steps))
        return doc
    except KeyboardInterrupt:
        # Ctrl-C or SIGTERM (a cluster's preemption): not a failure; the run stays resumable.
        doc = _run_json(p, "running", started, env_steps=trainer.env_steps if trainer else 0,
                        wall_s=round(prior_wall + time.perf_counter() - t0, 3),
                        interrupted=records.now_iso())
        records.atomic_write_json(run_dir / "run.json", doc)
        raise
    except BaseException as err:
        reason = f"{type(err).__name__}: {err}".splitlines()[0]
        records.atomic_write_text(run_dir / "error.log", traceback.format_exc())
        doc = _run_json(
            p, "failed", started, env_steps=trainer.env_steps if trainer else 0,
            wall_s=round(prior_wall + time.perf_counter() - t0, 3), finished=records.now_iso(),
            error=reason,
        )
        records.atomic_write_json(run_dir / "run.json", doc)
        raise


def _resume(trainer: Trainer, run_dir: Path, log) -> int | None:
    """Continue from the newest usable checkpoint; returns its env step, or None."""
    while True:
        found = checkpoints.load_latest(run_dir, log)
        if found is None:
            return None
        state, path = found
        try:
            trainer.restore(state)
        except Exception as err:  # a checkpoint that cannot be restored is not continued from
            log(f"seedsweep: warning: cannot restore {path.name} ({err}); trying an older one")
            path.unlink(missing_ok=True)
            continue
        log(f"seedsweep: {run_dir.name}: resuming from env step {trainer.env_steps}")
        return trainer.env_steps


def main_error(message: str) -> int:
    print(f"seedsweep: error: {message}", file=sys.stderr)
    return 2
