"""Training checkpoints: full state, written atomically, verified before use.

Each checkpoint is a torch file plus a ``.sha256`` beside it, both written atomically
(the digest last). A checkpoint whose digest is missing or wrong, or that fails to load,
is reported and skipped: the run falls back to the previous one, or starts afresh.
The newest :data:`KEEP` checkpoints are kept.
"""

from __future__ import annotations

import hashlib
import io
import logging
from pathlib import Path
from typing import Any

import torch
from seedsweep.runner.execution.records import atomic_write_bytes, atomic_write_text

logger = logging.getLogger(__name__)

FOLDER = "checkpoints"
KEEP = 2


def to_bytes(state: dict[str, Any]) -> bytes:
    buf = io.BytesIO()
    torch.save(state, buf)
    return buf.getvalue()


def save(run_dir: Path, state: dict[str, Any], env_steps: int) -> Path:
    """Write checkpoint ``ckpt-<env_steps>.pt`` and its digest; prune old ones."""
    folder = run_dir / FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    data = to_bytes(state)
    path = folder / f"ckpt-{env_steps:012d}.pt"
    atomic_write_bytes(path, data)
    atomic_write_text(path.with_suffix(".sha256"), hashlib.sha256(data).hexdigest() + "\n")
    for old in sorted(folder.glob("ckpt-*.pt"))[:-KEEP]:
        old.with_suffix(".sha256").unlink(missing_ok=True)
        old.unlink(missing_ok=True)
    return path


def load_latest(run_dir: Path) -> tuple[dict[str, Any], Path] | None:
    """The newest checkpoint that verifies and loads, or None. Bad ones are reported."""
    for path in sorted((run_dir / FOLDER).glob("ckpt-*.pt"), reverse=True):
        digest_file = path.with_suffix(".sha256")
        try:
            data = path.read_bytes()
            expected = digest_file.read_text().strip() if digest_file.exists() else None
            if expected != hashlib.sha256(data).hexdigest():
                raise ValueError("digest missing or does not match (truncated or corrupt)")
            state = torch.load(io.BytesIO(data), weights_only=True)
            return state, path
        except Exception as err:  # any failure to read means: do not continue from it
            logger.warning("checkpoint %s unusable (%s); trying an older one", path.name, err)
    return None


def clear(run_dir: Path) -> None:
    folder = run_dir / FOLDER
    for p in folder.glob("ckpt-*"):
        p.unlink(missing_ok=True)
