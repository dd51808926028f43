"""Running observation statistics shared by all training envs and frozen in evaluation.

gymnasium's vector ``NormalizeObservation`` assumes next-step autoreset, while the runner
uses same-step autoreset (so an agent can bootstrap from an episode's final observation);
this keeps gymnasium's ``RunningMeanStd`` and normalises final observations too.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import torch
from gymnasium.wrappers.utils import RunningMeanStd


class ObsNormalizer:
    def __init__(self, shape: tuple[int, ...], epsilon: float = 1e-8, clip: float = 10.0):
        self.rms = RunningMeanStd(shape=shape, dtype=np.float64)
        self.epsilon = epsilon
        self.clip = clip

    def update(self, obs: np.ndarray) -> None:
        self.rms.update(np.asarray(obs, dtype=np.float64))

    def __call__(self, obs: np.ndarray) -> np.ndarray:
        """Normalise with the current statistics; never updates them."""
        z = (obs - self.rms.mean) / np.sqrt(self.rms.var + self.epsilon)
        return np.clip(z, -self.clip, self.clip).astype(np.float32)

    def state_dict(self) -> dict[str, Any]:
        return {
            "mean": torch.from_numpy(self.rms.mean.copy()),
            "var": torch.from_numpy(self.rms.var.copy()),
            "count": float(self.rms.count),
        }

    def load_state_dict(self, state: dict[str, Any]) -> None:
        self.rms.mean = state["mean"].numpy().copy()
        self.rms.var = state["var"].numpy().copy()
        self.rms.count = float(state["count"])
