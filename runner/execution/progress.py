"""What a run tells about its progress, and the silent listener.

The execution layer only reports; how progress is shown (a live bar, log lines, a message
to the sweep's display) is the launch layer's business, which passes a listener in.
"""

from __future__ import annotations

from typing import Protocol


class RunListener(Protocol):
    """Receives a run's progress: steps done, evaluation results, the end."""

    def update(self, steps: int, steps_per_s: float | None = None) -> None: ...

    def evaluation(self, steps: int, mean: float, stderr: float) -> None: ...

    def close(self) -> None: ...


class Silent:
    """A listener that shows nothing (tests, calibration runs, scripts)."""

    def update(self, steps: int, steps_per_s: float | None = None) -> None:
        pass

    def evaluation(self, steps: int, mean: float, stderr: float) -> None:
        pass

    def close(self) -> None:
        pass
