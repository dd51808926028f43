"""`seedsweep plan-seeds` end to end and on bad input: the plan is for the verdict's own test.

References: the seed count of Student's two-sample t-test from the noncentral t distribution
(scipy.stats.nct, via power.t_test_seeds), and the asymptotic relative efficiency 3/pi of the
rank-sum test against the t-test for normal scores (Hodges and Lehmann 1956, Annals of
Mathematical Statistics 27(2); from memory): the rank test the verdict uses needs about pi/3
times the t-test's seeds. The simulation-level checks of the planner (its power against the
noncentral t for large pilots, the SD bound) are in tests/test_inference.py."""

import json
import math

import numpy as np
import pytest
from seedsweep.runner.analysis import power
from seedsweep.runner.commands.plan_seeds import main as plan_seeds_main

from tests.test_compare import make_sweep, snapshot, write_run


def pilot_sweep(root, seeds=30):
    """Pilot runs on CartPole: alpha ~ N(300, 20), beta ~ N(280, 40) (invented levels)."""
    sweep = root / "results" / "pilot"
    rng = np.random.default_rng(11)
    for agent, mean, sd in (("alpha", 300.0, 20.0), ("beta", 280.0, 40.0)):
        for seed in range(seeds):
            v = float(np.round(rng.normal(mean, sd), 3))
            write_run(sweep, agent, "cartpole", seed, [v, v])
    return sweep


def test_plan_seeds_end_to_end(tmp_path, capsys):
    sweep = pilot_sweep(tmp_path)
    before = snapshot(sweep)
    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta", "--json",
                          "--difference", "30"])
    out, err = capsys.readouterr()
    assert rc == 0, err
    doc = json.loads(out)
    assert snapshot(sweep) == before  # plan-seeds writes nothing
    (plan,) = doc["plans"]
    finals = {a: np.array([json.loads(p.read_text())["final_score"]
                           for p in sorted(sweep.glob(f"{a}-*/run.json"))])
              for a in ("alpha", "beta")}
    assert plan["pilot_seeds"] == {"CartPole-v1": [30, 30]}
    # pooled unbiased SD of the centred pilots (numpy, ddof=1 per agent, pooled by df)
    pooled = math.sqrt((29 * finals["alpha"].var(ddof=1) + 29 * finals["beta"].var(ddof=1))
                       / 58)
    assert plan["pilot_sd"]["CartPole-v1"] == pytest.approx(pooled)
    t_seeds = power.t_test_seeds(30 / pooled, 0.8, 0.05)
    n = plan["seeds_per_agent"]
    # the rank test needs about pi/3 the t-test's seeds (ARE, see the module docstring);
    # 30 pilots make the plan close to the known-SD one: tolerance 2 seeds, common practice
    assert t_seeds <= n <= math.ceil(math.pi / 3 * t_seeds) + 2, (n, t_seeds)
    assert plan["power_at_seeds"] >= 0.8
    assert int(plan["seeds_at_pilot_sd"]) <= int(plan["seeds_if_sd_high"])
    assert doc["planned_level"] == 0.05 and doc["units"] == "raw"

    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta"])
    _, err = capsys.readouterr()
    assert rc == 2 and "--difference: required" in err  # no observed-difference default

    rc = plan_seeds_main([str(sweep), "--candidate", "alpha", "--baseline", "beta",
                          "--difference", "30"])
    out, _ = capsys.readouterr()
    assert rc == 0 and "seeds per agent per env" in out and "upper bound" in out


def _one_pilot(sweep):
    write_run(sweep, "lonely", "cartpole", 0, [100.0, 100.0])
    for seed in range(3):
        write_run(sweep, "lonely", "acrobot", seed, [-200.0 - seed, -200.0 - seed])


def _constant(sweep):
    for agent in ("flat", "flatter"):
        for env in ("cartpole", "acrobot"):
            for seed in range(3):
                write_run(sweep, agent, env, seed, [50.0 if agent == "flat" else 40.0] * 2)


BAD_PLAN = {
    "unknown candidate": (None, ["--candidate", "nosuch"], "--candidate: unknown agent"),
    "bad power": (None, ["--candidate", "strong", "--power", "1.5"], "--power"),
    "bad alpha": (None, ["--candidate", "strong", "--alpha", "0"], "--alpha"),
    "bad max seeds": (None, ["--candidate", "strong", "--max-seeds", "1"], "--max-seeds"),
    "bad difference": (None, ["--candidate", "strong", "--difference", "abc"], "--difference"),
    "zero difference": (None, ["--candidate", "strong", "--difference", "0"], "--difference"),
    "unknown env in difference": (None, ["--candidate", "strong", "--difference", "nosuch=3"],
                                  "--difference: unknown env 'nosuch'"),
    "difference missing for an env": (None, ["--candidate", "strong", "--difference",
                                             "cartpole=3"], "--difference: no difference for"),
    "no difference": (None, ["--candidate", "strong", "--baseline", "twin"],
                      "--difference: required"),
    "one pilot run": (_one_pilot, ["--candidate", "lonely", "--baseline", "weak",
                                   "--difference", "5"], "at least 2 pilot runs"),
    "no spread": (_constant, ["--candidate", "flat", "--baseline", "flatter",
                              "--difference", "5"], "spread"),
    "bad units": (None, ["--candidate", "strong", "--difference", "5", "--units", "percent"],
                  "--units"),
}


@pytest.mark.parametrize("case", sorted(BAD_PLAN))
def test_plan_seeds_bad_input_exits_2(tmp_path, capsys, case):
    sweep = make_sweep(tmp_path, seeds=3)
    damage, args, needle = BAD_PLAN[case]
    if damage:
        damage(sweep)
    before = snapshot(sweep)
    rc = plan_seeds_main([str(sweep), "--resamples", "200", *args])
    out, err = capsys.readouterr()
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("seedsweep: error: "), err
    assert needle in lines[0]
    assert snapshot(sweep) == before and not (sweep / "report").exists()
