"""`seedsweep compare`: verdicts, intervals, the files it writes and the inputs it refuses.

Run data are invented (they test the plumbing and the verdict on known orderings); check
values come from scipy (trim_mean, mannwhitneyu, bootstrap), gymnasium specs, and the verdict
rule as written in the task brief."""

import json
import zlib
from pathlib import Path

import numpy as np
import pytest
import yaml
from scipy import stats as sps
from seedsweep.runner.analysis import decision
from seedsweep.runner.analysis.compare import (
    compare_all,
    compare_pair,
    fmt_interval,
    iqm_difference,
)
from seedsweep.runner.analysis.stats import Interval
from seedsweep.runner.commands.compare import main as compare_main
from seedsweep.runner.commands.report import main as report_main

ENVS = {
    "cartpole": {"name": "cartpole", "id": "CartPole-v1", "kwargs": {},
                 "max_episode_steps": None, "reference": None, "wrappers": []},
    "acrobot": {"name": "acrobot", "id": "Acrobot-v1", "kwargs": {},
                "max_episode_steps": None, "reference": None, "wrappers": []},
}
# gymnasium 1.x specs: CartPole-v1 reward_threshold 475.0, Acrobot-v1 reward_threshold -100.0
REFERENCE = {"cartpole": 475.0, "acrobot": -100.0}
FAST = ["--resamples", "500"]


def write_run(sweep: Path, agent: str, env: str, seed: int, returns: list[float], *,
              status: str = "complete", agent_extra: dict | None = None) -> Path:
    """A run folder in the RECORDS.md format with one evaluation (at env step 100) whose
    episode returns are ``returns``, so the run's final score is their mean."""
    env_cfg = ENVS[env]
    cfg = {"agent": {"name": agent, "entry": "seedsweep.agents.none:None", "gamma": 0.99,
                     **(agent_extra or {})},
           "env": env_cfg, "seed": seed, "steps": 100,
           "eval": {"every": 100, "episodes": len(returns), "deterministic": True},
           "sweep": sweep.name, "results_dir": str(sweep.parent), "torch_threads": 1,
           "checkpoint": {"every": 0}}
    tag = "".join(ch if ch.isalnum() else "_" for ch in agent)
    extra = "".join(f"{k}{v}" for k, v in (agent_extra or {}).items())
    run_id = f"{tag}-{env}-s{seed}-{zlib.crc32(f'{agent}|{extra}'.encode()):010d}"
    folder = sweep / run_id
    folder.mkdir(parents=True)
    (folder / "config.yaml").write_text(yaml.safe_dump(cfg))
    lines = ["env_step,episode,return,discounted_return,length,episode_seed"]
    lines += [f"100,{i},{r!r},{r!r},10,{100 + i}" for i, r in enumerate(returns)]
    (folder / "eval.csv").write_text("\n".join(lines) + "\n")
    record = {  # runs named "random" stand for the uniform random agent: marked as the floor
        "random_floor": agent == "random",
        "run_id": run_id, "agent": agent, "env": env_cfg["id"], "env_config": env,
        "seed": seed, "status": status, "env_steps": 100,
        "final_score": float(np.mean(returns)) if status == "complete" else None,
        "wall_s": 1.0, "started": "2025-01-01T00:00:00+00:00", "finished": None,
        "error": None if status == "complete" else "RuntimeError: stopped",
        "eval": cfg["eval"], "seeds": {},
        "provenance": {"git_commit": "0123abc", "git_dirty": False, "hostname": "box"},
    }
    (folder / "run.json").write_text(json.dumps(record))
    return folder


def final_scores(level: float, spread: float, seeds: int, key: int) -> list[float]:
    rng = np.random.default_rng(key)
    return [float(np.round(level + spread * z, 3)) for z in rng.standard_normal(seeds)]


LEVELS = {  # invented mean final scores: (cartpole, acrobot)
    "strong": (420.0, -120.0), "weak": (200.0, -300.0), "random": (22.0, -499.0)}


def make_sweep(root: Path, seeds: int = 6) -> Path:
    """strong clearly above weak on both envs; twin has exactly strong's scores."""
    sweep = root / "results" / "demo"
    for j, env in enumerate(ENVS):
        spread = {"cartpole": 10.0, "acrobot": 8.0}[env]
        for agent, levels in LEVELS.items():
            values = final_scores(levels[j], spread, seeds, key=len(agent) * 10 + j)
            for seed, v in enumerate(values):
                write_run(sweep, agent, env, seed, [v, v])
                if agent == "strong":
                    write_run(sweep, "twin", env, seed, [v, v])
    return sweep


def run(main, args, capsys):
    rc = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return rc, out, err


def snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


# -- the verdict rule: a test with a stated level ----------------------------------------------


def test_two_against_two_seeds_can_never_be_called_better():
    """One env, scores 201, 205 against 198, 200: every candidate run beats every baseline
    run, yet 2 vs 2 seeds have only C(4, 2) = 6 labellings, so the two-sided p is at least
    2/6 (scipy.stats.mannwhitneyu, exact: p = 1/3)."""
    cand, base = [np.array([201.0, 205.0])], [np.array([198.0, 200.0])]
    c = compare_pair("cand", "base", ["env"], {"cand": cand, "base": base},
                     {"cand": cand, "base": base}, 500, 0.95, 0)
    exact = sps.mannwhitneyu(cand[0], base[0], method="exact").pvalue
    assert c["test"]["p_value"] == pytest.approx(exact) == pytest.approx(1 / 3)
    assert c["verdict"] == "cannot decide"
    # smallest decisive design on one env: 4 vs 4 seeds, p >= 2 / C(8, 4) = 2/70 <= 0.05,
    # while 3 vs 3 gives 2 / C(6, 3) = 0.1 (binomial coefficients)
    assert c["decisive_seeds_per_env"] == 4 and "4 seeds per agent per env" in c["reason"]
    assert "alpha 0.05" in c["evidence"] and "2 vs 2" in c["evidence"]


def test_a_clear_ten_against_ten_separation_is_better_or_worse():
    rng = np.random.default_rng(3)
    cand, base = [rng.normal(1.0, 0.05, 10)], [rng.normal(0.5, 0.05, 10)]
    win = compare_pair("cand", "base", ["env"], {"cand": cand, "base": base},
                       {"cand": cand, "base": base}, 1000, 0.95, 0)
    assert win["verdict"] == "better", win["reason"]
    # complete separation: the exact two-sided p is 2 / C(20, 10) (scipy.stats.mannwhitneyu)
    assert win["test"]["p_value"] == pytest.approx(
        sps.mannwhitneyu(cand[0], base[0], method="exact").pvalue) == pytest.approx(2 / 184756)
    loss = compare_pair("base", "cand", ["env"], {"cand": cand, "base": base},
                        {"cand": cand, "base": base}, 1000, 0.95, 0)
    assert loss["verdict"] == "worse", loss["reason"]


def test_several_baselines_are_one_holm_family():
    """Holm 1979: with p-values sorted p(1) <= p(2), the adjusted values are
    min(1, max(2 p(1)), ...) = 2 p(1) and max(2 p(1), p(2)) (here computed from scipy's exact
    Mann-Whitney p-values, the same test the verdict runs on one env)."""
    rng = np.random.default_rng(5)
    cand = [rng.normal(1.0, 0.1, 6)]
    near, far = [rng.normal(0.85, 0.1, 6)], [rng.normal(0.0, 0.1, 6)]
    norm = {"cand": cand, "near": near, "far": far}
    out = {c["baseline"]: c for c in compare_all("cand", ["near", "far"], ["env"], norm, norm,
                                                  500, 0.95, 0)}
    p_near = sps.mannwhitneyu(cand[0], near[0], method="exact").pvalue
    p_far = sps.mannwhitneyu(cand[0], far[0], method="exact").pvalue
    low, high = sorted([p_near, p_far])
    expected = {min(p_near, p_far): min(1.0, 2 * low), max(p_near, p_far): max(2 * low, high)}
    assert out["near"]["p_adjusted"] == pytest.approx(expected[p_near])
    assert out["far"]["p_adjusted"] == pytest.approx(expected[p_far])
    assert all(c["adjustment"] == "Holm over 2 baselines" for c in out.values())


def test_interval_text_never_rounds_onto_the_threshold():
    # 0.49996 printed with 3 decimals would read 0.500 and contradict "includes 0.5"
    assert fmt_interval(Interval(0.6, 0.49996, 0.7), 0.5) == "[0.49996, 0.700]"
    assert fmt_interval(Interval(0.0, -0.00002, 0.3), 0.0) == "[-0.00002, 0.300]"


# -- the pure comparison on synthetic normalised scores --------------------------------------


def _strata(levels, spread, seeds, key):
    rng = np.random.default_rng(key)
    return [level + spread * rng.standard_normal(seeds) for level in levels]


def _pair(cand, base, resamples=1000):
    envs = [f"env{j}" for j in range(len(cand))]
    norm = {"cand": cand, "base": base}
    return compare_pair("cand", "base", envs, norm, norm, resamples, 0.95, 0)


def test_clear_win_clear_loss_and_indistinguishable():
    strong = _strata([0.9, 0.8, 0.85], 0.03, 10, key=1)
    weak = _strata([0.3, 0.2, 0.4], 0.03, 10, key=2)
    win = _pair(strong, weak)
    assert win["verdict"] == "better", win["reason"]
    # P(X > Y): scipy.stats.mannwhitneyu U / (n m) per env, averaged (supports are disjoint)
    expected_p = np.mean([sps.mannwhitneyu(x, y).statistic / (x.size * y.size)
                          for x, y in zip(strong, weak, strict=True)])
    assert win["probability_of_improvement"]["point"] == pytest.approx(expected_p) == 1.0
    # IQM pooled over envs = scipy.stats.trim_mean(pooled, 0.25) (equal runs per env)
    expected_d = (sps.trim_mean(np.concatenate(strong), 0.25)
                  - sps.trim_mean(np.concatenate(weak), 0.25))
    assert win["iqm_difference"]["point"] == pytest.approx(expected_d)

    loss = compare_pair("base", "cand", [f"env{j}" for j in range(3)],
                        {"cand": strong, "base": weak}, {"cand": strong, "base": weak},
                        1000, 0.95, 0)
    assert loss["verdict"] == "worse", loss["reason"]
    # the reverse comparison mirrors the forward one exactly (P(Y>X) = 1 - P(X>Y), ties 1/2)
    fwd, back = win["iqm_difference"], loss["iqm_difference"]
    assert (back["point"], back["low"], back["high"]) == (-fwd["point"], -fwd["high"],
                                                          -fwd["low"])
    assert loss["test"]["p_value"] == win["test"]["p_value"]
    assert loss["probability_of_improvement"]["high"] == pytest.approx(
        1 - win["probability_of_improvement"]["low"])

    same = _pair(strong, [a.copy() for a in strong])
    assert same["verdict"] == "insufficient evidence"
    assert same["probability_of_improvement"]["point"] == 0.5  # all ties count 1/2
    assert same["iqm_difference"]["point"] == 0.0
    assert same["test"]["p_value"] == 1.0 and "p = 1 > 0.05" in same["reason"]

    a = _strata([0.5, 0.5, 0.5], 0.1, 10, key=3)
    b = _strata([0.5, 0.5, 0.5], 0.1, 10, key=4)
    alike = _pair(a, b)  # one distribution: the intervals straddle 0.5 and 0
    assert alike["verdict"] == "insufficient evidence", alike
    assert alike["test"]["p_value"] > 0.05


def test_iqm_difference_interval_agrees_with_scipy_bootstrap():
    """One env: the stratified bootstrap is the two-sample bootstrap that resamples each
    sample independently, which scipy.stats.bootstrap (paired=False, percentile) computes."""
    rng = np.random.default_rng(7)
    x, y = rng.normal(1.0, 0.3, 25), rng.normal(0.8, 0.3, 30)
    ours = iqm_difference([x], [y], 20000, 0.95, np.random.default_rng(8))

    def statistic(a, b, axis):
        return sps.trim_mean(a, 0.25, axis=axis) - sps.trim_mean(b, 0.25, axis=axis)

    ref = sps.bootstrap((x, y), statistic, n_resamples=20000, confidence_level=0.95,
                        method="percentile", vectorized=True, rng=np.random.default_rng(9))
    assert ours.point == pytest.approx(statistic(x, y, 0))
    # Monte Carlo tolerance (two independent 20000-resample runs), common practice, no source
    assert ours.low == pytest.approx(ref.confidence_interval.low, abs=0.01)
    assert ours.high == pytest.approx(ref.confidence_interval.high, abs=0.01)


# -- the command ---------------------------------------------------------------------------


def test_compare_end_to_end(tmp_path, capsys):
    sweep = make_sweep(tmp_path)
    rc, out, err = run(compare_main, [sweep, "--candidate", "strong", *FAST], capsys)
    assert rc == 0, err
    assert sorted(p.name for p in (sweep / "report").iterdir()) == ["compare.json"]
    assert "better" in out and "insufficient evidence" in out
    doc = json.loads((sweep / "report" / "compare.json").read_text())
    assert doc["baselines"] == ["twin", "weak"]  # every other agent but random
    by = {c["baseline"]: c for c in doc["comparisons"]}
    assert by["weak"]["verdict"] == "better", by["weak"]["reason"]
    assert by["twin"]["verdict"] == "insufficient evidence"
    twin_p = by["twin"]["probability_of_improvement"]
    assert twin_p["point"] == 0.5  # identical scores: every pair ties, ties count 1/2
    assert by["twin"]["iqm_difference"]["point"] == 0.0
    assert by["twin"]["test"]["p_value"] == pytest.approx(1.0) and "> 0.05" in by["twin"]["reason"]

    finals = {}
    for rec in sweep.glob("*/run.json"):
        r = json.loads(rec.read_text())
        finals.setdefault((r["agent"], r["env_config"]), []).append(r["final_score"])
    for env, gym_id in (("cartpole", "CartPole-v1"), ("acrobot", "Acrobot-v1")):
        cell = by["weak"]["per_env"][gym_id]["raw_iqm"]
        assert cell["candidate"]["n_seeds"] == 6 and cell["baseline"]["n_seeds"] == 6
        # per-env IQM of raw scores = scipy.stats.trim_mean(scores, 0.25)
        assert cell["baseline"]["point"] == pytest.approx(
            sps.trim_mean(finals[("weak", env)], 0.25))
        ref = doc["references"][gym_id]
        assert ref["reference"] == REFERENCE[env] and ref["source"] == "env_spec"
        assert ref["random"] == pytest.approx(np.mean(finals[("random", env)]))
    norm = {a: np.concatenate([(np.array(finals[(a, e)]) - doc["references"][g]["random"])
                               / (REFERENCE[e] - doc["references"][g]["random"])
                               for e, g in (("acrobot", "Acrobot-v1"),
                                            ("cartpole", "CartPole-v1"))])
            for a in ("strong", "weak")}
    # aggregate IQM of normalised scores = scipy.stats.trim_mean of the pooled scores
    assert by["weak"]["iqm_difference"]["point"] == pytest.approx(
        sps.trim_mean(norm["strong"], 0.25) - sps.trim_mean(norm["weak"], 0.25))

    rc, _, err = run(compare_main, [sweep, "--candidate", "weak", "--baseline", "strong",
                                    "--quiet", *FAST], capsys)
    assert rc == 0, err
    doc = json.loads((sweep / "report" / "compare.json").read_text())
    assert [c["verdict"] for c in doc["comparisons"]] == ["worse"]

    # consistency between the two commands (no external source): the report's P(X > Y)
    # for the pair uses the same generator, so the numbers are equal
    assert report_main([str(sweep), "--no-figures", "--quiet", "--agents", "strong,weak",
                        *FAST]) == 0
    summary = json.loads((sweep / "report" / "summary.json").read_text())
    pair = next(p for p in summary["probability_of_improvement"]
                if (p["x"], p["y"]) == ("weak", "strong"))
    recomputed = json.loads((sweep / "report" / "compare.json").read_text())
    p = recomputed["comparisons"][0]["probability_of_improvement"]
    assert (p["point"], p["low"], p["high"]) == pytest.approx(
        (pair["point"], pair["low"], pair["high"]))
    capsys.readouterr()


def test_compare_updates_an_existing_report_in_place(tmp_path, capsys):
    sweep = make_sweep(tmp_path, seeds=4)
    assert report_main([str(sweep), "--no-figures", "--quiet", *FAST]) == 0
    before = snapshot(sweep / "report")
    page = before["report.html"].decode()
    # without a candidate the section says how to get one (README, "seedsweep compare")
    assert page.count("<h2>Comparison</h2>") == 1 and "data-candidate" not in page
    assert f"seedsweep report {sweep} --candidate NAME" in page
    assert run(compare_main, [sweep, "--candidate", "strong", "--quiet", *FAST], capsys)[0] == 0
    after = snapshot(sweep / "report")
    assert set(after) == set(before) | {"compare.json"}
    for name in before:
        if name != "report.html":
            assert after[name] == before[name], name  # the rest of the report is untouched
    page = after["report.html"].decode()
    assert page.count("<h2>Comparison</h2>") == 1
    # the verdict block and the Comparison section both name the candidate
    assert page.count('data-candidate="strong"') == 2
    assert run(compare_main, [sweep, "--candidate", "weak", "--quiet", *FAST], capsys)[0] == 0
    page = (sweep / "report" / "report.html").read_text()
    assert page.count("<h2>Comparison</h2>") == 1 and page.count('data-candidate="weak"') == 2
    assert 'data-candidate="strong"' not in page
    last = (sweep / "report" / "compare.json").read_text()

    # a new report recomputes the recorded comparison: same request, same runs, same file
    assert report_main([str(sweep), "--no-figures", "--quiet", *FAST]) == 0
    assert (sweep / "report" / "compare.json").read_text() == last
    assert 'data-candidate="weak"' in (sweep / "report" / "report.html").read_text()

    # report --candidate replaces it; a request that no longer works is kept as it was
    assert report_main([str(sweep), "--no-figures", "--quiet", "--candidate", "twin",
                        "--baseline", "weak", *FAST]) == 0
    doc = json.loads((sweep / "report" / "compare.json").read_text())
    assert doc["candidate"] == "twin" and doc["baselines"] == ["weak"]
    stale = json.dumps(dict(doc, request=dict(doc["request"], candidate="gone")))
    (sweep / "report" / "compare.json").write_text(stale)
    assert report_main([str(sweep), "--no-figures", "--quiet", *FAST]) == 0
    assert (sweep / "report" / "compare.json").read_text() == stale
    assert "compare.json was kept as it was" in (sweep / "report" / "report.html").read_text()
    assert not list(sweep.glob(".report-*"))
    capsys.readouterr()


def _one_run_cell(sweep: Path) -> None:
    write_run(sweep, "solo", "cartpole", 0, [300.0, 300.0])
    for seed in range(2):
        write_run(sweep, "solo", "acrobot", seed, [-200.0, -200.0])


def _variants(sweep: Path) -> None:
    for seed in range(2):
        for lr in (0.1, 0.01):
            for env in ENVS:
                write_run(sweep, "multi", env, seed, [100.0 * lr, 0.0], agent_extra={"lr": lr})


BAD_COMPARE = {
    "unknown candidate": ([], ["--candidate", "nosuch"], "--candidate: unknown agent 'nosuch' "
                          "(in this sweep: random, strong, twin, weak)"),
    "unknown baseline": ([], ["--candidate", "strong", "--baseline", "weak,nosuch"],
                         "--baseline: unknown agent 'nosuch'"),
    "baseline is candidate": ([], ["--candidate", "strong", "--baseline", "strong"],
                              "--baseline: 'strong' is the candidate"),
    "no candidate": ([], [], "--candidate"),
    "bad confidence": ([], ["--candidate", "strong", "--confidence", "1"], "--confidence"),
    "few resamples": ([], ["--candidate", "strong", "--resamples", "10"], "--resamples"),
    "cell with one run": ([_one_run_cell], ["--candidate", "solo"], "--allow-few"),
    "ambiguous variants": ([_variants], ["--candidate", "multi"], "names 2 variants"),
    "unknown env": ([], ["--candidate", "strong", "--envs", "nosuch"], "--envs"),
}


@pytest.mark.parametrize("case", sorted(BAD_COMPARE))
@pytest.mark.parametrize("with_report", [False, True])
def test_bad_input_exits_2_and_writes_nothing(tmp_path, capsys, case, with_report):
    sweep = make_sweep(tmp_path, seeds=3)
    damage, args, needle = BAD_COMPARE[case]
    for step in damage:
        step(sweep)
    if with_report:
        assert report_main([str(sweep), "--no-figures", "--quiet", "--agents", "strong,weak",
                            *FAST]) == 0
    before = snapshot(sweep)
    rc, out, err = run(compare_main, [sweep, *FAST, *args], capsys)
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seedsweep: error: "), err
    assert needle in lines[0]
    assert snapshot(sweep) == before  # nothing written, an existing report untouched
    assert with_report or not (sweep / "report").exists()


def test_report_refuses_bad_comparison_options(tmp_path, capsys):
    sweep = make_sweep(tmp_path, seeds=3)
    for args, needle in ((["--candidate", "nosuch"], "--candidate"),
                         (["--baseline", "weak"], "--baseline: needs --candidate")):
        rc, _, err = run(report_main, [sweep, "--no-figures", *args, *FAST], capsys)
        assert rc == 2 and needle in err and len(err.strip().splitlines()) == 1
        assert not (sweep / "report").exists() and not list(sweep.glob(".report-*"))


def test_allow_few_compares_single_run_cells(tmp_path, capsys):
    sweep = make_sweep(tmp_path, seeds=3)
    _one_run_cell(sweep)
    rc, _, err = run(compare_main, [sweep, "--candidate", "solo", "--baseline", "weak",
                                    "--allow-few", "--quiet", *FAST], capsys)
    assert rc == 0, err
    doc = json.loads((sweep / "report" / "compare.json").read_text())
    assert doc["comparisons"][0]["per_env"]["CartPole-v1"]["raw_iqm"]["candidate"][
        "n_seeds"] == 1
    assert decision.VERDICT_RULE == doc["verdict_rule"]


def test_settings_that_differ_only_between_envs_keep_one_agent(tmp_path):
    """An agent's per-env settings (e.g. another lr on acrobot) do not split it into two
    agents; two settings on one env do (labelled by the differing key)."""
    from seedsweep.runner.analysis.runs import load_sweep

    sweep = tmp_path / "results" / "per_env"
    for seed in range(2):
        write_run(sweep, "tuned", "cartpole", seed, [1.0], agent_extra={"lr": 0.1})
        write_run(sweep, "tuned", "acrobot", seed, [1.0], agent_extra={"lr": 0.2})
        for lr in (0.1, 0.3):
            write_run(sweep, "grid", "cartpole", seed, [1.0], agent_extra={"lr": lr})
    labels = {(r.agent, r.env_id): set() for r in load_sweep(sweep).runs}
    for r in load_sweep(sweep).runs:
        labels[(r.agent, r.env_id)].add(r.label)
    assert labels[("tuned", "CartPole-v1")] == labels[("tuned", "Acrobot-v1")] == {"tuned"}
    assert labels[("grid", "CartPole-v1")] == {"grid[lr=0.1]", "grid[lr=0.3]"}
