"""Local parallel execution: one process per run, at most ``workers`` at a time.

A process per run isolates failures: an exception is recorded by the run itself, and a
process that dies (a crash, the OOM killer, SIGKILL) is seen by the parent, which marks
that run failed and goes on with the others.

Run processes are forked from a warm server (multiprocessing's forkserver) that imported
numpy, torch, gymnasium and every seedsweep module once, with one torch thread set; so a
run's start-up is a fork, not an interpreter plus imports (seconds).
The server only imports: it never steps an env or draws a random number, and every run
seeds all its randomness itself from its seed, so a run gets the same bytes as from a fresh
interpreter. Each child takes the parent's current working directory, environment and
stdout/stderr, which may have changed since the server started.
"""

from __future__ import annotations

import importlib.util
import json
import logging
import multiprocessing as mp
import multiprocessing.connection as mp_connection
import multiprocessing.forkserver as mp_forkserver
import multiprocessing.reduction as mp_reduction
import os
import pkgutil
import queue as queue_mod
import signal
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from seedsweep.runner.execution import logs, records
from seedsweep.runner.execution.prepare import PreparedRun, prepare
from seedsweep.runner.execution.progress import RunListener
from seedsweep.runner.execution.run import RunBusy, execute, interrupt_on_sigterm
from seedsweep.runner.execution.threads import set_compute_threads
from seedsweep.runner.launch import estimate
from seedsweep.runner.launch.display import QueueProgress, RunProgress, SweepProgress

logger = logging.getLogger(__name__)

EXIT_BUSY = 3
# multiprocessing's exit code for a process whose forkserver died: the run itself may go on
SERVER_LOST = 255
START_METHOD = "forkserver"  # "spawn": a fresh interpreter per run (seconds of imports each)
# imported once by the forkserver; the first one sets one torch thread before anything runs
# (torch._dynamo: torch's optimisers import it on first use, about 1 s with sympy)
PRELOAD_FIRST = ("seedsweep.runner.launch.preload", "numpy", "torch", "torch._dynamo",
                 "gymnasium",
                 "gymnasium.envs.classic_control", "gymnasium.envs.toy_text",
                 "gymnasium.envs.box2d")
# all of seedsweep: a child re-runs the parent's main module (the command line's, which
# imports every command), and with everything preloaded that costs no import
PRELOAD_PACKAGES = ("seedsweep.configs", "seedsweep.agents", "seedsweep.envs", "seedsweep.runner")


@dataclass
class Outcome:
    complete: int = 0
    failed: list[tuple[str, str]] = field(default_factory=list)
    busy: list[str] = field(default_factory=list)
    # run id -> (seconds from starting its process to seeing it end, the run's loop_s)
    process_s: dict[str, tuple[float, float | None]] = field(default_factory=dict)


def default_workers() -> int:
    """Physical cores (hyper-threads share a core's arithmetic units)."""
    cores = set()
    try:
        physical = core = None
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("physical id"):
                physical = line.split(":")[1].strip()
            elif line.startswith("core id"):
                core = line.split(":")[1].strip()
                cores.add((physical, core))
    except OSError:
        pass
    n = len(cores) or os.cpu_count() or 1
    try:
        n = min(n, len(os.sched_getaffinity(0)))
    except AttributeError:
        pass
    return max(1, n)


def run_job(config: dict[str, Any], retry_failed: bool = False,
            listener: RunListener | None = None) -> dict:
    """Run one resolved config to completion in this process (local worker or cluster job).

    Skip, resume and locking are the same wherever it runs. Returns the final run.json, or
    ``{"status": "busy"}`` if another process holds the run's lock.
    """
    logs.setup()
    interrupt_on_sigterm()
    prepared = prepare(config)
    try:
        doc = execute(prepared, listener or RunProgress(prepared.run_id, int(config["steps"]),
                                                       mode="lines"), retry_failed=retry_failed)
    except RunBusy:
        return {"run_id": prepared.run_id, "status": "busy"}
    estimate.remember_run(prepared, doc)
    return doc


def preload_modules() -> list[str]:
    """What the forkserver imports: the heavy libraries, then every module of seedsweep
    (found on disk, nothing agent-specific), this module (the processes' entry point) last."""
    names = list(PRELOAD_FIRST)
    for package in PRELOAD_PACKAGES:
        names.extend(_modules_under(package))
    names.append(__name__)
    # not the parent's main module (``python -m seedsweep...``): a child runs it anew under
    # another name, which runpy warns about when the module was imported already
    main = getattr(sys.modules.get("__main__"), "__spec__", None)
    return [n for n in names if n != getattr(main, "name", None)]


def _modules_under(package: str) -> list[str]:
    spec = importlib.util.find_spec(package)
    if spec is None or not spec.submodule_search_locations:
        return []
    out = [package]
    for info in pkgutil.iter_modules(list(spec.submodule_search_locations)):
        name = f"{package}.{info.name}"
        out.extend(_modules_under(name) if info.ispkg else [name])
    return out


def context(start_method: str = START_METHOD) -> Any:
    """The multiprocessing context runs start from; the forkserver is started here (once per
    process; it stays up for later sweeps) so its imports overlap with the caller's work."""
    ctx = mp.get_context(start_method)
    if start_method == "forkserver":
        ctx.set_forkserver_preload(preload_modules())
        mp_forkserver.ensure_running()
    return ctx


class _ParentSide:
    """The parent's working directory, environment and stdout/stderr at the moment a run
    starts, handed to the forked child (the server's own may be older)."""

    def __init__(self) -> None:
        self.cwd = os.getcwd()
        self.env = dict(os.environ)

    def __reduce__(self):
        fds = []
        for stream in (sys.stdout, sys.stderr):
            try:
                fds.append(mp_reduction.DupFd(stream.fileno()))
            except (AttributeError, OSError, ValueError):  # no real file behind the stream
                fds.append(None)
        return (_ParentSide._rebuild, (self.cwd, self.env, fds))

    @staticmethod
    def _rebuild(cwd: str, env: dict[str, str], fds: list) -> None:
        os.chdir(cwd)
        os.environ.clear()
        os.environ.update(env)
        for target, fd in zip((1, 2), fds, strict=True):
            if fd is not None:
                os.dup2(fd.detach(), target)


def calibrate_in_workers(planned: list[PreparedRun], workers: int
                         ) -> list[estimate.PairCost]:
    """Calibration runs of the given pairs, up to ``workers`` side by side in forked processes,
    so they share the machine as the sweep's runs will; a pair whose process fails is
    calibrated here instead (and raises here, if it must)."""
    ctx = context()
    out: list[estimate.PairCost | None] = [None] * len(planned)
    with tempfile.TemporaryDirectory() as tmp:
        pending = list(enumerate(planned))
        running: list[tuple[int, Any]] = []
        while pending or running:
            while pending and len(running) < max(1, workers):
                i, p = pending.pop(0)
                proc = ctx.Process(target=_calibrate_job,
                                   args=(p.config, str(Path(tmp) / f"{i}.json"), _ParentSide()),
                                   name=f"calibrate-{p.run_id}")
                proc.start()
                running.append((i, proc))
            mp_connection.wait([proc.sentinel for _, proc in running], timeout=1.0)
            for i, proc in [r for r in running if not r[1].is_alive()]:
                proc.join()
                running.remove((i, proc))
                try:
                    out[i] = estimate.PairCost(**json.loads((Path(tmp) / f"{i}.json").read_text()))
                except (OSError, ValueError, TypeError):
                    logger.debug("calibration of %s failed in its process", planned[i].run_id)
    return [c if c is not None else estimate.calibrate(p)
            for c, p in zip(out, planned, strict=True)]


def _calibrate_job(config: dict[str, Any], path: str, parent: Any = None) -> None:
    set_compute_threads(int(config.get("torch_threads", 1)))
    cost = estimate.calibrate(prepare(config))
    Path(path).write_text(json.dumps(cost.as_dict()))


def _worker(config: dict[str, Any], run_id: str, retry_failed: bool, messages,
            parent: Any = None) -> None:
    set_compute_threads(int(config.get("torch_threads", 1)))
    try:
        doc = run_job(config, retry_failed,
                      QueueProgress(messages).for_run(run_id, int(config["steps"])))
    except BaseException:  # the run recorded why in its run.json and error.log
        sys.exit(1)
    sys.exit(EXIT_BUSY if doc.get("status") == "busy" else 0)


def run_local(planned: list[PreparedRun], workers: int, opts,
              start_method: str = START_METHOD, costs: dict[str, float] | None = None
              ) -> Outcome:
    """Run ``planned`` in up to ``workers`` processes; the order is kept. ``costs``: the
    estimated seconds of each run, for the live ETA."""
    ctx = context(start_method)
    messages = ctx.Queue()
    pending = list(planned)
    running: dict[str, tuple[Any, PreparedRun]] = {}
    # runs whose process outlived the server it was forked from: watched by pid until it ends
    adrift: dict[str, tuple[int, PreparedRun]] = {}
    launched: dict[str, float] = {}
    outcome = Outcome()
    display = SweepProgress(planned, workers, mode=opts.progress, costs=costs)
    try:
        while pending or running or adrift:
            while pending and len(running) + len(adrift) < workers:
                p = pending.pop(0)
                proc = ctx.Process(target=_worker,
                                   args=(p.config, p.run_id, opts.retry_failed, messages,
                                         _ParentSide()),
                                   name=p.run_id, daemon=False)
                launched[p.run_id] = time.perf_counter()
                proc.start()
                running[p.run_id] = (proc, p)
                display.started(p.run_id)
            # wake when a process ends (its start-to-end time is measured) or after 0.25 s
            mp_connection.wait([proc.sentinel for proc, _ in running.values()], timeout=0.25)
            _drain(messages, display, timeout=0.0)
            for run_id, (proc, p) in list(running.items()):
                if proc.is_alive():
                    continue
                proc.join()
                took = time.perf_counter() - launched[run_id]
                del running[run_id]
                if proc.exitcode == SERVER_LOST and _still_running(proc.pid):
                    logger.warning("the run server died; %s goes on in its process %d, "
                                   "watched until it ends", run_id, proc.pid)
                    adrift[run_id] = (proc.pid, p)
                    continue
                _settle(proc.exitcode, p, outcome, display, took)
            for run_id, (pid, p) in list(adrift.items()):
                if not _still_running(pid):
                    del adrift[run_id]
                    _settle(None, p, outcome, display, time.perf_counter() - launched[run_id])
            display.refresh()
        _drain(messages, display, timeout=0.0)
    except KeyboardInterrupt:
        # SIGTERM, which every run turns into an interruption: SIGINT may be ignored by the
        # runs (a sweep started in the background by a script inherits SIGINT ignored)
        for proc, _ in running.values():
            if proc.is_alive():
                os.kill(proc.pid, signal.SIGTERM)
        for pid, _ in adrift.values():
            if _still_running(pid):
                os.kill(pid, signal.SIGTERM)
        for proc, _ in running.values():
            proc.join(timeout=30)
        deadline = time.monotonic() + 30
        while any(_still_running(pid) for pid, _ in adrift.values()) and (
                time.monotonic() < deadline):
            time.sleep(0.1)
        raise
    finally:
        display.close()
    return outcome


def _drain(messages, display: SweepProgress, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    while True:
        try:
            msg = messages.get(timeout=max(0.0, deadline - time.monotonic()))
        except queue_mod.Empty:
            return
        display.message(msg)
        timeout = 0.0
        deadline = time.monotonic()


_HAS_PROC = Path("/proc/self/stat").exists()


def _still_running(pid: int) -> bool:
    """Whether process ``pid`` is alive and not a zombie (``/proc``; else a null signal)."""
    if _HAS_PROC:
        try:
            state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except (OSError, IndexError):
            return False
        return state not in ("Z", "X")
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _settle(exitcode: int | None, p: PreparedRun, outcome: Outcome, display: SweepProgress,
            took: float = 0.0) -> None:
    """Read what the finished process left on disk; a dead worker's run is marked failed.
    ``exitcode`` None: the process outlived its server, so only its records tell."""
    try:
        doc = records.read_run_json(p.run_dir) or {}
    except records.RecordError:
        doc = {}
    status = doc.get("status")
    outcome.process_s[p.run_id] = (took, doc.get("loop_s"))
    logger.debug("%s: process %.2f s, loop %s s", p.run_id, took, doc.get("loop_s"))
    if exitcode == EXIT_BUSY:
        outcome.busy.append(p.run_id)
        display.finished(p.run_id, "busy")
        return
    if status == "complete" and exitcode in (0, None):
        outcome.complete += 1
        display.finished(p.run_id, "complete")
        return
    if status == "running" or not doc:
        reason = _death_reason(exitcode)
        mark_failed(p, reason)
    else:
        reason = doc.get("error") or f"exit code {exitcode}"
    outcome.failed.append((p.run_id, reason))
    display.finished(p.run_id, "failed", reason)


def _death_reason(exitcode: int | None) -> str:
    if exitcode is None:
        return "worker process ended without recording a result (after the run server died)"
    if exitcode < 0:
        try:
            name = signal.Signals(-exitcode).name
        except ValueError:
            name = str(-exitcode)
        return f"worker process died ({name})"
    return f"worker process exited with code {exitcode} without recording a result"


def mark_failed(p: PreparedRun, reason: str) -> bool:
    """Record the failure of a run whose own process could not (it died). A folder that no
    longer takes writes (made read-only, a full disk) is one warning line, and the sweep
    goes on to its summary; what is on disk stays as it was. Returns whether it recorded."""
    try:
        doc = records.read_run_json(p.run_dir) or {"run_id": p.run_id}
    except records.RecordError:
        doc = {"run_id": p.run_id}
    doc.update(status="failed", error=reason, finished=records.now_iso())
    try:
        records.atomic_write_text(p.run_dir / "error.log", reason + "\n")
        records.atomic_write_json(p.run_dir / "run.json", doc)
    except OSError as err:
        logger.warning("%s: cannot record its failure in %s (%s: %s)", p.run_id, p.run_dir,
                       type(err).__name__, err.strerror or err)
        return False
    return True
