"""``seedsweep tune``: the same search budget for every agent, on seeds reserved for tuning.

One study folder ``<results_dir>/<study>/`` holds everything:

* ``study.json`` — the budget every agent gets (trials × steps × envs × seeds, evaluation
  settings, sampler seed), each agent's search space and YAML, and a summary of every trial
  (written atomically after each round; a continued study must ask for the same budget);
* ``_tune/<agent>.journal`` — one optuna study per agent in optuna's journal file storage
  (an append-only log that works on a shared filesystem), the record trials resume from;
* one ordinary run folder per trial run (``tuning: true``, seeds from
  ``TUNING_SEED_BASE``), launched through the usual sweep machinery, so ``seedsweep status``
  and ``report`` read the folder as any sweep;
* ``chosen/agent/<agent>.yaml`` — each agent's YAML with its best trial's values and a
  ``tuned:`` record, ready for ``--config-dir <study>/chosen``.

Trials run in rounds: round ``k`` runs trial ``k`` of every agent together, as one sweep (its
runs in parallel on the workers). Trial ``k`` of an agent is drawn by a TPE sampler seeded
from ``--sampler-seed``, the agent's name and ``k`` alone, from that agent's trials ``0..k-1``,
so the sequence of configurations depends only on the seed and the completed trials — an
interrupted tune continues with exactly the trials an uninterrupted one would have run.
A trial already complete is never run again; a trial cut short resumes its runs (complete
runs are skipped, as in any sweep).
"""

from __future__ import annotations

import json
import logging
import zlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import optuna
import yaml
from filelock import FileLock, Timeout
from optuna.storages import JournalStorage
from optuna.storages.journal import JournalFileBackend
from optuna.trial import FrozenTrial, TrialState
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis.scores import MissingRandomScore
from seedsweep.runner.analysis.tuning import OBJECTIVE, References, trial_value
from seedsweep.runner.execution import records
from seedsweep.runner.execution.config import (
    TUNING_SEED_BASE,
    compose,
    group_file,
    read_yaml,
)
from seedsweep.runner.execution.prepare import PreparedRun, load_agent_class
from seedsweep.runner.launch import search_space
from seedsweep.runner.launch.plan import check_plan, plan
from seedsweep.runner.launch.random_scores import measure_random
from seedsweep.runner.launch.search_space import SearchSpace
from seedsweep.runner.launch.sweep import SweepOptions, run_sweep

logger = logging.getLogger(__name__)
optuna.logging.set_verbosity(optuna.logging.WARNING)  # our own lines say what happens

STUDY_FILE = "study.json"
TUNE_DIR = "_tune"
CHOSEN_DIR = "chosen"
SAMPLER = "TPE (optuna TPESampler, independent per key), seeded per agent and trial"
# (flag of the command line, key in study.json) of every part of the budget
BUDGET_FLAGS = {"trials": "--trials", "steps": "--steps", "envs": "--envs",
                "seeds_per_env": "--seeds", "sampler_seed": "--sampler-seed",
                "overrides": "overrides"}


@dataclass
class TuneRequest:
    agents: list[str]
    envs: list[str]
    trials: int
    steps: int
    seeds: int
    study: str
    sampler_seed: int = 0
    overrides: list[str] = field(default_factory=list)  # eval.*, checkpoint.every, ...
    config_dirs: list[Path] = field(default_factory=list)
    results_dir: Path = Path("results")
    sweep: SweepOptions = field(default_factory=SweepOptions)

    @property
    def folder(self) -> Path:
        return self.results_dir / self.study

    @property
    def tuning_seeds(self) -> list[int]:
        return [TUNING_SEED_BASE + i for i in range(self.seeds)]

    @property
    def startup_trials(self) -> int:
        """Trials drawn at random before TPE models the results: a third of the budget,
        between 2 and 10 (optuna's default of 10 would leave a 12-trial budget random)."""
        return max(2, min(10, self.trials // 3))

    def budget(self) -> dict[str, Any]:
        return {"trials": self.trials, "steps": self.steps, "envs": list(self.envs),
                "seeds_per_env": self.seeds, "tuning_seeds": self.tuning_seeds,
                "sampler_seed": self.sampler_seed, "overrides": sorted(self.overrides),
                "startup_trials": self.startup_trials}


@dataclass
class TunedAgent:
    """An agent to tune: its YAML (as written, for the chosen copy) and search space."""

    name: str
    path: Path
    doc: dict[str, Any]
    space: SearchSpace

    def record(self) -> dict[str, Any]:
        return {"yaml": str(self.path), "search": self.space.describe(),
                "settings": {k: v for k, v in self.doc.items() if k != "search"}}


# -- checks (nothing written) ----------------------------------------------------------------


def trial_overrides(req: TuneRequest, agent: str, values: dict[str, Any],
                    space: SearchSpace | None) -> list[str]:
    """The overrides of one trial's runs: every env, every tuning seed, the one budget."""
    out = [f"agent={agent}", f"env={','.join(req.envs)}",
           f"seed={','.join(map(str, req.tuning_seeds))}", f"steps={req.steps}", "tuning=true",
           f"sweep={req.study}", f"results_dir={req.results_dir}", *req.overrides]
    return out + (space.overrides(values) if space is not None else [])


def check_request(req: TuneRequest) -> list[TunedAgent]:
    """Every check before anything is written: agents, envs, overrides, search spaces and
    a continued study's budget. Raises ConfigError."""
    if len(set(req.agents)) != len(req.agents):
        raise ConfigError("--agents", f"an agent is named twice ({', '.join(req.agents)})")
    if len(set(req.envs)) != len(req.envs):
        raise ConfigError("--envs", f"an env is named twice ({', '.join(req.envs)})")
    agents = []
    for name in req.agents:
        path = group_file("agent", name, req.config_dirs)
        doc = read_yaml(path, f"{name}.search")
        if not isinstance(doc, dict):
            raise ConfigError("agent", f"{path} must hold a mapping of agent settings")
        # the agent's own settings on every env, with the run's checks (env, action space)
        plan(trial_overrides(req, name, {}, None), multirun=True, extra_dirs=req.config_dirs)
        entry = compose([f"agent={name}"], req.config_dirs)["agent"].get("entry")
        space = search_space.parse(name, doc, load_agent_class(entry), str(path))
        agents.append(TunedAgent(name, path, doc, space))
    check_continuation(req, agents, read_study(req.folder))
    return agents


def read_study(folder: Path) -> dict[str, Any] | None:
    path = folder / STUDY_FILE
    if not path.exists():
        return None
    try:
        doc = json.loads(path.read_text())
    except (OSError, ValueError) as err:
        raise ConfigError("--study", f"{path} cannot be read ({err}); it holds the study's "
                          "budget: restore it, or use another --study") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("budget"), dict):
        raise ConfigError("--study", f"{path} is not a study record")
    return doc


def check_continuation(req: TuneRequest, agents: list[TunedAgent],
                       study: dict[str, Any] | None) -> None:
    """A continued study gives every agent the budget it gave the first ones; an agent
    already in it keeps its search space and settings."""
    if study is None:
        if req.folder.is_dir() and any(req.folder.glob("*/run.json")):
            raise ConfigError("--study", f"{req.folder} holds runs but no {STUDY_FILE}: it is "
                              "not a tuning study; use another --study")
        return
    old, new = study["budget"], req.budget()
    for key, flag in BUDGET_FLAGS.items():
        if old.get(key) != new[key]:
            raise ConfigError(flag, f"study {req.study} gives every agent {key} = "
                              f"{_show(old.get(key))}; this asks for {_show(new[key])}. Every "
                              "agent gets the same budget: ask for the same, or use another "
                              "--study")
    known = study.get("agents") or {}
    for a in agents:
        if a.name not in known:
            continue
        before = known[a.name]
        if before.get("search") != a.space.describe():
            raise ConfigError(f"{a.name}.search", f"changed since study {req.study} started "
                              f"(was {_show(before.get('search'))}); use another --study")
        if before.get("settings") != a.record()["settings"]:
            raise ConfigError(a.name, f"{a.path} changed since study {req.study} started; "
                              "restore it or use another --study")


def _show(value: Any) -> str:
    if isinstance(value, list) and all(isinstance(v, str) for v in value):
        return ",".join(value) if value else "(none)"
    return json.dumps(value)


# -- the study ---------------------------------------------------------------------------------


def slot_seed(sampler_seed: int, agent: str, slot: int) -> int:
    """The sampler seed of an agent's trial ``slot``: stable across processes and machines."""
    seq = np.random.SeedSequence([sampler_seed, zlib.crc32(agent.encode()), slot])
    return int(seq.generate_state(1)[0])


class AgentStudy:
    """One agent's optuna study in its journal file."""

    def __init__(self, req: TuneRequest, agent: TunedAgent):
        self.req = req
        self.agent = agent
        path = req.folder / TUNE_DIR / f"{agent.name}.journal"
        path.parent.mkdir(parents=True, exist_ok=True)
        self.storage = JournalStorage(JournalFileBackend(str(path)))
        self.study = optuna.create_study(study_name=agent.name, storage=self.storage,
                                         direction="maximize", load_if_exists=True)

    def trials(self) -> list[FrozenTrial]:
        """The agent's trials in order; a trial cut short while its values were drawn (some
        keys missing) is closed as failed and does not count."""
        out = []
        for t in self.study.get_trials(deepcopy=False):
            if self.agent.space.complete(t.params):
                out.append(t)
            elif t.state == TrialState.RUNNING:
                self.study.tell(t.number, state=TrialState.FAIL)
        return sorted(out, key=lambda t: t.number)

    def trial(self, slot: int) -> FrozenTrial:
        """Trial ``slot``: the one already drawn, or a new one drawn now."""
        done = self.trials()
        if len(done) > slot:
            return done[slot]
        if len(done) < slot:
            raise RuntimeError(f"{self.agent.name}: trial {slot} asked before trial {len(done)}")
        sampler = optuna.samplers.TPESampler(
            seed=slot_seed(self.req.sampler_seed, self.agent.name, slot),
            n_startup_trials=self.req.startup_trials)
        study = optuna.load_study(study_name=self.agent.name, storage=self.storage,
                                  sampler=sampler)
        trial = study.ask(self.agent.space.distributions())
        return self.study.get_trials(deepcopy=False)[trial.number]

    def tell(self, number: int, value: float | None) -> None:
        if value is None:
            self.study.tell(number, state=TrialState.FAIL)
        else:
            self.study.tell(number, value)


@dataclass
class Pending:
    """A trial of this round whose runs are to be launched."""

    agent: TunedAgent
    study: AgentStudy
    slot: int
    trial: FrozenTrial
    planned: list[PreparedRun]


class Tuner:
    """Runs the rounds of a study and keeps study.json up to date."""

    def __init__(self, req: TuneRequest, agents: list[TunedAgent]):
        self.req = req
        self.agents = agents
        self.notes: dict[str, dict[int, dict[str, Any]]] = {a.name: {} for a in agents}
        self.references = References(req.results_dir)
        self.measured: set[str] = set()
        self.finished = False  # every trial of every agent drawn and settled

    def run(self) -> int:
        req = self.req
        req.folder.mkdir(parents=True, exist_ok=True)
        lock = FileLock(str(req.folder / ".tune.lock"), timeout=0)
        try:
            lock.acquire()
        except Timeout:
            logger.info("study %s is being tuned by another process right now; not started",
                        req.study)
            return 1
        try:
            study = read_study(req.folder)  # again, under the lock
            check_continuation(req, self.agents, study)
            self.studies = {a.name: AgentStudy(req, a) for a in self.agents}
            for a in self.agents:
                self.notes[a.name] = {int(k): v for k, v in
                                      ((study or {}).get("notes", {}).get(a.name) or {}).items()}
            self._start_doc(study)
            for slot in range(req.trials):
                if not self._round(slot):
                    self._write_doc()
                    logger.info("study %s stopped in round %d of %d: runs not complete "
                                "(running elsewhere, or not finished); the same command "
                                "continues it", req.study, slot + 1, req.trials)
                    return 1
                self._write_doc()
            return self._finish()
        finally:
            lock.release()

    # -- one round -----------------------------------------------------------------------

    def _round(self, slot: int) -> bool:
        """Trial ``slot`` of every agent; False when runs were left incomplete."""
        pending = []
        for a in self.agents:
            st = self.studies[a.name]
            trial = st.trial(slot)
            if trial.state != TrialState.RUNNING:
                continue
            values = a.space.decode(trial.params)
            try:
                planned = plan(trial_overrides(self.req, a.name, values, a.space),
                               multirun=True, extra_dirs=self.req.config_dirs)
            except ConfigError as err:  # the agent refuses this combination of values
                self.notes[a.name][slot] = {"error": str(err)}
                st.tell(trial.number, None)
                logger.warning("%s trial %d: configuration refused (%s); counted as failed",
                               a.name, slot, err)
                continue
            self.notes[a.name][slot] = {"runs": [p.run_id for p in planned]}
            pending.append(Pending(a, st, slot, trial, planned))
        if not pending:
            return True
        logger.info("round %d of %d: %s", slot + 1, self.req.trials, "; ".join(
            f"{p.agent.name} {_fmt_values(p.agent.space.decode(p.trial.params))}"
            for p in pending))
        every = check_plan([r for p in pending for r in p.planned])
        run_sweep(every, ["tune", f"study={self.req.study}", f"round={slot}",
                          *self.req.overrides], self.req.sweep)
        complete = True
        for p in pending:
            complete &= self._settle(p)
        return complete

    def _settle(self, p: Pending) -> bool:
        """Tell the trial its value (or that it failed) once all its runs are settled."""
        states, failed = {}, {}
        for r in p.planned:
            try:
                doc = records.read_run_json(r.run_dir) or {}
            except records.RecordError:
                doc = {}
            states[r.run_id] = doc.get("status")
            if doc.get("status") == "failed":
                failed[r.run_id] = doc.get("error") or "failed"
        if any(s not in ("complete", "failed") for s in states.values()):
            return False
        note = self.notes[p.agent.name][p.slot]
        if failed:
            note["failed_runs"] = failed
            p.study.tell(p.trial.number, None)
            logger.warning("%s trial %d failed: %s", p.agent.name, p.slot,
                           "; ".join(f"{k}: {v}" for k, v in failed.items()))
            return True
        value, normalised = self._value([r.run_dir for r in p.planned])
        note["normalised_scores"] = normalised
        p.study.tell(p.trial.number, value)
        logger.info("%s trial %d: objective %.4f", p.agent.name, p.slot, value)
        return True

    def _value(self, run_dirs: Sequence[Path]) -> tuple[float, dict]:
        """The objective, measuring a missing random score first (once per env)."""
        while True:
            try:
                return trial_value(run_dirs, self.references)
            except MissingRandomScore as missing:
                key = str(missing.request.folder)
                if key in self.measured:
                    raise ConfigError("random", f"{missing}; the measured random run in "
                                      f"{key} was not usable") from None
                self.measured.add(key)
                measure_random(missing.request)

    # -- study.json and the result -------------------------------------------------------

    def _start_doc(self, study: dict[str, Any] | None) -> None:
        doc = study or {"study": self.req.study, "created": records.now_iso(),
                        "budget": self.req.budget(), "objective": OBJECTIVE,
                        "sampler": SAMPLER, "agents": {}, "notes": {}, "trials": {}}
        doc.setdefault("notes", {})
        doc.setdefault("invocations", []).append(
            {"at": records.now_iso(), "agents": list(self.req.agents)})
        for a in self.agents:
            doc["agents"].setdefault(a.name, a.record())
        self.doc = doc
        self._write_doc()

    def _write_doc(self) -> None:
        for a in self.agents:
            self.doc["notes"][a.name] = {str(k): v for k, v in sorted(self.notes[a.name].items())}
            self.doc["trials"][a.name] = [self._trial_entry(a, slot, t) for slot, t in
                                          enumerate(self.studies[a.name].trials())]
        self.doc["summary"] = summarise(self.doc)
        records.atomic_write_json(self.req.folder / STUDY_FILE, self.doc)

    def _trial_entry(self, a: TunedAgent, slot: int, t: FrozenTrial) -> dict[str, Any]:
        note = self.notes[a.name].get(slot, {})
        return {"trial": slot, "optuna_number": t.number, "state": t.state.name.lower(),
                "values": a.space.decode(t.params), "objective": t.value,
                "runs": note.get("runs", []), "failed_runs": note.get("failed_runs", {}),
                "error": note.get("error")}

    def _finish(self) -> int:
        self.finished = True
        summary = self.doc["summary"]
        for a in self.agents:
            best = summary[a.name]["best"]
            if best is None:
                logger.warning("%s: no trial completed; no configuration chosen", a.name)
                continue
            write_chosen(self.req, a, summary[a.name], self.doc["budget"])
        if not summary_equal(summary):
            logger.warning("unequal tuning in study %s: %s", self.req.study, "; ".join(
                f"{n} {s['complete']} of {s['trials']} trials complete"
                for n, s in summary.items()))
        self.doc["equal_budgets"] = summary_equal(summary)
        records.atomic_write_json(self.req.folder / STUDY_FILE, self.doc)
        ours = [summary[a.name] for a in self.agents]
        return 0 if all(s["complete"] == s["trials"] for s in ours) else 1


def _fmt_values(values: dict[str, Any]) -> str:
    return ", ".join(f"{k}={_short(v)}" for k, v in values.items())


def _short(v: Any) -> str:
    return f"{v:.4g}" if isinstance(v, float) else json.dumps(v)


def summarise(doc: dict[str, Any]) -> dict[str, dict[str, Any]]:
    """Per agent of the study: trials asked, complete, failed, and the best trial (highest
    objective; the earliest on ties)."""
    out = {}
    for name, trials in doc["trials"].items():
        complete = [t for t in trials if t["state"] == "complete"]
        best = max(complete, key=lambda t: (t["objective"], -t["trial"]), default=None)
        out[name] = {"trials": doc["budget"]["trials"], "drawn": len(trials),
                     "complete": len(complete),
                     "failed": sum(t["state"] == "fail" for t in trials), "best": best}
    return out


def summary_equal(summary: dict[str, dict[str, Any]]) -> bool:
    return len({s["complete"] for s in summary.values()}) <= 1


# -- the chosen configuration --------------------------------------------------------------


def chosen_doc(req: TuneRequest, agent: TunedAgent, result: dict[str, Any],
               budget: dict[str, Any]) -> dict[str, Any]:
    """The agent's YAML with the best trial's values and a ``tuned:`` record. Searched keys
    are dropped from ``per_env`` sections, which would otherwise override the chosen value."""
    best = result["best"]
    doc = {k: v for k, v in agent.doc.items() if k != "tuned"}
    doc.update(best["values"])
    per_env = doc.get("per_env")
    if isinstance(per_env, dict):
        kept = {env: {k: v for k, v in (s or {}).items() if k not in best["values"]}
                for env, s in per_env.items()}
        doc["per_env"] = {env: s for env, s in kept.items() if s}
        if not doc["per_env"]:
            del doc["per_env"]
    doc["tuned"] = {
        "study": req.study, "trials": budget["trials"], "complete_trials": result["complete"],
        "steps": budget["steps"], "envs": budget["envs"],
        "seeds_per_env": budget["seeds_per_env"], "tuning_seeds": budget["tuning_seeds"],
        "overrides": budget["overrides"], "sampler_seed": budget["sampler_seed"],
        "best_trial": best["trial"], "objective": best["objective"],
        "searched": agent.space.keys,
    }
    return doc


def write_chosen(req: TuneRequest, agent: TunedAgent, result: dict[str, Any],
                 budget: dict[str, Any]) -> Path:
    doc = chosen_doc(req, agent, result, budget)
    best = result["best"]
    header = (f"# {agent.name} as chosen by seedsweep tune, study {req.study}: trial "
              f"{best['trial']}, the best of {result['complete']} complete trials\n"
              f"# (objective {best['objective']:.6g}: the IQM of the trial runs' normalised "
              f"final scores).\n# Copied from {agent.path}; searched: "
              f"{', '.join(agent.space.keys)}.\n# Evaluate it on fresh seeds (below "
              f"{TUNING_SEED_BASE}).\n")
    path = req.folder / CHOSEN_DIR / "agent" / f"{agent.name}.yaml"
    records.atomic_write_text(path, header + yaml.safe_dump(doc, sort_keys=False,
                                                             default_flow_style=None))
    return path


def next_command(req: TuneRequest, eval_seeds: int = 10) -> str:
    """The evaluation sweep of the chosen configurations, on fresh seeds."""
    dirs = [*map(str, req.config_dirs), str(req.folder / CHOSEN_DIR)]
    parts = ["seedsweep run -m", *(f"--config-dir {d}" for d in dirs),
             f"agent={','.join(req.agents)}", f"env={','.join(req.envs)}",
             f"'seed=range({eval_seeds})'", f"steps={req.steps}", *req.overrides,
             f"sweep={req.study}-eval"]
    if req.results_dir != Path("results"):
        parts.append(f"results_dir={req.results_dir}")
    return " ".join(parts)
