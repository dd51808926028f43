"""Run records on disk: atomic writes, run ids, provenance, CSV formats."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import platform
import socket
import subprocess
import tempfile
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import gymnasium
import numpy
import seedsweep.agents
import seedsweep.envs
import torch
from seedsweep.configs.checks import ConfigError


class RecordError(ConfigError):
    """A record on disk that cannot be read (corrupt, truncated, not what it should be)."""


EVAL_COLUMNS = ("env_step", "episode", "return", "discounted_return", "length", "episode_seed")
TRAIN_COLUMNS = ("env_step", "return", "length")
SCALAR_COLUMNS = ("env_step", "key", "value")
HASH_EXCLUDED = ("sweep", "results_dir")


def _read_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _read_umask()


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` so readers see the old file or the new one, never a mix."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.fchmod(fd, 0o666 & ~_UMASK)  # mkstemp makes 0600; results are for the group too
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    fsync_dir(path.parent)


def remove_stale_temp_files(folder: Path) -> list[Path]:
    """Delete the temporary files that :func:`atomic_write_bytes` leaves when its process is
    killed mid-write (``.<name>.<random>.tmp``). Call only while holding the lock that
    guards writes to ``folder``, so no live write is removed."""
    removed = []
    for p in Path(folder).glob(".*.tmp"):
        if p.is_file():
            try:
                p.unlink()
            except OSError:
                continue  # a read-only folder: the leftovers do no harm
            removed.append(p)
    return removed


def atomic_write_text(path: Path, text: str) -> None:
    atomic_write_bytes(path, text.encode("utf-8"))


def atomic_write_json(path: Path, obj: Any) -> None:
    atomic_write_text(path, json.dumps(obj, indent=2, sort_keys=False) + "\n")


def fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def read_run_json(run_dir: Path) -> dict[str, Any] | None:
    """A run folder's ``run.json``: None when there is none yet; RecordError (one line,
    naming the file) when it exists but cannot be read as a JSON object."""
    path = Path(run_dir) / "run.json"
    try:
        doc = json.loads(path.read_bytes().decode("utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, ValueError, UnicodeDecodeError) as err:
        text = str(err).strip().splitlines()
        raise RecordError(str(path), f"unreadable run.json ({text[0] if text else err!r})"
                          ) from None
    if not isinstance(doc, dict):
        raise RecordError(str(path), "run.json is not a JSON object")
    return doc


def json_default(value: Any) -> Any:
    """``json.dumps(default=...)`` for numpy scalars and paths in records and reports."""
    if isinstance(value, numpy.generic):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def csv_text(columns: Sequence[str], rows: Iterable[Sequence[Any]]) -> str:
    """CSV with floats written by ``repr`` (shortest round-trip form): bit-exact, stable."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for row in rows:
        w.writerow([repr(v) if isinstance(v, float) else v for v in row])
    return buf.getvalue()


def config_digest(resolved: dict[str, Any]) -> str:
    """SHA-256 (hex) of the parts of a resolved config that change what a run computes."""
    payload = {k: v for k, v in resolved.items() if k not in HASH_EXCLUDED}
    if payload.get("tuning") is False:  # the default: ids of ordinary runs stay as they were
        del payload["tuning"]
    blob = json.dumps(payload, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


def config_hash(resolved: dict[str, Any]) -> str:
    """Stable short hash of a resolved config (the end of a run id)."""
    return config_digest(resolved)[:10]


def run_id(resolved: dict[str, Any]) -> str:
    """Folder name of a run: readable prefix plus the config hash."""
    agent = resolved["agent"]["name"]
    env = resolved["env"]["name"]
    return f"{agent}-{env}-s{resolved['seed']}-{config_hash(resolved)}"


def now_iso() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


_PROVENANCE: dict[str, Any] | None = None


def provenance() -> dict[str, Any]:
    """Where and with what code a run was made (computed once per process)."""
    global _PROVENANCE
    if _PROVENANCE is None:
        commit, dirty = _git_state()
        _PROVENANCE = {
            "code_version": code_version(),
            "git_commit": commit,
            "git_dirty": dirty,
            "python": platform.python_version(),
            "torch": torch.__version__,
            "gymnasium": gymnasium.__version__,
            "numpy": numpy.__version__,
            "cpu": _cpu_model(),
            "hostname": socket.gethostname(),
        }
    return dict(_PROVENANCE)


_CODE_VERSION: str | None = None


def result_packages() -> dict[str, Path]:
    """The packages whose source computes a run's results, with their folders: the agents,
    the envs and this execution layer (not the launchers, analysis, report or CLI)."""
    return {
        "seedsweep.agents": Path(seedsweep.agents.__file__).resolve().parent,
        "seedsweep.envs": Path(seedsweep.envs.__file__).resolve().parent,
        "seedsweep.runner.execution": Path(__file__).resolve().parent,
    }


def code_version() -> str:
    """Hash of every module of :func:`result_packages`. Unlike the git commit it also
    changes with uncommitted edits, and not with docs or the report."""
    global _CODE_VERSION
    if _CODE_VERSION is None:
        h = hashlib.sha256()
        for name, folder in sorted(result_packages().items()):
            for f in sorted(folder.rglob("*.py")):
                h.update(f"{name}/{f.relative_to(folder).as_posix()}".encode())
                h.update(f.read_bytes())
        _CODE_VERSION = h.hexdigest()[:12]
    return _CODE_VERSION


def _git_state() -> tuple[str | None, bool | None]:
    root = Path(__file__).resolve().parent
    try:
        commit = subprocess.run(
            ["git", "-C", str(root), "rev-parse", "HEAD"],
            capture_output=True, text=True, timeout=10, check=True,
        ).stdout.strip()
        status = subprocess.run(
            ["git", "-C", str(root), "status", "--porcelain", "--untracked-files=no"],
            capture_output=True, text=True, timeout=10, check=True,
        ).stdout.strip()
        return commit, bool(status)
    except (OSError, subprocess.SubprocessError):
        return None, None


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()
