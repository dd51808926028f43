"""Training checkpoints: full state, written atomically, verified before use.

Each checkpoint is a torch file plus a ``.sha256`` beside it, both written atomically
(the digest last). A checkpoint whose digest is missing or wrong, that fails to load, that
makes torch warn, or that belongs to another run (another run id or config) is reported
in one line and skipped: the run falls back to the previous one, or starts afresh. The
newest :data:`KEEP` checkpoints are kept.

Nothing read here can run code: files load with ``torch.load(weights_only=True)``, which
builds tensors and plain python values only, and env states are plain data
(:mod:`seedsweep.envs.snapshot`), never pickled objects. The digest only detects damage
(anyone who can write the folder can write a matching digest); what makes a planted file
harmless is that it is data.
"""

from __future__ import annotations

import hashlib
import io
import logging
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import torch
from seedsweep.runner.execution.records import atomic_write_bytes, atomic_write_text

logger = logging.getLogger(__name__)

FOLDER = "checkpoints"
KEEP = 2
FORMAT = 2  # 1: env states pickled (no longer read); 2: env states as plain data, bound to a run


@dataclass(frozen=True)
class Binding:
    """Which run a checkpoint belongs to: its id and the digest of its resolved config."""

    run_id: str
    config_digest: str

    def as_dict(self) -> dict[str, str]:
        return {"run_id": self.run_id, "config_digest": self.config_digest}


class UnusableCheckpoint(ValueError):
    """A checkpoint that must not be continued from; the message is one line."""


BINDING_KEYS = ("format", "run")  # beside the state's own keys (agent, envs, loop, ...)


def to_bytes(binding: Binding, state: dict[str, Any]) -> bytes:
    """A checkpoint file's bytes: the state's keys (``agent``, ``envs``, ``loop``,
    ``global_rngs``) with the format and the run's binding beside them."""
    buf = io.BytesIO()
    torch.save({"format": FORMAT, "run": binding.as_dict(), **state}, buf)
    return buf.getvalue()


def from_bytes(data: bytes, binding: Binding) -> dict[str, Any]:
    """The state in a checkpoint of this run; UnusableCheckpoint (one line) otherwise."""
    error: Exception | None = None
    with warnings.catch_warnings(record=True) as caught:  # torch's warnings span lines
        warnings.simplefilter("always")
        try:
            doc = torch.load(io.BytesIO(data), weights_only=True)
        except Exception as err:  # torch raises assorted types on damaged or foreign files
            error = err
    warned = _first_sentence(str(caught[0].message)) if caught else ""
    if error is not None:
        raise UnusableCheckpoint(f"does not load ({_first_line(error)}"
                                 + (f"; torch warned: {warned})" if warned else ")"))
    if warned:  # e.g. "Detected pickle protocol 253 ...": a damaged header that still loads
        raise UnusableCheckpoint(f"torch warned while loading it ({warned})")
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        found = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        raise UnusableCheckpoint(f"not a checkpoint of format {FORMAT} (found {found!r})")
    run = doc.get("run")
    if not isinstance(run, dict) or run.get("run_id") != binding.run_id:
        other = run.get("run_id") if isinstance(run, dict) else None
        raise UnusableCheckpoint(f"belongs to run {other!r}, not {binding.run_id}")
    if run.get("config_digest") != binding.config_digest:
        raise UnusableCheckpoint(f"was made with another config (config digest "
                                 f"{str(run.get('config_digest'))[:12]}..., this run's is "
                                 f"{binding.config_digest[:12]}...)")
    state = {k: v for k, v in doc.items() if k not in BINDING_KEYS}
    if not state:
        raise UnusableCheckpoint("holds no state")
    return state


def save(run_dir: Path, binding: Binding, state: dict[str, Any], env_steps: int) -> Path:
    """Write checkpoint ``ckpt-<env_steps>.pt`` and its digest; prune old ones."""
    folder = run_dir / FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    data = to_bytes(binding, state)
    path = folder / f"ckpt-{env_steps:012d}.pt"
    atomic_write_bytes(path, data)
    atomic_write_text(digest_path(path), hashlib.sha256(data).hexdigest() + "\n")
    for old in sorted(folder.glob("ckpt-*.pt"))[:-KEEP]:
        discard(old)
    return path


def digest_path(path: Path) -> Path:
    return path.with_suffix(".sha256")


def discard(path: Path) -> None:
    """Remove a checkpoint and its digest (digest first: a lone digest is never trusted)."""
    digest_path(path).unlink(missing_ok=True)
    path.unlink(missing_ok=True)


def candidates(run_dir: Path) -> list[Path]:
    """The run's checkpoint files, newest first."""
    return sorted((run_dir / FOLDER).glob("ckpt-*.pt"), reverse=True)


def load(path: Path, binding: Binding) -> dict[str, Any]:
    """A verified checkpoint's state; UnusableCheckpoint (one line) when it must not be used."""
    try:
        data = path.read_bytes()
        expected = digest_path(path).read_text().strip() if digest_path(path).exists() else None
    except OSError as err:
        raise UnusableCheckpoint(f"cannot be read ({err.strerror or err})") from None
    if expected != hashlib.sha256(data).hexdigest():
        raise UnusableCheckpoint("digest missing or does not match (truncated or corrupt)")
    return from_bytes(data, binding)


def load_latest(run_dir: Path, binding: Binding) -> tuple[dict[str, Any], Path] | None:
    """The newest checkpoint that verifies, loads and belongs to this run, or None. Each
    one passed over is reported in one line."""
    for path in candidates(run_dir):
        try:
            return load(path, binding), path
        except UnusableCheckpoint as err:
            logger.warning("checkpoint %s unusable (%s); trying an older one", path.name, err)
    return None


def clear(run_dir: Path) -> None:
    folder = run_dir / FOLDER
    for p in folder.glob("ckpt-*"):
        p.unlink(missing_ok=True)


def _first_line(err: BaseException) -> str:
    lines = [ln.strip() for ln in str(err).strip().splitlines() if ln.strip()]
    return f"{type(err).__name__}: {_first_sentence(lines[0])}" if lines else type(err).__name__


def _first_sentence(text: str) -> str:
    text = " ".join(text.split())
    end = text.find(". ")
    return text[:end] if 0 < end < 200 else text[:200]
