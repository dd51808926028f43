"""Bad input: one line naming the field and what is allowed, exit 2, no run folder."""

import pytest
from seedsweep.runner.commands.main import main

CASES = [
    (["agent=nosuch"], "agent: unknown option 'nosuch' (allowed: "),
    (["env=nosuch"], "env: unknown option 'nosuch' (allowed: "),
    (["env.id=NoSuchEnv-v3"], "env.id: unknown gymnasium id"),
    (["env.wrappers=[{name: blur}]"], "env.wrappers[0].name: unknown wrapper 'blur' (allowed: "),
    (["seed=abc"], "seed: expected an integer"),
    (["steps=1.5"], "steps: expected an integer"),
    (["agent.lr=fast"], "agent.lr: expected a number"),
    (["agent.double_q=maybe"], "agent.double_q: expected true or false"),
    (["agent.hidden=[64,x]"], "agent.hidden[1]: expected an integer"),
    (["steps=0"], "steps: must be a positive integer"),
    (["steps=-5"], "steps: must be a positive integer"),
    (["eval.every=0"], "eval.every: must be a positive integer"),
    (["eval.episodes=-1"], "eval.episodes: must be a positive integer"),
    (["agent.lr=0"], "agent.lr: must be > 0"),
    (["agent.lr=-0.1"], "agent.lr: must be > 0"),
    (["agent.gamma=0"], "agent.gamma: must be in (0, 1]"),
    (["agent.gamma=1.01"], "agent.gamma: must be in (0, 1]"),
    # Pendulum-v1 has a Box action space (gymnasium env spec); DQN needs Discrete.
    (["env.id=Pendulum-v1"], "agent: dqn does not support Pendulum-v1's action space"),
    (["+agent.colour=3"], "agent.colour: unknown option (allowed: "),
    (["nokey=1"], "nokey: unknown key"),
    (["seed=0,1"], "seed: several values given; add -m"),
    (["sweep=../x"], "sweep: must be a folder name"),
    (["suite=classic_control"], "several values given; add -m"),
    (["suite=nosuch"], "suite: unknown suite 'nosuch' (allowed: "),
    # policy-gradient agents
    (["agent=actor_critic", "agent.advantage_lambda=1.5"],
     "agent.advantage_lambda: must be in [0, 1]"),
    (["agent=actor_critic", "agent.advantage_lambda=-0.1"],
     "agent.advantage_lambda: must be in [0, 1]"),
    (["agent=actor_critic", "agent.num_envs=0"], "agent.num_envs: must be >= 1"),
    (["agent=reinforce", "agent.episodes_per_update=0"], "agent.episodes_per_update: must be >= 1"),
    (["agent=ppo", "agent.ratio_clip=1.5"], "agent.ratio_clip: must be in (0, 1)"),
    (["agent=reinforce", "env.id=tests.toy_envs:MultiDiscreteActions", "env.max_episode_steps=10"],
     "agent: reinforce does not support"),
    (["agent=actor_critic", "env.id=tests.toy_envs:MultiDiscreteActions",
      "env.max_episode_steps=10"], "agent: actor_critic does not support"),
]


@pytest.mark.parametrize("overrides,message", CASES)
def test_bad_input_is_one_line_exit_2_and_writes_nothing(overrides, message, tmp_path, capsys):
    code = main(["run", f"results_dir={tmp_path}", "steps=100", *overrides]
                if not any(o.startswith("steps=") for o in overrides)
                else ["run", f"results_dir={tmp_path}", *overrides])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1, err
    assert err.startswith("seedsweep: error: ") and message in err, err
    assert list(tmp_path.iterdir()) == []


def test_sweep_with_one_bad_point_writes_nothing(tmp_path, capsys):
    code = main(["run", "-m", f"results_dir={tmp_path}", "steps=100", "agent.lr=0.001,-1"])
    assert code == 2 and "agent.lr" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_unknown_command_and_help(capsys):
    assert main(["frobnicate"]) == 2
    assert "unknown command" in capsys.readouterr().err
    assert main(["run", "--help"]) == 0
    out = capsys.readouterr().out
    for word in ("agent=", "env=", "cartpole", "dqn", "random", "eval.every", "one_hot"):
        assert word in out


def test_configs_lists_agents_and_envs(capsys):
    assert main(["configs"]) == 0
    out = capsys.readouterr().out
    for name in ("dqn", "random", "cartpole", "acrobot", "mountaincar", "lunarlander",
                 "frozenlake", "cliffwalking"):
        assert name in out
