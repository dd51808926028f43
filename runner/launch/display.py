"""Live displays of launched runs: one run's bar or log lines, and a whole sweep's table.

On a terminal they are rich live displays; otherwise plain log lines. A run in a worker
process sends its progress over a queue (:class:`QueueProgress`) to the sweep's display.
"""

from __future__ import annotations

import math
import sys
import time
from typing import Any, TextIO

from rich.console import Console
from rich.live import Live
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn
from rich.table import Table
from seedsweep.runner.launch.schedule import makespan

# the live table's run column: with the steps, eval and rate columns and the borders, the
# table stays within 80 columns ("1,000,000/1,000,000" and "-1234.5 ± 123.4" included)
RUN_COLUMN = 24


def fmt_eta(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "?"
    seconds = int(seconds)
    h, rem = divmod(seconds, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}"


class RunProgress:
    """Shows env steps of the budget, last evaluation mean ± standard error, steps/s and ETA
    (a bar on a terminal, gone when the run ends; else a line every ``line_every_s``)."""

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
            self._bar = Progress(
                TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                TextColumn("{task.fields[eval]}"), TextColumn("{task.fields[rate]}"),
                TextColumn("{task.fields[eta]}"),
                console=Console(file=self.stream), transient=True,
            )
            self._task = self._bar.add_task(label, total=total, eval=self._eval, rate="", eta="")
            self._bar.start()

    def rate(self, steps: int) -> float:
        elapsed = time.perf_counter() - self.start
        return steps / elapsed if elapsed > 0 else 0.0

    def update(self, steps: int, steps_per_s: float | None = None) -> None:
        if self.mode == "quiet":
            return
        rate = self.rate(steps) if steps_per_s is None else steps_per_s
        eta = (self.total - steps) / rate if rate > 0 else math.inf
        known = rate > 0 and math.isfinite(eta)  # never "0 steps/s | ETA ?"
        if self._bar is not None:
            self._bar.update(self._task, completed=steps, eval=self._eval,
                             rate=f"{rate:,.0f} steps/s" if rate > 0 else "",
                             eta=f"ETA {fmt_eta(eta)}" if known else "")
            return
        if not known and steps < self.total:
            return
        now = time.perf_counter()
        if now - self._last_line >= self.line_every_s or steps >= self.total:
            self._last_line = now
            pct = 100.0 * steps / self.total
            print(f"[{self.label}] {steps}/{self.total} steps ({pct:.0f}%) | {self._eval} | "
                  f"{rate:,.0f} steps/s | ETA {fmt_eta(eta)}", file=self.stream, flush=True)

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


class SweepProgress:
    """A sweep's progress: a live table on a terminal (at most 80 columns, gone at the end),
    else one line per finished run and a status line at most every ``line_every_s``.

    The ETA places what is left on the workers in the planned order (:mod:`.schedule`). Its
    costs are the pre-launch estimate's (``costs``, seconds per run); once a fifth of the
    estimated work is done they are scaled by how long the work done so far really took.
    Without an estimate the work is counted in env steps and there is no ETA before that.
    """

    FIFTH = 0.2

    def __init__(self, planned, workers: int, mode: str = "auto", stream=None,
                 line_every_s: float = 30.0, costs: dict[str, float] | None = None):
        self.stream = stream or sys.stderr
        if mode == "auto":
            mode = "bar" if self.stream.isatty() else "lines"
        self.mode = mode
        self.workers = workers
        self.order = [p.run_id for p in planned]
        self.total_steps = {p.run_id: int(p.config["steps"]) for p in planned}
        self.costs = dict(costs) if costs else None
        self.steps: dict[str, int] = {}
        self.rates: dict[str, float] = {}
        self.evals: dict[str, Any] = {}
        self.running: set[str] = set()
        self.started_at: dict[str, float] = {}
        self.took: dict[str, float] = {}
        self.done: list[str] = []
        self.failed: list[str] = []
        self.busy: list[str] = []
        self.start = time.monotonic()
        self.line_every_s = line_every_s
        self._last_line = self.start
        self._live = None
        if self.mode == "bar":
            self._live = Live(self._table(), console=Console(file=self.stream),
                              refresh_per_second=4, transient=True)
            self._live.start()

    # -- events ----------------------------------------------------------------------
    def started(self, run_id: str) -> None:
        self.running.add(run_id)
        self.steps.setdefault(run_id, 0)
        self.started_at[run_id] = time.monotonic()

    def message(self, msg: dict[str, Any]) -> None:
        rid = msg["run_id"]
        self.steps[rid] = msg["steps"]
        self.rates[rid] = msg["rate"]
        if msg.get("eval") is not None:
            self.evals[rid] = msg["eval"]

    def finished(self, run_id: str, status: str, reason: str = "") -> None:
        self.running.discard(run_id)
        self.rates.pop(run_id, None)
        if run_id in self.started_at:
            self.took[run_id] = time.monotonic() - self.started_at[run_id]
        {"complete": self.done, "failed": self.failed, "busy": self.busy}[status].append(run_id)
        if status == "complete":
            self.steps[run_id] = self.total_steps[run_id]
        if self.mode == "lines":
            extra = f": {reason}" if reason else ""
            took = f" in {self.took[run_id]:.0f} s" if run_id in self.took else ""
            print(f"seedsweep: [{self.ended()}/{len(self.order)}] {status}: {run_id}{took}"
                  f"{extra}", file=self.stream, flush=True)

    # -- rendering ---------------------------------------------------------------------
    def ended(self) -> int:
        return len(self.done) + len(self.failed) + len(self.busy)

    def pending(self) -> int:
        return len(self.total_steps) - len(self.running) - self.ended()

    def rate(self) -> float:
        """Env steps per second of the whole sweep since it started (all runs together)."""
        elapsed = time.monotonic() - self.start
        return sum(self.steps.values()) / elapsed if elapsed > 0 else 0.0

    def _unit(self, rid: str) -> float:
        return self.costs.get(rid, 0.0) if self.costs else float(self.total_steps[rid])

    def _fraction(self, rid: str) -> float:
        return min(1.0, self.steps.get(rid, 0) / max(1, self.total_steps[rid]))

    def eta(self) -> tuple[float, str]:
        """(seconds left, basis): basis "measured" (a fifth or more of the work done),
        "estimate" (the pre-launch estimate) or "" (no ETA yet)."""
        now = time.monotonic()
        ended = set(self.done) | set(self.failed) | set(self.busy)
        total = sum(self._unit(r) for r in self.order)
        done = (sum(self._unit(r) for r in ended)
                + sum(self._unit(r) * self._fraction(r) for r in self.running))
        if total > 0 and done / total >= self.FIFTH:
            spent = (sum(self.took.get(r, 0.0) for r in ended)
                     + sum(now - self.started_at.get(r, now) for r in self.running))
            scale, basis = spent / done, "measured"
        elif self.costs:
            scale, basis = 1.0, "estimate"
        else:
            return math.inf, ""
        busy = [self._unit(r) * scale * (1.0 - self._fraction(r)) for r in self.running]
        if basis == "estimate":  # the estimate's clock: what the running runs have used
            busy = [max(0.0, self._unit(r) - (now - self.started_at.get(r, now)))
                    for r in self.running]
        left = [self._unit(r) * scale for r in self.order
                if r not in ended and r not in self.running]
        return makespan(left, self.workers, busy), basis

    def eta_text(self) -> str:
        seconds, basis = self.eta()
        if not basis:
            return "ETA once a fifth is done"
        return f"ETA {fmt_eta(seconds)}" + (" (estimate)" if basis == "estimate" else "")

    def summary(self) -> str:
        rate = self.rate()
        parts = [f"{self.ended()}/{len(self.order)} ended", f"{len(self.running)} running"]
        if self.failed:
            parts.append(f"{len(self.failed)} failed")
        parts.append(f"{self.pending()} pending")
        if rate > 0:
            parts.append(f"{rate:,.0f} steps/s")
        parts.append(self.eta_text())
        return " | ".join(parts)

    def _table(self):
        table = Table(title=self.summary(), title_justify="left", expand=False)
        table.add_column("run", no_wrap=True, overflow="ellipsis", max_width=RUN_COLUMN)
        table.add_column("steps", no_wrap=True, justify="right")
        table.add_column("eval ± s.e.", no_wrap=True, justify="right")
        table.add_column("steps/s", no_wrap=True, justify="right")
        for rid in sorted(self.running):
            ev = self.evals.get(rid)
            ev_text = "-" if ev is None else f"{ev[0]:.1f} ± {ev[1]:.1f}"
            table.add_row(rid, f"{self.steps.get(rid, 0):,}/{self.total_steps[rid]:,}", ev_text,
                          f"{self.rates.get(rid, 0):,.0f}")
        return table

    def refresh(self) -> None:
        if self._live is not None:
            self._live.update(self._table())
        elif self.mode == "lines":
            now = time.monotonic()
            if now - self._last_line >= self.line_every_s:
                self._last_line = now
                print(f"seedsweep: {self.summary()}", file=self.stream, flush=True)

    def close(self) -> None:
        if self._live is not None:
            self._live.stop()
