"""One run, start to finish: lock, train, evaluate and record (after :mod:`.prepare`).

``execute`` makes the run folder and writes each record atomically; ``run.json`` says
``complete`` only after everything else is on disk. A complete run is skipped, a failed one
too unless asked, an interrupted one resumes from its newest usable checkpoint.
"""

from __future__ import annotations

import logging
import math
import signal
import time
import traceback
from pathlib import Path
from typing import Any

from filelock import FileLock, Timeout
from omegaconf import OmegaConf
from seedsweep.envs.build import make_eval_env, make_train_envs
from seedsweep.runner.execution import checkpoints, records
from seedsweep.runner.execution.loop import Schedule, Trainer
from seedsweep.runner.execution.prepare import PreparedRun
from seedsweep.runner.execution.progress import RunListener, Silent
from seedsweep.runner.execution.protocol import batch_width
from seedsweep.runner.execution.seeding import seed_globals
from seedsweep.runner.execution.threads import set_compute_threads
from torch.utils.tensorboard import SummaryWriter

logger = logging.getLogger(__name__)

CHECKPOINT = "checkpoint.pt"
LOCK = ".lock"


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
        "random_floor": bool(getattr(p.agent_cls, "random_floor", False)),
        "provenance": {**records.provenance(), "agent_code_version": p.agent_code_version,
                       "agent_code": dict(p.agent_code)},
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

    def handler(signum, frame):
        raise KeyboardInterrupt(f"signal {signum}")

    try:
        signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread: leave the default
        pass


class RunBusy(RuntimeError):
    """Another process holds this run's lock: it is running elsewhere right now."""


LOCK_WAIT_S = 2.0  # a status probe holds a run's lock for microseconds: wait that out


def lock_for(run_dir: Path, timeout: float = 0) -> FileLock:
    """The run's lock: an OS file lock, so a crashed holder releases it by dying."""
    return FileLock(str(run_dir / LOCK), timeout=timeout)


def binding(p: PreparedRun) -> checkpoints.Binding:
    """What ties this run's checkpoints to it: run id and the digest of its config."""
    return checkpoints.Binding(p.run_id, records.config_digest(p.config))


def execute(p: PreparedRun, listener: RunListener | None = None,
            retry_failed: bool = False) -> dict[str, Any]:
    """Train, evaluate and record one prepared run; returns its final ``run.json``.

    A complete run is skipped; a failed one too unless ``retry_failed``; an interrupted
    one resumes from its newest usable checkpoint. Raises RunBusy if the run's lock is held
    (by another run: ``seedsweep status`` only probes it for an instant, which the wait of
    :data:`LOCK_WAIT_S` covers).
    """
    run_dir = p.run_dir
    run_dir.mkdir(parents=True, exist_ok=True)
    lock = lock_for(run_dir, LOCK_WAIT_S)
    try:
        lock.acquire()
    except Timeout:
        raise RunBusy(f"{p.run_id} is running in another process") from None
    try:
        for folder in (run_dir, run_dir / checkpoints.FOLDER):
            for leftover in records.remove_stale_temp_files(folder):
                logger.info("%s: removed %s, left by a write that was cut short", p.run_id,
                            leftover.name)
        try:
            existing = records.read_run_json(run_dir)
        except records.RecordError as err:  # resume from its checkpoints, if it has any
            logger.warning("%s; treating the run as interrupted", err)
            existing = {"status": "unreadable"}
        if existing and existing.get("status") == "complete":
            return {**existing, "skipped": True}
        if existing and existing.get("status") == "failed" and not retry_failed:
            return {**existing, "skipped": True}
        return _train(p, listener or Silent(), existing)
    finally:
        lock.release()


class _Built:
    """The live objects of a run: envs, agent and the trainer that drives them."""

    def __init__(self, p: PreparedRun, bar: RunListener, started: str):
        seed_globals(p.seeds.global_rngs)
        self.envs = make_train_envs(p.env, p.num_envs, p.vector_mode)
        self.eval_env = make_eval_env(p.env)
        agent = p.agent_cls(self.envs.single_observation_space, self.envs.single_action_space,
                            p.agent_config, p.seeds.agent)
        ev = p.config["eval"]
        width = batch_width(p.agent_cls, ev["episodes"], ev["deterministic"],
                            ev.get("batched", True))
        self.eval_envs = [self.eval_env] + [make_eval_env(p.env) for _ in range(width - 1)]
        schedule = Schedule(
            budget=p.config["steps"], eval_every=ev["every"], eval_episodes=ev["episodes"],
            deterministic=ev["deterministic"], log_every=p.config["log"]["every"],
            checkpoint_every=p.config["checkpoint"]["every"],
        )
        bound = binding(p)
        self.trainer = Trainer(
            agent, self.envs, self.eval_env, schedule, p.seeds.train_env,
            p.seeds.eval_episodes, bar,
            on_evaluation=lambda t: _progress_records(p, p.run_dir, t, started),
            on_checkpoint=lambda t: checkpoints.save(p.run_dir, bound, t.capture(),
                                                     t.env_steps),
            eval_envs=self.eval_envs,
        )
        if schedule.checkpoint_every:
            kind = self.envs.enable_snapshots()
            self.trainer.snapshot_kind = kind
            if kind == "none":
                self.trainer.next_checkpoint = math.inf
                logger.warning("%s: the state of its %d envs cannot be saved (an async vector "
                               "env, or envs whose state is neither plain data nor "
                               "replayable); no training checkpoints, an interrupted run "
                               "restarts", p.run_id,
                               self.envs.num_envs)

    def close(self) -> None:
        self.envs.close()
        for env in self.eval_envs:
            env.close()


def _train(p: PreparedRun, bar: RunListener, existing: dict[str, Any] | None) -> dict[str, Any]:
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
        set_compute_threads(int(p.config["torch_threads"]))
        built, resumed = _resume(p, bar, started) if existing else (None, None)
        if built is None:
            built = _Built(p, bar, started)
        trainer = built.trainer
        trainer.tb = SummaryWriter(log_dir=str(run_dir / "tb"),
                                   purge_step=trainer.env_steps if resumed else None)
        loop_start = time.perf_counter()
        try:
            trainer.run()
        finally:
            loop_s = time.perf_counter() - loop_start
            bar.close()
            trainer.tb.close()
            built.close()
        write_records(run_dir, trainer)
        final = checkpoints.to_bytes(binding(p), trainer.capture(final=True))
        records.atomic_write_bytes(run_dir / CHECKPOINT, final)
        last = trainer.records.evals[-1].env_step
        finals = [e.ret for e in trainer.records.evals if e.env_step == last]
        doc = _run_json(
            p, "complete", started, env_steps=trainer.env_steps,
            final_score=sum(finals) / len(finals),
            wall_s=round(prior_wall + time.perf_counter() - t0, 3), loop_s=round(loop_s, 3),
            eval_s=round(trainer.eval_s, 3), eval_steps=trainer.eval_steps,
            finished=records.now_iso(), resumed_from=resumed,
        )
        records.atomic_write_json(run_dir / "run.json", doc)
        checkpoints.clear(run_dir)
        return doc
    except KeyboardInterrupt:
        # Ctrl-C or SIGTERM (a cluster's preemption): not a failure; the run stays resumable.
        doc = _run_json(p, "running", started, env_steps=trainer.env_steps if trainer else 0,
                        wall_s=round(prior_wall + time.perf_counter() - t0, 3),
                        interrupted=records.now_iso())
        _record_quietly(run_dir, lambda: records.atomic_write_json(run_dir / "run.json", doc))
        raise
    except BaseException as err:
        reason = f"{type(err).__name__}: {err}".splitlines()[0]
        trace = traceback.format_exc()
        doc = _run_json(
            p, "failed", started, env_steps=trainer.env_steps if trainer else 0,
            wall_s=round(prior_wall + time.perf_counter() - t0, 3), finished=records.now_iso(),
            error=reason,
        )

        def record() -> None:
            records.atomic_write_text(run_dir / "error.log", trace)
            records.atomic_write_json(run_dir / "run.json", doc)

        _record_quietly(run_dir, record)
        raise


def _record_quietly(run_dir: Path, write: Any) -> None:
    """Record how a run ended; if the folder no longer takes writes (read-only, full disk),
    say so in one line and let the original exception go on (it is what matters)."""
    try:
        write()
    except OSError as err:
        logger.warning("%s: cannot record how the run ended (%s: %s)", run_dir.name,
                       type(err).__name__, err.strerror or err)


def _resume(p: PreparedRun, bar: RunListener, started: str
            ) -> tuple[_Built | None, int | None]:
    """The run rebuilt from its newest usable checkpoint and its env step, or (None, None).

    Each checkpoint is tried on freshly built objects, so a restore that fails half-way
    leaves nothing behind; a checkpoint that cannot be restored is deleted with its digest.
    """
    bound = binding(p)
    for path in checkpoints.candidates(p.run_dir):
        try:
            state = checkpoints.load(path, bound)
        except checkpoints.UnusableCheckpoint as err:
            logger.warning("checkpoint %s unusable (%s); trying an older one", path.name, err)
            continue
        built = _Built(p, bar, started)
        try:
            built.trainer.restore(state)
        except Exception as err:  # a checkpoint that cannot be restored is not continued from
            built.close()
            first = str(err).strip().splitlines()
            logger.warning("cannot restore %s (%s: %s); deleted it, trying an older one",
                           path.name, type(err).__name__, first[0] if first else "")
            checkpoints.discard(path)
            continue
        logger.info("%s: resuming from env step %d", p.run_id, built.trainer.env_steps)
        return built, built.trainer.env_steps
    return None, None
