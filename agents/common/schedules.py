"""Schedules of a hyperparameter over env steps."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class LinearSchedule:
    """Linear from ``start`` to ``end`` over ``steps`` env steps, then constant at ``end``."""

    start: float
    end: float
    steps: int

    def __call__(self, t: int) -> float:
        if self.steps <= 0 or t >= self.steps:
            return self.end
        return self.start + (self.end - self.start) * (t / self.steps)
