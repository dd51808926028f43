"""A non-editable install works like a real package (built once per session, ~20 s).

The wheel is built from this checkout and installed with ``pip install --no-deps`` into a
fresh venv. The dependencies come from the test venv through a ``.pth`` line (a path on
``sys.path``, not a site folder: the test venv's editable seedsweep is not activated), so
the installed ``seedsweep`` is the only one the fresh interpreter can import. Then
``seedsweep run agent=dqn env=cartpole steps=2000`` runs from an unrelated folder.
"""

from __future__ import annotations

import shutil
import site
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> tuple[Path, str]:
    """Built from a copy of the sources, so the build leaves nothing in the checkout."""
    out = tmp_path_factory.mktemp("wheel")
    source = tmp_path_factory.mktemp("source")
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, source / name)
    for folder in ("runner", "agents", "envs", "configs"):
        shutil.copytree(ROOT / folder, source / folder,
                        ignore=shutil.ignore_patterns("__pycache__"))
    built = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-w", str(out),
                            str(source)], capture_output=True, text=True, timeout=300)
    assert built.returncode == 0, built.stderr[-2000:]
    return next(out.glob("seedsweep-*.whl")), built.stdout + built.stderr


@pytest.fixture(scope="module")
def fresh_venv(wheel, tmp_path_factory) -> Path:
    venv = tmp_path_factory.mktemp("venv") / "fresh"
    subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True, timeout=300)
    done = subprocess.run([str(venv / "bin" / "pip"), "install", "-q", "--no-deps",
                           "--no-index", str(wheel[0])], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    target = next((venv / "lib").glob("python3*/site-packages"))
    (target / "zz_test_dependencies.pth").write_text("\n".join(site.getsitepackages()) + "\n")
    return venv


def test_wheel_has_one_namespace_and_the_configs(wheel):
    names = zipfile.ZipFile(wheel[0]).namelist()
    tops = {n.split("/")[0] for n in names if not n.split("/")[0].endswith(".dist-info")}
    assert tops == {"seedsweep"}
    assert "seedsweep/configs/defaults/config.yaml" in names
    assert "seedsweep/configs/agent/dqn.yaml" in names
    assert "seedsweep/configs/plan/demo.yaml" in names


def test_building_prints_no_warning_about_our_metadata(wheel):
    text = wheel[1].lower()
    assert "license" not in text and "deprecat" not in text, wheel[1][-2000:]


def test_installed_command_runs_from_an_unrelated_folder(fresh_venv, tmp_path):
    python = fresh_venv / "bin" / "python"
    where = subprocess.run([str(python), "-c", "import seedsweep.runner as r; print(r.__file__)"],
                           capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert str(fresh_venv) in where.stdout, where.stdout + where.stderr
    done = subprocess.run([str(fresh_venv / "bin" / "seedsweep"), "run", "agent=dqn",
                           "env=cartpole", "steps=2000", "eval.every=1000", "eval.episodes=2",
                           "--progress=quiet"], capture_output=True, text=True, cwd=tmp_path,
                          timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    runs = list((tmp_path / "results" / "default").glob("dqn-cartpole-s0-*/run.json"))
    assert len(runs) == 1 and '"status": "complete"' in runs[0].read_text()
