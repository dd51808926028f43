"""One live display for a whole sweep: done / running / failed / pending, throughput, ETA.

On a terminal it is a rich live table; otherwise plain log lines, one every
``line_every_s`` seconds and one whenever a run ends.
"""

from __future__ import annotations

import math
import sys
import time
from typing import Any

from seedsweep.runner.launch.progress import _fmt_eta


class SweepProgress:
    def __init__(self, planned, workers: int, mode: str = "auto", stream=None,
                 line_every_s: float = 15.0):
        self.stream = stream or sys.stderr
        if mode == "auto":
            mode = "bar" if self.stream.isatty() else "lines"
        self.mode = mode
        self.workers = workers
        self.total_steps = {p.run_id: int(p.config["steps"]) for p in planned}
        self.steps: dict[str, int] = {}
        self.rates: dict[str, float] = {}
        self.evals: dict[str, Any] = {}
        self.running: set[str] = set()
        self.done: list[str] = []
        self.failed: list[str] = []
        self.busy: list[str] = []
        self.start = time.monotonic()
        self.line_every_s = line_every_s
        self._last_line = self.start
        self._live = None
        if self.mode == "bar":
            from rich.console import Console
            from rich.live import Live

            self._live = Live(self._table(), console=Console(file=self.stream),
                              refresh_per_second=4, transient=False)
            self._live.start()

    # -- events ----------------------------------------------------------------------
    def started(self, run_id: str) -> None:
        self.running.add(run_id)
        self.steps.setdefault(run_id, 0)

    def message(self, msg: dict[str, Any]) -> None:
        rid = msg["run_id"]
        self.steps[rid] = msg["steps"]
        self.rates[rid] = msg["rate"]
        if msg.get("eval") is not None:
            self.evals[rid] = msg["eval"]

    def finished(self, run_id: str, status: str, reason: str = "") -> None:
        self.running.discard(run_id)
        self.rates.pop(run_id, None)
        {"complete": self.done, "failed": self.failed, "busy": self.busy}[status].append(run_id)
        if status == "complete":
            self.steps[run_id] = self.total_steps[run_id]
        if self.mode == "lines":
            extra = f": {reason}" if reason else ""
            print(f"seedsweep: {status}: {run_id}{extra} | {self.summary()}", file=self.stream,
                  flush=True)

    # -- rendering ---------------------------------------------------------------------
    def pending(self) -> int:
        return (len(self.total_steps) - len(self.running) - len(self.done) - len(self.failed)
                - len(self.busy))

    def rate(self) -> float:
        """Env steps per second of the whole sweep since it started (all runs together)."""
        elapsed = time.monotonic() - self.start
        return sum(self.steps.values()) / elapsed if elapsed > 0 else 0.0

    def eta_s(self) -> float:
        rate = self.rate()
        left_running = sum(self.total_steps[r] - self.steps.get(r, 0) for r in self.running)
        ended = set(self.done) | set(self.failed) | set(self.busy) | self.running
        left_pending = sum(t for r, t in self.total_steps.items() if r not in ended)
        if rate <= 0:
            return math.inf
        return (left_running + left_pending) / rate

    def summary(self) -> str:
        rate = self.rate()
        return (f"done {len(self.done)} | running {len(self.running)} | failed {len(self.failed)}"
                f" | pending {self.pending()} | {rate:,.0f} steps/s | ETA {_fmt_eta(self.eta_s())}")

    def _table(self):
        from rich.table import Table

        table = Table(title=self.summary(), title_justify="left", expand=False)
        for col in ("run", "steps", "last eval", "steps/s"):
            table.add_column(col)
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
            self._live.update(self._table())
            self._live.stop()
