"""How diagnostics are shown: one line each on stderr, ``seedsweep: <message>`` for news
and ``seedsweep: warning: <message>`` for warnings. Results and tables go to stdout.

Every process that runs seedsweep code (the command, each worker, each cluster job) calls
:func:`setup` once; the modules only log through ``logging.getLogger(__name__)``.
"""

from __future__ import annotations

import logging
import sys

ROOT = "seedsweep"


class _OneLine(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        text = record.getMessage()
        if record.levelno >= logging.ERROR:
            return f"seedsweep: error: {text}"
        if record.levelno >= logging.WARNING:
            return f"seedsweep: warning: {text}"
        return f"seedsweep: {text}"


class _CurrentStderr(logging.Handler):
    """Writes to whatever ``sys.stderr`` is at the time (test captures swap it)."""

    def emit(self, record: logging.LogRecord) -> None:
        try:
            print(self.format(record), file=sys.stderr, flush=True)
        except Exception:  # a closed or broken stderr must not fail the run
            self.handleError(record)


def setup(level: int = logging.INFO) -> None:
    """One stderr handler on the ``seedsweep`` logger (idempotent)."""
    logger = logging.getLogger(ROOT)
    logger.setLevel(level)
    logger.propagate = False
    if not any(isinstance(h, _CurrentStderr) for h in logger.handlers):
        handler = _CurrentStderr()
        handler.setFormatter(_OneLine())
        logger.addHandler(handler)
