"""Live progress of one run: a rich bar on a terminal, plain periodic lines otherwise."""

from __future__ import annotations

import math
import sys
import time
from typing import TextIO


def _fmt_eta(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "?"
    seconds = int(seconds)
    h, rem = divmod(seconds, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}"


class RunProgress:
    """Shows env steps of the budget, last evaluation mean ± s.e., steps/s and ETA."""

    def __init__(self, label: str, total: int, mode: str = "auto", stream: TextIO | None = None,
                 line_every_s: float = 10.0):
        self.label = label
        self.total = total
        self.stream = stream or sys.stderr
        if mode == "auto":
            mode = "bar" if self.stream.isatty() else "lines"
        self.mode = mode
        self.line_every_s = line_every_s
        self.start = time.perf_counter()
        self._last_line = self.start
        self._eval = "eval: -"
        self._bar = None
        if self.mode == "bar":
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

            self._bar = Progress(
                TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                TextColumn("{task.fields[eval]}"), TextColumn("{task.fields[rate]}"),
                TextColumn("ETA {task.fields[eta]}"),
                console=Console(file=self.stream), transient=False,
            )
            self._task = self._bar.add_task(label, total=total, eval=self._eval, rate="", eta="?")
            self._bar.start()

    def rate(self, steps: int) -> float:
        elapsed = time.perf_counter() - self.start
        return steps / elapsed if elapsed > 0 else 0.0

    def update(self, steps: int, steps_per_s: float | None = None) -> None:
        if self.mode == "quiet":
            return
        rate = self.rate(steps) if steps_per_s is None else steps_per_s
        eta = (self.total - steps) / rate if rate > 0 else math.inf
        if self._bar is not None:
            self._bar.update(self._task, completed=steps, eval=self._eval,
                             rate=f"{rate:,.0f} steps/s", eta=_fmt_eta(eta))
            return
        now = time.perf_counter()
        if now - self._last_line >= self.line_every_s or steps >= self.total:
            self._last_line = now
            pct = 100.0 * steps / self.total
            print(f"[{self.label}] {steps}/{self.total} steps ({pct:.0f}%) | {self._eval} | "
                  f"{rate:,.0f} steps/s | ETA {_fmt_eta(eta)}", file=self.stream, flush=True)

    def evaluation(self, steps: int, mean: float, stderr: float) -> None:
        se = "n/a" if not math.isfinite(stderr) else f"{stderr:.2f}"
        self._eval = f"eval: {mean:.2f} ± {se}"
        if self.mode == "lines":
            print(f"[{self.label}] eval at {steps} steps: return {mean:.2f} ± {se} (s.e.)",
                  file=self.stream, flush=True)
        self.update(steps)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()


class QueueProgress:
    """Progress of a run in a worker process, sent to the sweep's display (throttled)."""

    def __init__(self, messages, every_s: float = 0.5):
        self.messages = messages
        self.every_s = every_s

    def for_run(self, label: str, total: int) -> _QueueRun:
        return _QueueRun(self.messages, label, total, self.every_s)


class _QueueRun:
    def __init__(self, messages, label: str, total: int, every_s: float):
        self.messages, self.label, self.total, self.every_s = messages, label, total, every_s
        self._last = 0.0
        self._eval = None

    def update(self, steps: int, steps_per_s: float | None = None) -> None:
        now = time.perf_counter()
        if now - self._last >= self.every_s or steps >= self.total:
            self._last = now
            self.messages.put({"run_id": self.label, "steps": steps, "total": self.total,
                               "rate": steps_per_s or 0.0, "eval": self._eval})

    def evaluation(self, steps: int, mean: float, stderr: float) -> None:
        self._eval = (mean, stderr)
        self._last = 0.0
        self.update(steps)

    def close(self) -> None:
        pass
