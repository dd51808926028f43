"""The version of a user's own agent code is recorded, and one folder never mixes versions.

An in-house agent lives in a project folder outside seedsweep; its source files (the entry
module and the project modules it uses) are hashed with SHA-256 into every run's provenance.
Check values: the hashes are recomputed here with hashlib (FIPS 180-4 SHA-256), the file
set is the project's own rule (entry module plus the project modules it uses by name).
"""

from __future__ import annotations

import hashlib
import json
import sys
import uuid
from pathlib import Path

import pytest
from seedsweep.runner.commands.main import main
from seedsweep.runner.execution.config import compose
from seedsweep.runner.execution.prepare import prepare

RUN = ["steps=100", "eval.every=100", "eval.episodes=1", "--progress=quiet"]


@pytest.fixture()
def project(tmp_path, monkeypatch) -> tuple[Path, str]:
    """A user project with an agent package (a unique name: modules stay imported)."""
    pkg = f"inhouse_{uuid.uuid4().hex[:8]}"
    root = tmp_path / "project"
    (root / pkg).mkdir(parents=True)
    (root / pkg / "__init__.py").write_text("")
    (root / pkg / "helpers.py").write_text("def same(x):\n    return x\n")
    (root / pkg / "unused.py").write_text("VALUE = 1\n")
    (root / pkg / "agent.py").write_text(
        f"from {pkg}.helpers import same\n"
        "from seedsweep.agents.uniform_random import UniformRandom\n\n\n"
        "class Mine(UniformRandom):\n"
        "    def act(self, obs, explore):\n"
        "        return same(super().act(obs, explore))\n")
    (root / "configs" / "agent").mkdir(parents=True)
    (root / "configs" / "agent" / "mine.yaml").write_text(
        f"name: mine\nentry: {pkg}.agent:Mine\ngamma: 0.99\n")
    monkeypatch.chdir(root)
    monkeypatch.syspath_prepend(str(root))
    monkeypatch.setattr(sys, "dont_write_bytecode", True)
    return root, pkg


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:12]


def test_the_agent_files_it_uses_are_hashed_and_recorded(project, capsys):
    root, pkg = project
    p = prepare(compose(["agent=mine", "results_dir=results"], [root / "configs"]))
    assert p.agent_code == {f"{pkg}/agent.py": sha(root / pkg / "agent.py"),
                            f"{pkg}/helpers.py": sha(root / pkg / "helpers.py")}
    assert main(["run", "--config-dir", "configs", "agent=mine", "results_dir=results",
                 *RUN]) == 0
    (run_json,) = (root / "results" / "default").glob("*/run.json")
    prov = json.loads(run_json.read_text())["provenance"]
    assert prov["agent_code"] == p.agent_code
    assert prov["agent_code_version"] == p.agent_code_version is not None
    shipped = prepare(compose(["agent=dqn", "results_dir=results"]))
    assert shipped.agent_code == {} and shipped.agent_code_version is None


def test_an_edited_agent_is_not_mixed_into_the_same_folder(project, capsys):
    root, pkg = project
    args = ["run", "--config-dir", "configs", "agent=mine", "results_dir=results", *RUN]
    assert main([*args, "seed=0"]) == 0
    folder = root / "results" / "default"
    before = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
    (root / pkg / "helpers.py").write_text("def same(x):\n    return x  # edited\n")
    capsys.readouterr()
    assert main([*args, "seed=1"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("seedsweep: error: sweep: ") and len(err.splitlines()) == 1
    assert f"another version of {pkg}/helpers.py" in err
    assert {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()} == before
    assert main([*args, "seed=1", "sweep=other"]) == 0
    (root / pkg / "unused.py").write_text("VALUE = 2\n")  # a module the agent does not use
    assert main([*args, "seed=2", "sweep=other"]) == 0
    assert main([*args, "seed=1", "--allow-mixed-code"]) == 0
