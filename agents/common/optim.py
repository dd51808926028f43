"""Optimiser set-up shared by the agents: Adam on torch's fast multi-tensor paths."""

from __future__ import annotations

from collections.abc import Iterable

import torch


def adam(params: Iterable[torch.nn.Parameter], lr: float, eps: float = 1e-8) -> torch.optim.Adam:
    """Adam with the fused CPU kernel where this torch has it, else the foreach path.

    The default (single-tensor) path loops in Python over parameters; on small networks
    that loop is a large share of an update step.
    """
    params = list(params)
    try:
        return torch.optim.Adam(params, lr=lr, eps=eps, fused=True)
    except (RuntimeError, TypeError):
        return torch.optim.Adam(params, lr=lr, eps=eps, foreach=True)


def clip_grad_norm(params: Iterable[torch.nn.Parameter], max_norm: float | None) -> float:
    """Clip gradients to ``max_norm`` (no-op when None or <= 0); returns the norm before."""
    params = [p for p in params if p.grad is not None]
    if not max_norm or max_norm <= 0:
        return float("nan")
    return float(torch.nn.utils.clip_grad_norm_(params, max_norm, foreach=True))
