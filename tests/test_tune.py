"""seedsweep tune: bad search spaces refused, equal budgets enforced, tuning seeds apart from
evaluation seeds, a killed tune resuming without repeating a trial, chosen configurations
that build and record how they were tuned, and sensitivity tables that re-derive from the
runs' own records.

Real runs with tiny budgets: DQN with an 8-unit net on CartPole-v1, 300 env steps per run,
one tuning seed, 3 trials per agent.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import gymnasium
import numpy as np
import optuna
import pytest
import yaml
from optuna.storages import JournalStorage
from optuna.storages.journal import JournalFileBackend
from scipy.stats import trim_mean
from seedsweep.runner.commands.main import main
from seedsweep.runner.execution.config import compose
from seedsweep.runner.execution.prepare import load_agent_class
from seedsweep.runner.execution.seeding import derive_seeds
from seedsweep.runner.launch import api, search_space

ROOT = Path(__file__).resolve().parent.parent
TINY = """name: tiny
entry: seedsweep.agents.dqn:DQN
gamma: 0.99
hidden: [8]
batch_size: 16
replay_warmup_steps: 50
search:
{search}
"""
TINY_SEARCH = """  lr: {low: 1.0e-4, high: 1.0e-1, log: true}
  target_period_steps: {low: 10, high: 200, log: true}"""
FLAKY = """name: flaky
entry: tests.broken_agents:Raises
gamma: 0.99
fail_at: 100000
search:
  fail_at: {choices: [50, 60]}  # every trial raises at env step 50 or 60 of its 300
"""
PLAIN = """name: plain
entry: seedsweep.agents.dqn:DQN
gamma: 0.99
hidden: [8]
batch_size: 16
replay_warmup_steps: 50
"""
BASE = 1_000_000  # TUNING_SEED_BASE (execution/config.py), restated: the rule under test


def write_configs(folder: Path, search: str = TINY_SEARCH) -> Path:
    (folder / "agent").mkdir(parents=True, exist_ok=True)
    (folder / "agent" / "tiny.yaml").write_text(TINY.format(search=search))
    (folder / "agent" / "flaky.yaml").write_text(FLAKY)
    (folder / "agent" / "plain.yaml").write_text(PLAIN)
    return folder


def tune_args(configs: Path, results: Path, study: str, agents: str, *extra: str) -> list[str]:
    return ["tune", "--config-dir", str(configs), "--agents", agents, "--envs", "cartpole",
            "--trials", "3", "--steps", "300", "--seeds", "1", "--study", study, "--workers",
            "2", "--progress", "quiet", f"results_dir={results}", "eval.every=150",
            "eval.episodes=2", *extra]


def with_option(argv: list[str], flag: str, value: str) -> list[str]:
    argv = list(argv)
    argv[argv.index(flag) + 1] = value
    return argv


def call(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> dict:
    """One study of a healthy agent (tiny) and one whose every trial fails (flaky)."""
    tmp = tmp_path_factory.mktemp("tune")
    configs = write_configs(tmp / "configs")
    results = tmp / "results"
    code, out, err = call(tune_args(configs, results, "s", "tiny,flaky"))
    folder = results / "s"
    return {"code": code, "out": out, "err": err, "configs": configs, "results": results,
            "folder": folder, "doc": json.loads((folder / "study.json").read_text())}


# -- bad input ---------------------------------------------------------------------------------
# The wording is ours (DEVELOPERS.md, Bad input); the cases are the list of bad spaces.
@pytest.mark.parametrize("search,field,words", [
    ("  lr: {low: 1.0e-2, high: 1.0e-4}", "tiny.search.lr", "empty range"),
    ("  lr: {low: 0.0, high: 1.0e-2, log: true}", "tiny.search.lr", "log scale needs low > 0"),
    ("  target_period: {low: 10, high: 200}", "tiny.search.target_period",
     "did you mean 'target_period_steps'?"),
    ("  hidden: {low: 8, high: 64}", "tiny.search.hidden", "needs a numeric hyperparameter"),
    ("  batch_size: {low: 8.5, high: 64}", "tiny.search.batch_size.low", "expected an integer"),
    ("  hidden: {choices: [[8], 16]}", "tiny.search.hidden.choices[1]", "expected a list"),
    ("  double_q: {choices: [true, 'yes']}", "tiny.search.double_q.choices[1]",
     "expected true or false"),
    # DQN's Config refuses lr <= 0 (agents/dqn.py): the bound is built into the Config
    ("  lr: {low: -1.0, high: 1.0e-2}", "tiny.search.lr", "refused by the agent"),
    ("  lr: {low: 1.0e-4, high: 1.0e-2, scale: log}", "tiny.search.lr.scale", "unknown key"),
    ("  {}", "tiny.search", "expected a mapping"),
])
def test_bad_search_spaces_are_refused_with_one_line(tmp_path, search, field, words):
    configs = write_configs(tmp_path / "configs", search)
    code, out, err = call(tune_args(configs, tmp_path / "results", "bad", "tiny"))
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith(f"seedsweep: error: {field}: "), err
    assert words in err
    assert not (tmp_path / "results").exists()  # nothing written


@pytest.mark.parametrize("path", sorted((ROOT / "configs" / "agent").glob("*.yaml")),
                         ids=lambda p: p.stem)
def test_every_shipped_search_section_is_accepted_by_its_agent(path):
    """Each bound and choice of a shipped search: section builds the agent's Config (its own
    range checks), so a study never fails on a trial the space allows."""
    doc = yaml.safe_load(path.read_text())
    if "search" not in doc:
        pytest.skip(f"{path.stem} has nothing to tune")
    space = search_space.parse(path.stem, doc, load_agent_class(doc["entry"]), str(path))
    assert [d.key for d in space.dimensions] == list(doc["search"])


def test_an_agent_without_a_search_section_and_bad_options_are_refused(tmp_path):
    configs = write_configs(tmp_path / "configs")
    results = tmp_path / "results"
    cases = [
        (tune_args(configs, results, "x", "plain"), "plain.search: ", "no search: section"),
        (tune_args(configs, results, "x", "tiny", "agent.lr=0.1"), "agent.lr: ", "set by"),
        (tune_args(configs, results, "x", "tiny", "seed=3"), "seed: ", "--seeds"),
        (tune_args(configs, results, "x", "tiny,tiny"), "--agents: ", "named twice"),
        (tune_args(configs, results, "a/b", "tiny"), "--study: ", "folder name"),
        (with_option(tune_args(configs, results, "x", "tiny"), "--trials", "0"), "--trials: ",
         ">= 1"),
    ]
    for argv, field, words in cases:
        code, _, err = call(argv)
        assert code == 2 and err.count("\n") == 1, err
        assert err.startswith(f"seedsweep: error: {field}") and words in err, err
    assert not results.exists()


# -- equal budgets -----------------------------------------------------------------------------


def test_every_agent_gets_the_same_trials_and_unequal_results_are_flagged(study):
    doc = study["doc"]
    assert doc["budget"]["trials"] == 3 and doc["budget"]["steps"] == 300
    assert [t["state"] for t in doc["trials"]["tiny"]] == ["complete"] * 3
    assert [t["state"] for t in doc["trials"]["flaky"]] == ["fail"] * 3  # fail_at 50/60 < 300
    assert "deliberate failure" in json.dumps(doc["trials"]["flaky"])
    assert study["code"] == 1  # not every trial complete
    assert "unequal tuning in study s: tiny 3 of 3 trials complete; flaky 0 of 3" in study["err"]
    assert doc["equal_budgets"] is False
    assert (study["folder"] / "chosen" / "agent" / "tiny.yaml").is_file()
    assert not (study["folder"] / "chosen" / "agent" / "flaky.yaml").exists()


@pytest.mark.parametrize("change,field", [(["--trials", "5"], "--trials"),
                                          (["--steps", "400"], "--steps"),
                                          (["--seeds", "2"], "--seeds")])
def test_a_continued_study_with_another_budget_is_refused(study, change, field):
    argv = with_option(tune_args(study["configs"], study["results"], "s", "tiny"), *change)
    before = {p: p.stat().st_mtime_ns for p in study["folder"].rglob("*") if p.is_file()}
    code, _, err = call(argv)
    assert code == 2 and err.count("\n") == 1
    assert err.startswith(f"seedsweep: error: {field}: study s gives every agent "), err
    assert before == {p: p.stat().st_mtime_ns for p in study["folder"].rglob("*") if p.is_file()}


# -- seeds -------------------------------------------------------------------------------------


def test_tuning_and_evaluation_seeds_never_overlap(study, tmp_path):
    trial_runs = [json.loads(p.read_text()) for p in study["folder"].glob("*/run.json")]
    assert trial_runs and all(r["seed"] >= BASE for r in trial_runs)
    configs = [yaml.safe_load(p.read_text()) for p in study["folder"].glob("*/config.yaml")]
    assert all(c["tuning"] is True for c in configs)
    # the seeds every env and episode actually used (run.json records them) never meet
    # those of evaluation runs with seeds 0..99 (derived by the runner's own SeedSequence)
    used = {s for r in trial_runs for s in [r["seeds"]["train_env"],
                                            *r["seeds"]["eval_episodes"]]}
    evaluation = set()
    for seed in range(100):
        s = derive_seeds(seed, 2, 1)
        evaluation |= {s.train_env, *s.eval_episodes}
    assert used and not used & evaluation
    # and the runner refuses to cross the line either way
    for bad in (["seed=1000000"], ["seed=0", "tuning=true"]):
        code, _, err = call(["run", "agent=random", "env=cartpole", "steps=10",
                             f"results_dir={tmp_path}", *bad])
        assert code == 2 and err.startswith("seedsweep: error: seed: "), err
    assert not any(tmp_path.iterdir())


def test_report_refuses_mixed_folders_and_compare_refuses_tuning_trials(study, tmp_path):
    folder = tmp_path / "mixed"
    for seed in (0, 1):
        api.run(["agent=plain", "env=cartpole", f"seed={seed}", "steps=100", "eval.every=100",
                 "eval.episodes=2", "sweep=mixed"], results_dir=str(tmp_path),
                config_dirs=[study["configs"]])
    trial = next(p.parent for p in study["folder"].glob("tiny-*/run.json"))
    shutil.copytree(trial, folder / trial.name)
    code, _, err = call(["report", str(folder), "--allow-few", "--no-figures", "--quiet"])
    assert code == 2 and "mixes 1 tuning-trial runs with 2 evaluation runs" in err, err
    code, _, err = call(["compare", str(study["folder"]), "--candidate", "tiny", "--allow-few"])
    assert code == 2 and "holds tuning trials" in err and err.count("\n") == 1, err
    assert not (folder / "report").exists() and not (study["folder"] / "report").exists()


# -- the chosen configuration ------------------------------------------------------------------


def test_chosen_yaml_is_the_best_trial_and_its_runs_record_tuned(study, tmp_path):
    doc = study["doc"]
    trials = doc["trials"]["tiny"]
    best = max(trials, key=lambda t: t["objective"])  # the highest objective (maximised)
    chosen = yaml.safe_load((study["folder"] / "chosen" / "agent" / "tiny.yaml").read_text())
    assert chosen["lr"] == best["values"]["lr"]
    assert chosen["target_period_steps"] == best["values"]["target_period_steps"]
    assert chosen["tuned"]["trials"] == 3 and chosen["tuned"]["steps"] == 300
    assert chosen["tuned"]["envs"] == ["cartpole"] and chosen["tuned"]["seeds_per_env"] == 1
    assert chosen["tuned"]["objective"] == best["objective"]
    dirs = [study["configs"], study["folder"] / "chosen"]
    common = ["env=cartpole", "steps=300", "eval.every=150", "eval.episodes=2", "sweep=ev"]
    for seed in (0, 1):
        tuned_run = api.run(["agent=tiny", f"seed={seed}", *common], results_dir=str(tmp_path),
                            config_dirs=dirs)
        api.run(["agent=plain", f"seed={seed}", *common], results_dir=str(tmp_path),
                config_dirs=dirs)
    config = yaml.safe_load((tuned_run / "config.yaml").read_text())
    assert config["agent"]["tuned"]["study"] == "s"
    assert config["agent"]["lr"] == best["values"]["lr"]
    assert json.loads((tuned_run / "run.json").read_text())["status"] == "complete"
    # an evaluation run of the chosen configuration: the report says how it was tuned, and a
    # comparison against an untuned baseline carries a warning
    code, out, _ = call(["report", str(tmp_path / "ev"), "--candidate", "tiny", "--no-figures"])
    assert code == 0, out
    summary = json.loads((tmp_path / "ev" / "report" / "summary.json").read_text())
    assert summary["agents"]["tiny"]["tuning"]["study"] == "s"
    assert summary["agents"]["plain"]["tuning"] is None
    compared = json.loads((tmp_path / "ev" / "report" / "compare.json").read_text())
    assert "plain was not" in compared["tuning_note"] and "warning: tiny was tuned" in out
    page = (tmp_path / "ev" / "report" / "report.html").read_text()
    assert "tuned: 3 trials × 300 steps × 1 envs" in page and "not tuned" in page
    assert '<p class="warn">tiny was tuned' in page


# -- resuming ----------------------------------------------------------------------------------


def test_a_killed_tune_resumes_without_repeating_a_complete_trial(study, tmp_path):
    """SIGKILL of the whole process group in round 2 (as a crash would); the same command
    continues: trial 1's complete runs stay untouched and the trials come out exactly as in
    the uninterrupted study (same budget and sampler seed; tiny's draws depend on its own
    trials only)."""
    argv = tune_args(study["configs"], tmp_path, "k", "tiny")
    folder = tmp_path / "k"
    proc = subprocess.Popen([sys.executable, "-m", "seedsweep.runner.commands.main", *argv],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            trials = json.loads((folder / "study.json").read_text())["trials"].get("tiny", [])
        except (OSError, ValueError):
            trials = []
        if any(t["state"] == "complete" for t in trials):
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    killed = json.loads((folder / "study.json").read_text())["trials"]["tiny"]
    done = [t for t in killed if t["state"] == "complete"]
    assert 1 <= len(done) < 3  # stopped mid-way
    kept = {r: (folder / r / "run.json").read_bytes() for t in done for r in t["runs"]}
    code, _, err = call(argv)
    assert code == 0, err
    after = json.loads((folder / "study.json").read_text())["trials"]["tiny"]
    assert [t["state"] for t in after] == ["complete"] * 3
    for run_id, blob in kept.items():  # complete trials were reused, not run again
        assert (folder / run_id / "run.json").read_bytes() == blob
    storage = JournalStorage(JournalFileBackend(str(folder / "_tune" / "tiny.journal")))
    drawn = optuna.load_study(study_name="tiny", storage=storage).get_trials()
    finished = [t for t in drawn if t.state == optuna.trial.TrialState.COMPLETE]
    assert len(finished) == 3  # one optuna trial per budget slot: none told twice
    run_dirs = {p.parent.name for p in folder.glob("*/run.json")}
    assert run_dirs == {r for t in after for r in t["runs"]}
    reference = study["doc"]["trials"]["tiny"]
    assert [t["values"] for t in after] == [t["values"] for t in reference]
    assert [t["objective"] for t in after] == [t["objective"] for t in reference]
    for t in after:
        for r in t["runs"]:
            assert ((folder / r / "eval.csv").read_bytes()
                    == (study["folder"] / r / "eval.csv").read_bytes())


# -- sensitivity -------------------------------------------------------------------------------


def test_sensitivity_table_re_derives_from_the_runs_records(tmp_path):
    """A grid over agent.lr (4 seeds each) plus random runs; the report's sensitivity table
    is recomputed here from eval.csv and config.yaml alone: the normalised score is
    (last evaluation mean - random) / (475 - random), 475 being CartPole-v1's
    reward_threshold (gymnasium spec), random the mean over the random runs' last-evaluation
    episodes, and the IQM scipy's 25% trimmed mean."""
    common = ["env=cartpole", "steps=600", "eval.every=300", "eval.episodes=3", "sweep=grid",
              "agent.hidden=[16]", "agent.replay_warmup_steps=100"]
    for lr in ("0.001", "0.03"):
        for seed in range(4):
            api.run(["agent=dqn", f"agent.lr={lr}", f"seed={seed}", *common],
                    results_dir=str(tmp_path))
    for seed in range(2):
        api.run(["agent=random", f"seed={seed}", *common[:5]], results_dir=str(tmp_path))
    folder = tmp_path / "grid"
    code, out, err = call(["report", str(folder)])
    assert code == 0, err
    summary = json.loads((folder / "report" / "summary.json").read_text())
    (table,) = summary["sensitivity"]
    assert (table["agent"], table["key"], table["marginal"]) == ("dqn", "lr", False)
    assert (folder / "report" / "figures" / "sensitivity.png").is_file()
    assert "<h2>Sensitivity to swept settings</h2>" in (
        folder / "report" / "report.html").read_text()
    assert "sensitivity of dqn: lr" in out

    def last_evaluation(run_dir: Path) -> list[float]:
        rows = list(csv.DictReader((run_dir / "eval.csv").open()))
        last = max(int(r["env_step"]) for r in rows)
        return [float(r["return"]) for r in rows if int(r["env_step"]) == last]

    reference = gymnasium.spec("CartPole-v1").reward_threshold
    random_returns, by_lr = [], {}
    for run_dir in sorted(p for p in folder.iterdir() if (p / "eval.csv").is_file()):
        config = yaml.safe_load((run_dir / "config.yaml").read_text())
        if config["agent"]["name"] == "random":
            random_returns += last_evaluation(run_dir)
        else:
            by_lr.setdefault(config["agent"]["lr"], []).append(run_dir)
    random = float(np.mean(random_returns))
    assert [row["value"] for row in table["rows"]] == sorted(by_lr) == [0.001, 0.03]
    for row in table["rows"]:
        normalised = [(np.mean(last_evaluation(d)) - random) / (reference - random)
                      for d in by_lr[row["value"]]]
        assert row["n_runs"] == 4
        assert row["point"] == pytest.approx(trim_mean(normalised, 0.25), abs=1e-12)
        assert sorted(row["scores"]) == pytest.approx(sorted(normalised), abs=1e-12)
        assert row["low"] <= row["point"] <= row["high"]


def test_a_config_dir_file_wins_over_the_shipped_one_and_earlier_config_dirs(tmp_path):
    """What makes --config-dir <study>/chosen take effect for a shipped agent name: the last
    folder that has agent/dqn.yaml wins (group_file's rule), the shipped configs last."""
    first, second = tmp_path / "a", tmp_path / "b"
    for folder, lr in ((first, 0.123), (second, 0.456)):
        (folder / "agent").mkdir(parents=True)
        doc = yaml.safe_load((ROOT / "configs" / "agent" / "dqn.yaml").read_text())
        doc.pop("per_env", None)  # a per-env lr would override the file's own on cartpole
        (folder / "agent" / "dqn.yaml").write_text(yaml.safe_dump({**doc, "lr": lr}))
    assert compose(["agent=dqn"], [first])["agent"]["lr"] == 0.123
    assert compose(["agent=dqn"], [first, second])["agent"]["lr"] == 0.456
    assert compose(["agent=dqn"], [second, first])["agent"]["lr"] == 0.123
    assert compose(["agent=dqn", "agent.lr=0.5"], [first])["agent"]["lr"] == 0.5
