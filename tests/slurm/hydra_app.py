"""A tiny hydra app for the SLURM integration test, run as a script in a subprocess.

Why a script: hydra picks its launcher (here ``hydra/launcher=submitit_slurm``) only in
``@hydra.main`` multirun, and a task function in ``__main__`` is pickled by value, so the
SLURM job needs nothing importable from the tests folder.

Each job writes ``<out_dir>/x-<x>.json`` (what it saw of SLURM) and returns ``x * x``.
"""

from __future__ import annotations

import json
import os
import socket
from dataclasses import dataclass
from pathlib import Path

import hydra
from hydra.core.config_store import ConfigStore
from hydra.core.hydra_config import HydraConfig


@dataclass
class AppConfig:
    out_dir: str = "???"
    x: int = 0


ConfigStore.instance().store(name="slurm_hydra_app", node=AppConfig)


def write_atomically(path: Path, text: str) -> None:
    """Temp file, fsync, rename: the test never sees half a file."""
    tmp = path.with_name(f".{path.name}.tmp")
    with open(tmp, "w") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(tmp, path)


@hydra.main(version_base="1.3", config_path=None, config_name="slurm_hydra_app")
def main(cfg: AppConfig) -> int:
    record = {
        "x": cfg.x,
        "hydra_job_id": HydraConfig.get().job.id,
        "slurm_job_id": os.environ.get("SLURM_JOB_ID"),
        "slurm_array_job_id": os.environ.get("SLURM_ARRAY_JOB_ID"),
        "slurm_array_task_id": os.environ.get("SLURM_ARRAY_TASK_ID"),
        "slurmd_nodename": os.environ.get("SLURMD_NODENAME"),
        "hostname": socket.gethostname(),
    }
    out_dir = Path(cfg.out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    write_atomically(out_dir / f"x-{cfg.x}.json", json.dumps(record, sort_keys=True))
    return cfg.x * cfg.x


if __name__ == "__main__":
    main()
