"""The report command end to end on small synthetic sweeps written in the run-record format.

The run data here is invented (it tests the plumbing); check values come from scipy,
gymnasium specs and the oracle (itself checked in test_oracle.py)."""

import json
import zlib
from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import yaml
from scipy import stats as sps
from seedsweep.runner.analysis import oracle
from seedsweep.runner.analysis.report import compute_report
from seedsweep.runner.commands import options
from seedsweep.runner.commands.report import build_parser
from seedsweep.runner.commands.report import main as report_main

ENVS = {
    "frozenlake": {"name": "frozenlake", "id": "FrozenLake-v1",
                   "kwargs": {"map_name": "4x4", "is_slippery": True},
                   "max_episode_steps": None, "reference": None,
                   "wrappers": [{"name": "one_hot"}]},
    "cartpole": {"name": "cartpole", "id": "CartPole-v1", "kwargs": {},
                 "max_episode_steps": None, "reference": None, "wrappers": []},
    "pendulum": {"name": "pendulum", "id": "Pendulum-v1", "kwargs": {},
                 "max_episode_steps": None, "reference": None, "wrappers": []},
}
FAST = ["--resamples", "200"]


def write_run(sweep: Path, agent: str, env: str, seed: int, level: float, *,
              status: str = "complete", episodes: int = 4, every: int = 100, steps: int = 300,
              error: str | None = None, env_cfg: dict | None = None) -> Path:
    """One run folder in the RECORDS.md format with invented returns around ``level``."""
    rng = np.random.default_rng([seed, len(agent), len(env)])
    env_cfg = env_cfg or ENVS[env]
    cfg = {"agent": {"name": agent, "entry": "seedsweep.agents.none:None", "gamma": 0.99},
           "env": env_cfg, "seed": seed, "steps": steps,
           "eval": {"every": every, "episodes": episodes, "deterministic": True},
           "sweep": sweep.name, "results_dir": str(sweep.parent), "torch_threads": 1,
           "checkpoint": {"every": 0}}
    tag = "".join(ch if ch.isalnum() else "_" for ch in agent)  # a folder-safe name
    run_id = f"{tag}-{env}-s{seed}-{zlib.crc32(repr((agent, every, episodes)).encode()):010d}"
    folder = sweep / run_id
    folder.mkdir(parents=True)
    (folder / "config.yaml").write_text(yaml.safe_dump(cfg))
    lines = ["env_step,episode,return,discounted_return,length,episode_seed"]
    last: list[float] = []
    for step in range(every, steps + 1, every):
        last = [float(np.round(level * step / steps + rng.normal(0, 0.05), 4))
                for _ in range(episodes)]
        lines += [f"{step},{i},{r!r},{r!r},10,{100 + i}" for i, r in enumerate(last)]
    (folder / "eval.csv").write_text("\n".join(lines) + "\n")
    record = {  # runs named "random" stand for the uniform random agent: marked as the floor
        "random_floor": agent == "random",
        "run_id": run_id, "agent": agent, "env": env_cfg["id"], "env_config": env, "seed": seed,
        "status": status, "env_steps": steps,
        "final_score": sum(last) / len(last) if status == "complete" else None,
        "wall_s": 1.0, "started": "2025-01-01T00:00:00+00:00", "finished": None,
        "error": error, "steps": steps, "eval": cfg["eval"], "seeds": {},
        "provenance": {"git_commit": "0123abc", "git_dirty": False, "hostname": "box"},
    }
    (folder / "run.json").write_text(json.dumps(record))
    return folder


def make_sweep(root: Path, agents=("alpha", "beta"), envs=("frozenlake", "cartpole"),
               seeds=3, random=True) -> Path:
    sweep = root / "results" / "demo"
    levels = {"alpha": 0.6, "beta": 0.3, "random": 0.02}
    scale = {"frozenlake": 1.0, "cartpole": 400.0, "pendulum": -300.0}
    for env in envs:
        for seed in range(seeds):
            for agent in (*agents, "random") if random else agents:
                write_run(sweep, agent, env, seed, levels.get(agent, 0.5) * scale[env])
    return sweep


def no_report_left(sweep: Path) -> bool:
    return not (sweep / "report").exists() and not list(sweep.glob(".report-*"))


def run_report(args, capsys):
    rc = report_main([str(a) for a in args])
    out, err = capsys.readouterr()
    return rc, out, err


def test_report_end_to_end(tmp_path, capsys):
    sweep = make_sweep(tmp_path)
    write_run(sweep, "beta", "cartpole", 9, 1.0, status="failed", error="ValueError: boom")
    rc, out, err = run_report([sweep, *FAST], capsys)
    assert rc == 0, err
    report = sweep / "report"
    for name in ("summary.json", "scores.csv", "curves.csv", "report.html"):
        assert (report / name).is_file()
    for fig in ("agent_scores", "head_to_head", "runs_above_threshold", "score_over_training",
                "curves_per_env"):
        assert (report / "figures" / f"{fig}.png").read_bytes()[:4] == b"\x89PNG"
        assert b"<svg" in (report / "figures" / f"{fig}.svg").read_bytes()[:2000]
    assert not list(sweep.glob(".report-*"))
    assert "alpha" in out and "beta" in out  # terminal summary table

    summary = json.loads((report / "summary.json").read_text())
    assert {"agents", "n_envs", "probability_of_improvement", "references",
            "bootstrap"} <= set(summary)
    assert set(summary["agents"]) == {"alpha", "beta"}  # random is the reference, not compared
    for agent in summary["agents"].values():
        assert {"iqm", "mean", "median", "optimality_gap", "n_runs"} <= set(agent)
        for stat in ("iqm", "mean", "median", "optimality_gap"):
            assert set(agent[stat]) == {"point", "low", "high"}
            assert agent[stat]["low"] <= agent[stat]["point"] <= agent[stat]["high"]
        assert agent["n_runs"] == 6
    assert summary["n_envs"] == 2
    assert summary["bootstrap"]["resamples"] == 200
    assert summary["bootstrap"]["confidence"] == 0.95 and summary["bootstrap"]["seed"] == 0

    refs = summary["references"]
    assert refs["CartPole-v1"]["source"] == "env_spec"
    assert refs["CartPole-v1"]["reference"] == 475.0  # gymnasium CartPole-v1 reward_threshold
    mdp = oracle.from_env(gym.make("FrozenLake-v1"))
    assert refs["FrozenLake-v1"]["source"] == "oracle"
    # the oracle optimum under FrozenLake-v1's 100-step limit (spec max_episode_steps)
    assert refs["FrozenLake-v1"]["reference"] == pytest.approx(
        oracle.optimal_start_value(mdp, 100).value)

    import pandas as pd

    table = pd.read_csv(report / "scores.csv")
    assert list(table.columns) == ["sweep", "run_id", "agent", "env", "seed", "score",
                                   "normalised_score"]
    for env, rows in table.groupby("env"):
        ref = refs[env]
        randoms = rows[rows.agent == "random"]
        assert ref["random"] == pytest.approx(randoms.score.mean())  # equal episodes per run
        expected = (rows.score - ref["random"]) / (ref["reference"] - ref["random"])
        np.testing.assert_allclose(rows.normalised_score, expected)
    for agent in ("alpha", "beta"):
        x = table[table.agent == agent].normalised_score.to_numpy()
        # reference: scipy.stats.trim_mean of the pooled normalised scores (equal runs per env)
        assert summary["agents"][agent]["iqm"]["point"] == pytest.approx(sps.trim_mean(x, 0.25))

    pairs = {(p["x"], p["y"]): p for p in summary["probability_of_improvement"]}
    assert set(pairs) == {("alpha", "beta"), ("beta", "alpha")}
    assert pairs[("alpha", "beta")]["point"] + pairs[("beta", "alpha")]["point"] == 1.0
    per_env = []
    for env in ("CartPole-v1", "FrozenLake-v1"):
        x = table[(table.agent == "alpha") & (table.env == env)].normalised_score.to_numpy()
        y = table[(table.agent == "beta") & (table.env == env)].normalised_score.to_numpy()
        per_env.append(sps.mannwhitneyu(x, y).statistic / (x.size * y.size))
    # reference: scipy.stats.mannwhitneyu U / (n m) per env, averaged over envs
    assert pairs[("alpha", "beta")]["point"] == pytest.approx(np.mean(per_env))

    curves = pd.read_csv(report / "curves.csv")
    assert len(curves) == len(table) * 3  # 3 evaluations per run (300 steps, every 100)
    assert {"run_id", "env_step", "mean_return", "normalised_return"} <= set(curves.columns)

    excluded = {(p["status"], p["seed"]) for p in summary["excluded_runs"]}
    assert ("failed", 9) in excluded and ("missing", 9) in excluded
    html_text = (report / "report.html").read_text()
    assert "ValueError: boom" in html_text and "oracle" in html_text
    assert "data:image/png;base64," in html_text and "src='http" not in html_text


def test_html_escapes_user_strings(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    evil = "<b>evil&co</b>"
    for seed in range(2):
        write_run(sweep, evil, "cartpole", seed, 100.0)
    write_run(sweep, "alpha", "cartpole", 7, 1.0, status="failed",
              error="<script>alert('x')</script>")
    rc, _, err = run_report([sweep, *FAST, "--quiet"], capsys)
    assert rc == 0, err
    page = (sweep / "report" / "report.html").read_text()
    assert "<script>" not in page and "<b>evil" not in page
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page  # html.escape(quote=True)
    assert "&lt;b&gt;evil&amp;co&lt;/b&gt;" in page


def _truncate_eval(sweep: Path) -> None:
    path = sorted(sweep.glob("alpha-cartpole-s0-*"))[0] / "eval.csv"
    text = path.read_text()
    path.write_text(text[: len(text) - 12])  # cut inside the last row


def _garble_eval(sweep: Path) -> None:
    path = sorted(sweep.glob("alpha-cartpole-s0-*"))[0] / "eval.csv"
    path.write_bytes(b"env_step,episode,return,discounted_return,length,episode_seed\n"
                     b"100,0,\xff\xfe,nan,x,y\n")


def _drop_last_episode(sweep: Path) -> None:
    path = sorted(sweep.glob("alpha-cartpole-s0-*"))[0] / "eval.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(lines[:-1]) + "\n")  # a whole row lost: episode count is short


def _mixed_eval_settings(sweep: Path) -> None:
    write_run(sweep, "alpha", "cartpole", 5, 200.0, episodes=6)


def _mixed_schedules(sweep: Path) -> None:
    write_run(sweep, "alpha", "cartpole", 5, 200.0, every=150)


def _one_run_cell(sweep: Path) -> None:
    write_run(sweep, "gamma", "cartpole", 0, 50.0)
    for seed in range(2):
        write_run(sweep, "gamma", "frozenlake", seed, 0.5)


def _no_runs(sweep: Path) -> None:
    for child in sorted(sweep.rglob("*"), reverse=True):
        child.rmdir() if child.is_dir() else child.unlink()


BAD_INPUTS = {
    "no runs": (_no_runs, [], "contains no runs"),
    "truncated eval.csv": (_truncate_eval, [], "eval.csv"),
    "unreadable eval.csv": (_garble_eval, [], "eval.csv"),
    "eval.csv missing an episode": (_drop_last_episode, [], "episodes"),
    "mixed evaluation settings": (_mixed_eval_settings, [], "evaluation settings"),
    "mixed schedules": (_mixed_schedules, [], "--interpolate"),
    "unknown agent": (lambda s: None, ["--agents", "alpha,nosuch"], "nosuch"),
    "cell with one run": (_one_run_cell, [], "--allow-few"),
    "bad confidence": (lambda s: None, ["--confidence", "1.5"], "--confidence"),
    "unknown option": (lambda s: None, ["--bogus"], "bogus"),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_input_exits_2_with_one_line_and_no_report(tmp_path, capsys, case):
    sweep = make_sweep(tmp_path)
    damage, extra, needle = BAD_INPUTS[case]
    damage(sweep)
    rc, out, err = run_report([sweep, *FAST, *extra], capsys)
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seedsweep: error: "), err
    assert needle in lines[0]
    assert no_report_left(sweep)


def test_missing_folder_is_refused(tmp_path, capsys):
    rc, _, err = run_report([tmp_path / "nope", *FAST], capsys)
    assert rc == 2 and "not a folder" in err


def test_allow_few_and_interpolate_make_those_cases_report(tmp_path, capsys):
    sweep = make_sweep(tmp_path)
    _one_run_cell(sweep)
    _mixed_schedules(sweep)
    rc, _, err = run_report([sweep, *FAST, "--allow-few", "--interpolate", "--quiet"], capsys)
    assert rc == 0, err
    summary = json.loads((sweep / "report" / "summary.json").read_text())
    assert summary["agents"]["gamma"]["n_runs"] == 3


def test_refused_report_keeps_the_previous_one(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    assert run_report([sweep, *FAST, "--quiet"], capsys)[0] == 0
    before = {p.name: p.read_bytes() for p in (sweep / "report").iterdir() if p.is_file()}
    _truncate_eval(sweep)
    assert run_report([sweep, *FAST, "--quiet"], capsys)[0] == 2
    after = {p.name: p.read_bytes() for p in (sweep / "report").iterdir() if p.is_file()}
    assert before == after
    assert not list(sweep.glob(".report-*"))


def test_rerun_replaces_report_and_is_deterministic(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    assert run_report([sweep, *FAST, "--quiet", "--no-figures"], capsys)[0] == 0
    first = (sweep / "report" / "scores.csv").read_text()
    agg = json.loads((sweep / "report" / "summary.json").read_text())["agents"]
    assert run_report([sweep, *FAST, "--quiet", "--no-figures"], capsys)[0] == 0
    assert (sweep / "report" / "scores.csv").read_text() == first
    assert json.loads((sweep / "report" / "summary.json").read_text())["agents"] == agg
    assert not list(sweep.glob(".report-*"))


def test_score_methods(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    import pandas as pd

    results = {}
    for method in ("final", "last-k", "auc"):
        rc, _, err = run_report([sweep, *FAST, "--quiet", "--no-figures", "--score", method,
                                 "--last-k", "2"], capsys)
        assert rc == 0, err
        results[method] = pd.read_csv(sweep / "report" / "scores.csv").set_index("run_id")
    curves = pd.read_csv(sweep / "report" / "curves.csv")
    for run_id, rows in curves.groupby("run_id"):
        steps, y = rows.env_step.to_numpy(float), rows.mean_return.to_numpy()
        assert results["final"].score[run_id] == pytest.approx(y[-1])
        assert results["last-k"].score[run_id] == pytest.approx(y[-2:].mean())
        # area under the curve by the trapezoid rule (scipy.integrate.trapezoid) over the span
        from scipy.integrate import trapezoid

        expected = trapezoid(y, steps) / (steps[-1] - steps[0])
        assert results["auc"].score[run_id] == pytest.approx(expected)


def test_env_without_reference_is_refused_then_user_reference_is_used(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("pendulum",))
    rc, _, err = run_report([sweep, *FAST, "--quiet"], capsys)
    # gymnasium's Pendulum-v1 spec has no reward_threshold and no transition table
    assert rc == 2 and "Pendulum-v1" in err and "env.reference" in err
    assert no_report_left(sweep)
    user = dict(ENVS["pendulum"], reference=-150.0)
    sweep2 = tmp_path / "results" / "demo2"
    for seed in range(2):
        for agent, level in (("alpha", -200.0), ("random", -1200.0)):
            write_run(sweep2, agent, "pendulum", seed, level, env_cfg=user)
    rc, _, err = run_report([sweep2, *FAST, "--quiet", "--no-figures"], capsys)
    assert rc == 0, err
    ref = json.loads((sweep2 / "report" / "summary.json").read_text())["references"]
    assert ref["Pendulum-v1"]["source"] == "user" and ref["Pendulum-v1"]["reference"] == -150.0


def test_random_score_is_measured_once_into_the_cache(tmp_path, capsys, monkeypatch):
    """No random runs in the sweep: the random agent is run through the launch layer."""
    from seedsweep.runner.launch import random_scores

    sweep = make_sweep(tmp_path, envs=("frozenlake",), random=False)
    calls = []

    real_run = random_scores.api.run

    def counting_run(overrides, **kwargs):
        calls.append(list(overrides))
        return real_run(overrides, **kwargs)

    monkeypatch.setattr(random_scores.api, "run", counting_run)

    opts = build_parser().parse_args([str(sweep), *FAST, "--random-episodes", "30"])
    first = options.with_random_scores(lambda: compute_report(opts))
    second = options.with_random_scores(lambda: compute_report(opts))
    assert len(calls) == 1
    ref = first.references["FrozenLake-v1"]
    assert ref.random_source == "cache" and ref.random_episodes == 30
    assert second.references["FrozenLake-v1"].random == ref.random
    cached = list((tmp_path / "results" / "_reference_cache").glob("frozenlake-*/**/config.yaml"))
    assert len(cached) == 1
    env_cfg = yaml.safe_load(cached[0].read_text())["env"]
    assert env_cfg["kwargs"] == ENVS["frozenlake"]["kwargs"]
    assert env_cfg["wrappers"] == ENVS["frozenlake"]["wrappers"]
    # FrozenLake returns are 0 or 1: the random score is a success rate
    assert 0.0 <= ref.random <= 1.0 and ref.random_low <= ref.random <= ref.random_high


def test_one_gymnasium_id_with_two_env_configs_is_two_envs(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("frozenlake",))
    eight = dict(ENVS["frozenlake"], name="frozenlake8", kwargs={"map_name": "8x8",
                                                                 "is_slippery": True})
    for seed in range(3):
        for agent, level in (("alpha", 0.5), ("beta", 0.2), ("random", 0.0)):
            write_run(sweep, agent, "frozenlake8", seed, level, env_cfg=eight)
    rc, _, err = run_report([sweep, *FAST, "--quiet", "--no-figures"], capsys)
    assert rc == 0, err
    refs = json.loads((sweep / "report" / "summary.json").read_text())["references"]
    assert set(refs) == {"FrozenLake-v1[frozenlake]", "FrozenLake-v1[frozenlake8]"}
    mdp = oracle.from_env(gym.make("FrozenLake-v1", map_name="8x8"))
    # gymnasium registers FrozenLake-v1 with a 100-step limit, whatever the map
    assert refs["FrozenLake-v1[frozenlake8]"]["reference"] == pytest.approx(
        oracle.optimal_start_value(mdp, 100).value)


def test_runs_of_one_agent_with_different_hyperparameters_are_different_agents(tmp_path, capsys):
    sweep = make_sweep(tmp_path, envs=("cartpole",))
    for path in sweep.glob("beta-*/config.yaml"):
        cfg = yaml.safe_load(path.read_text())
        cfg["agent"].update(name="alpha", lr=0.01)
        path.write_text(yaml.safe_dump(cfg))
        record = json.loads((path.parent / "run.json").read_text())
        (path.parent / "run.json").write_text(json.dumps(dict(record, agent="alpha")))
    for path in sweep.glob("alpha-*/config.yaml"):
        cfg = yaml.safe_load(path.read_text())
        cfg["agent"]["lr"] = 0.001
        path.write_text(yaml.safe_dump(cfg))
    rc, _, err = run_report([sweep, *FAST, "--quiet", "--no-figures",
                             "--agents", "alpha[lr=0.01],alpha[lr=0.001]"], capsys)
    assert rc == 0, err
    agents = json.loads((sweep / "report" / "summary.json").read_text())["agents"]
    assert set(agents) == {"alpha[lr=0.01]", "alpha[lr=0.001]"}


def test_the_random_floor_is_marked_by_the_agent_class_not_its_name(tmp_path):
    """A run of another agent that borrows random.yaml (and so its name) is not the floor:
    the report compares it like any agent, and takes the floor from the real random run."""
    from seedsweep.runner.analysis.runs import load_sweep
    from seedsweep.runner.analysis.selection import select_agents
    from seedsweep.runner.launch import api

    common = ["env=cartpole", "steps=50", "eval.every=50", "eval.episodes=1", "sweep=floor"]
    floor = api.run(["agent=random", *common], results_dir=str(tmp_path))
    borrowed = api.run(["agent=random", "agent.entry=seedsweep.agents.dqn:DQN",
                        "agent.replay_warmup_steps=1000", *common], results_dir=str(tmp_path))
    assert json.loads((floor / "run.json").read_text())["random_floor"] is True
    assert json.loads((borrowed / "run.json").read_text())["random_floor"] is False
    sweep = load_sweep(tmp_path / "floor")
    floors = [r.run_id for r in sweep.runs if r.is_floor]
    assert floors == [floor.name]
    compared = select_agents(sweep, None, include_random=False)
    assert compared == [r.label for r in sweep.runs if r.path == borrowed]
