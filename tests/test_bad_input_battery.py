"""Bad input, every kind: one line naming the field, exit status 2, nothing written.

A table of malformed and hostile inputs across command-line options, overrides, agent, env,
plan and suite YAML files (written into a temporary ``--config-dir``) and results folders
read by ``report``, ``compare`` and ``status``. Each case asserts exit status 2, exactly one
stderr line ``seedsweep: error: <field>: ...`` with the field the case is about, and that
nothing under the temporary folder was created or changed. No case starts a run.

Check values: the message shapes are the project's own rule for bad input (one line,
``<field>: <message>``); env facts come from gymnasium's env specs (FrozenLake-v1 has the
maps "4x4" and "8x8", Pendulum-v1 a Box action space, CliffWalking-v1 no time limit); the
memory cases ask for far more than any machine has (10**12 replay transitions of CartPole-v1
observations are about 40 TB; a frame stack of 10**11 CartPole-v1 observations of 16 bytes
is 1.6 TB before any copy).
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
from seedsweep.runner.commands.main import main

from tests.test_compare import make_sweep

TIDY = "tests.contract_breakers:Tidy"


def tree(root: Path) -> dict[str, bytes | None]:
    """Every file (with its bytes) and folder under ``root``."""
    return {str(p.relative_to(root)): (p.read_bytes() if p.is_file() else None)
            for p in sorted(root.rglob("*"))}


CONFIG_FILES: dict[str, str | bytes] = {
    # agent configs
    "agent/bad_yaml.yaml": "name: bad\nentry: [unclosed\n",
    "agent/not_utf8.yaml": b"name: bad\xff\xfe\nentry: x\n",
    "agent/a_list.yaml": "- name\n- entry\n",
    "agent/syntax_entry.yaml": "name: syntax_entry\nentry: {cfg}/broken.py:Agent\ngamma: 0.99\n",
    "agent/no_class.yaml": "name: no_class\nentry: {cfg}/fine.py:Nope\ngamma: 0.99\n",
    "agent/not_agent.yaml": "name: not_agent\nentry: {cfg}/fine.py:helper\ngamma: 0.99\n",
    "agent/unknown_key.yaml": f"name: unknown_key\nentry: {TIDY}\ngamma: 0.99\ncolour: red\n",
    "agent/escaping.yaml": f"name: ../../out\nentry: {TIDY}\ngamma: 0.99\n",
    "agent/hidden_name.yaml": f"name: .hidden\nentry: {TIDY}\ngamma: 0.99\n",
    "agent/per_env_list.yaml": f"name: per_env_list\nentry: {TIDY}\ngamma: 0.99\nper_env: [1]\n",
    "agent/per_env_name.yaml": (f"name: per_env_name\nentry: {TIDY}\ngamma: 0.99\n"
                                "per_env:\n  cartpole:\n    name: other\n"),
    "agent/nan_lr.yaml": f"name: nan_lr\nentry: {TIDY}\ngamma: 0.99\nlr: .nan\n",
    "agent/interp.yaml": "name: interp\nentry: ${nowhere}\ngamma: 0.99\n",
    # env configs
    "env/bad_yaml.yaml": "name: bad_yaml\nid: CartPole-v1\nwrappers: [{name: one_hot\n",
    "env/not_utf8.yaml": b"name: not_utf8\nid: CartPole-v1 \xff\n",
    "env/no_name.yaml": "id: CartPole-v1\n",
    "env/slash_name.yaml": "name: a/b\nid: CartPole-v1\n",
    "env/unknown_key.yaml": "name: unknown_key\nid: CartPole-v1\ncolour: red\n",
    "env/bad_map.yaml": "name: bad_map\nid: FrozenLake-v1\nkwargs: {map_name: 9x9}\n"
                        "wrappers: [one_hot]\n",
    "env/no_limit.yaml": "name: no_limit\nid: CliffWalking-v1\nwrappers: [one_hot]\n",
    "env/inf_reference.yaml": "name: inf_reference\nid: CartPole-v1\nreference: .inf\n",
    # plan files
    "plan/top_list.yaml": "- agents\n- envs\n",
    "plan/not_utf8.yaml": b"name: p\xff\n",
    "plan/overrides_string.yaml": ("name: p\nversion: 1\nagents: [random]\nenvs: [cartpole]\n"
                                   "seeds: [0]\noverrides: eval.every=500\n"),
    "plan/range_abc.yaml": ("name: p\nversion: 1\nagents: [random]\nenvs: [cartpole]\n"
                            "seeds: range(abc)\n"),
    "plan/no_agents.yaml": "name: p\nversion: 1\nenvs: [cartpole]\nseeds: [0]\n",
    "plan/version_zero.yaml": ("name: p\nversion: 0\nagents: [random]\nenvs: [cartpole]\n"
                               "seeds: [0]\n"),
    "plan/escaping_name.yaml": ("name: ../p\nversion: 1\nagents: [random]\nenvs: [cartpole]\n"
                                "seeds: [0]\n"),
    "plan/unknown_key.yaml": ("name: p\nversion: 1\nagents: [random]\nenvs: [cartpole]\n"
                              "seeds: [0]\ncolour: red\n"),
    "plan/bad_env.yaml": ("name: p\nversion: 1\nagents: [random]\nenvs: [nosuch]\n"
                          "seeds: [0]\n"),
    "plan/negative_seed.yaml": ("name: p\nversion: 1\nagents: [random]\nenvs: [cartpole]\n"
                                "seeds: [0, -1]\n"),
    # suites
    "suite/a_list.yaml": "- cartpole\n",
    "suite/unknown_key.yaml": "name: s\nenvs: [cartpole]\ncolour: red\n",
    # agent code
    "broken.py": "def f(:\n",
    "fine.py": ("from seedsweep.agents.uniform_random import UniformRandom\n\n\n"
                "class Fine(UniformRandom):\n    pass\n\n\ndef helper():\n    return 1\n"),
}


@pytest.fixture(scope="module")
def cfg(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("configs")
    for name, content in CONFIG_FILES.items():
        path = root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content.replace("{cfg}", str(root)))
    return root


@pytest.fixture(scope="module")
def sweeps(tmp_path_factory) -> Path:
    """Invented sweeps (test_compare's generator) and damaged copies of them."""
    root = tmp_path_factory.mktemp("sweeps")
    good = make_sweep(root / "good", seeds=3)
    garbled = make_sweep(root / "garbled", seeds=3)
    (sorted(garbled.glob("strong-cartpole-s0-*"))[0] / "eval.csv").write_text("not,a,csv\n")
    corrupt = make_sweep(root / "corrupt", seeds=3)
    (sorted(corrupt.glob("weak-acrobot-s1-*"))[0] / "run.json").write_bytes(b"{\"status\": ")
    binary = make_sweep(root / "binary", seeds=3)
    (sorted(binary.glob("weak-cartpole-s2-*"))[0] / "config.yaml").write_bytes(b"\xff\xfe\x00")
    truncated = make_sweep(root / "truncated", seeds=3)
    path = sorted(truncated.glob("strong-acrobot-s2-*"))[0] / "eval.csv"
    path.write_text(path.read_text().splitlines()[0] + "\n100,0,1.0\n")
    (root / "empty").mkdir()
    (root / "a_file").write_text("not a folder\n")
    assert good.is_dir()
    return root


# (argv, expected field, text in the message); {cfg}, {results} and {sweeps} are filled in
RUN = ["run", "results_dir={results}", "steps=100", "--no-estimate", "--progress=quiet"]
CASES: list[tuple[list[str], str, str]] = [
    # -- overrides: names, ranges, types --------------------------------------------------------
    ([*RUN, "agent=nosuch"], "agent", "unknown option 'nosuch' (allowed: "),
    ([*RUN, "env=nosuch"], "env", "unknown option 'nosuch' (allowed: "),
    ([*RUN, "env.id=NoSuchEnv-v3"], "env.id", "unknown gymnasium id"),
    ([*RUN, "env.wrappers=[{name: blur}]"], "env.wrappers[0].name", "unknown wrapper 'blur'"),
    ([*RUN, "seed=abc"], "seed", "expected an integer"),
    ([*RUN, "seed=-1"], "seed", "non-negative"),
    (["run", "results_dir={results}", "steps=1.5"], "steps", "expected an integer"),
    (["run", "results_dir={results}", "steps=0"], "steps", "must be a positive integer"),
    (["run", "results_dir={results}", "steps=-5"], "steps", "must be a positive integer"),
    ([*RUN, "agent.lr=fast"], "agent.lr", "expected a number"),
    ([*RUN, "agent.lr=inf"], "agent.lr", "finite"),
    ([*RUN, "agent.lr=nan"], "agent.lr", "must be > 0 (got nan)"),  # the range check speaks first
    ([*RUN, "agent.lr=0"], "agent.lr", "must be > 0"),
    ([*RUN, "agent.lr=-0.1"], "agent.lr", "must be > 0"),
    ([*RUN, "agent.double_q=maybe"], "agent.double_q", "expected true or false"),
    ([*RUN, "agent.hidden=[64,x]"], "agent.hidden[1]", "expected an integer"),
    ([*RUN, "agent.gamma=0"], "agent.gamma", "must be in (0, 1]"),
    ([*RUN, "agent.gamma=1.01"], "agent.gamma", "must be in (0, 1]"),
    ([*RUN, "agent.colour=3"], "agent.colour", "unknown option (allowed: "),
    ([*RUN, "+agent.colour=3"], "agent.colour", "unknown option (allowed: "),
    ([*RUN, "agent=actor_critic", "agent.entropy_weight=inf"], "agent.entropy_weight", "finite"),
    ([*RUN, "agent=actor_critic", "env=pendulum", "agent.gaussian_log_std_start=nan"],
     "agent.gaussian_log_std_start", "finite"),
    ([*RUN, "agent=actor_critic", "agent.advantage_lambda=1.5"], "agent.advantage_lambda",
     "must be in [0, 1]"),
    ([*RUN, "agent=actor_critic", "agent.advantage_lambda=-0.1"], "agent.advantage_lambda",
     "must be in [0, 1]"),
    ([*RUN, "agent=actor_critic", "agent.num_envs=0"], "agent.num_envs", "must be >= 1"),
    ([*RUN, "agent=ppo", "agent.ratio_clip=1.5"], "agent.ratio_clip", "must be in (0, 1)"),
    ([*RUN, "agent=ppo", "agent.minibatches_per_pass=0"], "agent.minibatches_per_pass",
     "must be in [1, rollout_steps"),
    ([*RUN, "agent=actor_critic", "env.id=tests.toy_envs:MultiDiscreteActions",
      "env.max_episode_steps=10"], "agent", "actor_critic does not support"),
    ([*RUN, "agent=reinforce", "agent.episodes_per_update=0"], "agent.episodes_per_update",
     "must be >= 1"),
    ([*RUN, "env.id=Pendulum-v1"], "agent", "dqn does not support Pendulum-v1's action space"),
    ([*RUN, "agent=reinforce", "env.id=tests.toy_envs:MultiDiscreteActions",
      "env.max_episode_steps=10"], "agent", "reinforce does not support"),
    ([*RUN, "env.reference=nan"], "env.reference", "finite"),
    ([*RUN, "env.max_episode_steps=0"], "env.max_episode_steps", "must be >= 1"),
    ([*RUN, "env.wrappers=[{name: scale_reward, scale: nan}]"], "env.wrappers[0].scale",
     "finite"),
    ([*RUN, "env.wrappers=[{name: scale_reward, scale: 0}]"], "env.wrappers[0].scale",
     "non-zero"),
    ([*RUN, "env.wrappers=[{name: clip_reward, min: 5, max: -5}]"], "env.wrappers[0].max",
     "must be > min"),
    ([*RUN, "env.wrappers=[{name: normalize_obs, clip: -1}]"], "env.wrappers[0].clip",
     "must be > 0"),
    ([*RUN, "env.wrappers=[{name: frame_stack}]"], "env.wrappers[0].size", "required"),
    ([*RUN, "env.wrappers=[{name: frame_stack, size: 0}]"], "env.wrappers[0].size",
     "must be >= 1"),
    ([*RUN, "env=frozenlake", "env.kwargs.map_name=9x9"], "env.kwargs.map_name",
     "KeyError: '9x9'"),
    ([*RUN, "env.kwargs.bogus=1"], "env.kwargs.bogus", "unexpected keyword argument 'bogus'"),
    ([*RUN, "results_dir="], "results_dir", "must be a folder path"),
    ([*RUN, "sweep=../x"], "sweep", "must be a name of letters"),
    ([*RUN, "sweep=ünï"], "sweep", "must be a name of letters"),
    ([*RUN, "agent.name=../../escaped"], "agent.name", "must be a name of letters"),
    ([*RUN, "agent.name=a/b"], "agent.name", "must be a name of letters"),
    ([*RUN, "env.name=../../x"], "env.name", "must be a name of letters"),
    ([*RUN, "agent.lr=ünï"], "agent.lr", "quote text with other characters"),
    ([*RUN, "bogus=1"], "bogus", "unknown key (allowed: "),
    ([*RUN, "eval.bogus=1"], "eval.bogus", "unknown key 'bogus' in eval (allowed: "),
    ([*RUN, "eval.every=0"], "eval.every", "must be a positive integer"),
    ([*RUN, "eval.episodes=-1"], "eval.episodes", "must be a positive integer"),
    ([*RUN, "eval.episodes=100000000"], "eval.episodes", "at most 100000"),
    ([*RUN, "checkpoint.every=-1"], "checkpoint.every", "must be >= 0"),
    ([*RUN, "torch_threads=0"], "torch_threads", "must be a positive integer"),
    ([*RUN, "seed=0,1"], "seed", "several values given; add -m"),
    ([*RUN, "suite=classic_control"], "suite", "add -m"),
    ([*RUN, "-m", "suite=nosuch"], "suite", "unknown suite 'nosuch' (allowed: "),
    ([*RUN, "-m", "seed=range(0)"], "seed", "the sweep over this key is empty"),
    ([*RUN, "-m", "seed=0,0"], "seed", "two sweep points give the same run"),
    ([*RUN, "-m", "sweep=a,b"], "sweep", "one sweep writes to one folder"),
    ([*RUN, "-m", "agent.lr=0.001,-1"], "agent.lr", "must be > 0"),
    # -- memory: refused before anything is built ---------------------------------------------
    ([*RUN, "agent.replay_capacity=1000000000000"], "agent.replay_capacity", "of memory"),
    ([*RUN, "agent.hidden=[1000000,1000000]"], "agent.hidden", "of memory"),
    ([*RUN, "env.wrappers=[{name: frame_stack, size: 100000000000}]"], "env.wrappers[0].size",
     "of memory"),
    (["run", "results_dir={results}", "steps=1000000000000000", "eval.every=1"], "eval.every",
     "of memory"),
    # -- command-line options -------------------------------------------------------------------
    ([*RUN, "--workers", "abc"], "--workers", "invalid int value"),
    ([*RUN, "workers=0"], "workers", "must be >= 1"),
    ([*RUN, "workers=x"], "workers", "expected an integer"),
    ([*RUN, "--timeout-min", "-1"], "--timeout-min", "must be >= 0"),
    ([*RUN, "--slurm", "novalue"], "--slurm", "expected KEY=VALUE"),
    ([*RUN, "--progress", "loud"], "--progress", "invalid choice"),
    ([*RUN, "--launcher", "cloud"], "--launcher", "invalid choice"),
    ([*RUN, "--frobnicate"], "options", "unknown option '--frobnicate'"),
    ([*RUN, "--config-dir", "/nonexistent/seedsweep-configs"], "--config-dir", "not a folder"),
    ([*RUN, "--plan", "nosuch"], "--plan", "no plan 'nosuch'"),
    ([*RUN, "--plan", "{cfg}/nosuch.yaml"], "--plan", "no such file"),
    (["frobnicate"], "command", "unknown command 'frobnicate'"),
    # -- agent and env YAML in a --config-dir ----------------------------------------------
    ([*RUN, "--config-dir", "{cfg}", "agent=bad_yaml"], "agent", "is not valid YAML"),
    ([*RUN, "--config-dir", "{cfg}", "agent=not_utf8"], "agent", "is not UTF-8 text"),
    ([*RUN, "--config-dir", "{cfg}", "agent=a_list"], "agent", "must hold a mapping"),
    ([*RUN, "--config-dir", "{cfg}", "agent=syntax_entry"], "agent.entry", "syntax error"),
    ([*RUN, "--config-dir", "{cfg}", "agent=no_class"], "agent.entry", "no attribute 'Nope'"),
    ([*RUN, "--config-dir", "{cfg}", "agent=not_agent"], "agent.entry", "is not an agent"),
    ([*RUN, "--config-dir", "{cfg}", "agent=unknown_key"], "agent.colour", "unknown option"),
    ([*RUN, "--config-dir", "{cfg}", "agent=escaping"], "agent.name", "must be a name"),
    ([*RUN, "--config-dir", "{cfg}", "agent=hidden_name"], "agent.name", "must be a name"),
    ([*RUN, "--config-dir", "{cfg}", "agent=per_env_list"], "agent.per_env", "expected a mapping"),
    ([*RUN, "--config-dir", "{cfg}", "agent=per_env_name"], "agent.per_env.cartpole.name",
     "only hyperparameters"),
    ([*RUN, "--config-dir", "{cfg}", "agent=nan_lr"], "agent.lr", "finite"),
    ([*RUN, "--config-dir", "{cfg}", "agent=interp"], "agent.entry", "Interpolation key"),
    ([*RUN, "--config-dir", "{cfg}", "env=bad_yaml"], "env", "is not valid YAML"),
    ([*RUN, "--config-dir", "{cfg}", "env=not_utf8"], "env", "is not UTF-8 text"),
    ([*RUN, "--config-dir", "{cfg}", "env=no_name"], "env.name", "missing"),
    ([*RUN, "--config-dir", "{cfg}", "env=slash_name"], "env.name", "must be a name"),
    ([*RUN, "--config-dir", "{cfg}", "env=unknown_key"], "env.colour", "unknown key"),
    ([*RUN, "--config-dir", "{cfg}", "env=bad_map"], "env.kwargs.map_name", "9x9"),
    ([*RUN, "--config-dir", "{cfg}", "env=no_limit"], "env.max_episode_steps", "no time limit"),
    ([*RUN, "--config-dir", "{cfg}", "env=inf_reference"], "env.reference", "finite"),
    # -- plan and suite files ---------------------------------------------------------------
    ([*RUN, "--config-dir", "{cfg}", "--plan", "top_list"], "--plan", "must hold a mapping"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "not_utf8"], "--plan", "is not UTF-8 text"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "overrides_string"], "plan.overrides",
     "expected a list of key=value strings"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "range_abc"], "plan.seeds", "range(n)"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "no_agents"], "plan.agents", "required"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "version_zero"], "plan.version",
     "must be a positive integer"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "escaping_name"], "plan.name",
     "letters, digits"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "unknown_key"], "plan.colour", "unknown key"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "bad_env"], "env", "unknown option 'nosuch'"),
    ([*RUN, "--config-dir", "{cfg}", "--plan", "negative_seed"], "plan.seeds",
     "non-negative integers"),
    ([*RUN, "--config-dir", "{cfg}", "-m", "suite=a_list"], "suite", "must hold a mapping"),
    ([*RUN, "--config-dir", "{cfg}", "-m", "suite=unknown_key"], "suite.colour", "unknown key"),
    # -- results folders: report, compare, status ------------------------------------------
    (["report", "{sweeps}/nosuch"], "sweep", "is not a folder"),
    (["report", "{sweeps}/empty"], "sweep", "contains no runs"),
    (["report", "{sweeps}/a_file"], "sweep", "is not a folder"),
    (["report", "{sweeps}/garbled/results/demo"], "{sweeps}/garbled/results/demo/",
     "eval.csv header"),
    (["report", "{sweeps}/corrupt/results/demo"], "{sweeps}/corrupt/results/demo/",
     "unreadable run.json"),
    (["report", "{sweeps}/binary/results/demo"], "{sweeps}/binary/results/demo/",
     "unreadable config.yaml"),
    (["report", "{sweeps}/truncated/results/demo"], "{sweeps}/truncated/results/demo/",
     "fields, expected 6"),
    (["report", "{sweeps}/good/results/demo", "--resamples", "5"], "--resamples", ">= 100"),
    (["report", "{sweeps}/good/results/demo", "--confidence", "1.5"], "--confidence",
     "must be in (0, 1)"),
    (["report", "{sweeps}/good/results/demo", "--agents", "nosuch"], "--agents",
     "unknown agent 'nosuch'"),
    (["report", "{sweeps}/good/results/demo", "--envs", "nosuch"], "--envs",
     "unknown env 'nosuch'"),
    (["report", "{sweeps}/good/results/demo", "--baseline", "weak"], "--baseline",
     "needs --candidate"),
    (["compare", "{sweeps}/good/results/demo"], "--candidate", "missing"),
    (["compare", "{sweeps}/good/results/demo", "--candidate", "nosuch"], "--candidate",
     "unknown agent 'nosuch'"),
    (["compare", "{sweeps}/good/results/demo", "--candidate", "strong", "--baseline", "strong"],
     "--baseline", "is the candidate"),
    (["compare", "{sweeps}/garbled/results/demo", "--candidate", "strong"],
     "{sweeps}/garbled/results/demo/", "eval.csv header"),
    (["compare", "{sweeps}/corrupt/results/demo", "--candidate", "strong"],
     "{sweeps}/corrupt/results/demo/", "unreadable run.json"),
    (["status", "{sweeps}/nosuch"], "folder", "is not a folder"),
    (["status", "{sweeps}/empty"], "folder", "holds no runs"),
    (["status", "{sweeps}/a_file"], "folder", "is not a folder"),
    (["plan-seeds", "{sweeps}/good/results/demo", "--candidate", "strong", "--power", "2"],
     "--power", "must be in"),
    (["check-agent", "random", "env=nosuch"], "env", "unknown option 'nosuch'"),
    (["check-agent", "random", "--config-dir", "{cfg}", "env=bad_map"], "env.kwargs.map_name",
     "9x9"),
]


def _ids() -> list[str]:
    out = []
    for argv, field, _ in CASES:
        tail = [a for a in argv if a not in RUN] or argv
        out.append(f"{argv[0]}:{field}:{' '.join(tail)[:60]}")
    return out


@pytest.mark.parametrize("argv,field,text", CASES, ids=_ids())
def test_bad_input_is_one_line_naming_the_field_exit_2_nothing_written(
        argv, field, text, cfg, sweeps, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(sys, "dont_write_bytecode", True)  # entry files are imported
    results = tmp_path / "results"
    fill = {"{cfg}": str(cfg), "{results}": str(results), "{sweeps}": str(sweeps)}

    def filled(text: str) -> str:
        for key, value in fill.items():
            text = text.replace(key, value)
        return text

    args = [filled(a) for a in argv]
    field = filled(field)
    before = {"tmp": tree(tmp_path), "cfg": tree(cfg), "sweeps": tree(sweeps)}
    code = main(args)
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert code == 2, err
    assert len(lines) == 1, err
    assert lines[0].startswith(f"seedsweep: error: {field}"), lines[0]
    assert text in lines[0], lines[0]
    assert {"tmp": tree(tmp_path), "cfg": tree(cfg), "sweeps": tree(sweeps)} == before


def test_the_battery_is_big_enough():
    """The brief asks for at least 60 cases across the CLI, YAML files and results folders."""
    kinds = {"cli": 0, "yaml": 0, "folders": 0}
    for argv, _, _ in CASES:
        if argv[0] in ("report", "compare", "status", "plan-seeds"):
            kinds["folders"] += 1
        elif "{cfg}" in argv:
            kinds["yaml"] += 1
        else:
            kinds["cli"] += 1
    assert len(CASES) >= 60 and min(kinds.values()) >= 10, kinds


def test_sweep_with_one_bad_point_writes_nothing(tmp_path, capsys):
    code = main(["run", "-m", f"results_dir={tmp_path}", "steps=100", "agent.lr=0.001,-1"])
    assert code == 2 and "agent.lr" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_help_and_configs_list_what_exists(capsys):
    assert main(["run", "--help"]) == 0
    out = capsys.readouterr().out
    for word in ("agent=", "env=", "cartpole", "dqn", "random", "eval.every", "one_hot"):
        assert word in out
    assert main(["configs"]) == 0
    out = capsys.readouterr().out
    for name in ("dqn", "random", "cartpole", "acrobot", "mountaincar", "lunarlander",
                 "frozenlake", "cliffwalking"):
        assert name in out
