"""Agents that fail on purpose, for failure-isolation tests."""

from __future__ import annotations

import os
import signal
from dataclasses import dataclass

from seedsweep.agents.uniform_random import UniformRandom


class _Failing(UniformRandom):
    @dataclass
    class Config:
        gamma: float = 0.99
        num_envs: int = 1
        fail_at: int = 100

    def observe(self, step):
        if step.env_steps >= self.config.fail_at:
            return self.fail()
        return {}


class Raises(_Failing):
    def fail(self):
        raise RuntimeError("deliberate failure for the test")


class NaNLoss(_Failing):
    def fail(self):
        return {"loss": float("nan")}


class KillsItself(_Failing):
    def fail(self):
        os.kill(os.getpid(), signal.SIGKILL)


class Healthy(_Failing):
    def fail(self):
        return {}
