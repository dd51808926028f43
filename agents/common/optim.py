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
    """Clip gradients to ``max_norm`` (no clipping when None or <= 0); returns the global
    gradient norm before clipping either way."""
    params = [p for p in params if p.grad is not None]
    if not max_norm or max_norm <= 0:
        max_norm = float("inf")
    return float(torch.nn.utils.clip_grad_norm_(params, max_norm, foreach=True))


class FlatParameters:
    """The parameters of some modules laid out in one contiguous tensor, gradients too.

    Each module parameter becomes a view into ``data`` and its ``.grad`` a view into
    ``grad`` (autograd accumulates into an existing ``.grad`` in place). Zeroing, clipping
    and the Adam step then each touch one tensor instead of one per layer, which on small
    networks removes most of the per-update overhead. Results equal the per-parameter
    versions (checked in tests against ``torch.nn.utils.clip_grad_norm_``).
    """

    def __init__(self, *modules: torch.nn.Module):
        params = [p for m in modules for p in m.parameters()]
        total = sum(p.numel() for p in params)
        self.data = torch.zeros(total)
        self.grad = torch.zeros(total)
        offset = 0
        for p in params:
            k = p.numel()
            self.data[offset:offset + k].copy_(p.detach().reshape(-1))
            p.data = self.data[offset:offset + k].view_as(p)
            p.grad = self.grad[offset:offset + k].view_as(p)
            offset += k
        self.param = torch.nn.Parameter(self.data)
        self.param.grad = self.grad

    def clip_grad_norm_(self, max_norm: float | None) -> torch.Tensor:
        """Scale gradients so their global L2 norm is at most ``max_norm``; returns the
        norm before clipping. Same rule as ``torch.nn.utils.clip_grad_norm_``."""
        norm = torch.linalg.vector_norm(self.grad)
        if max_norm:
            self.grad.mul_((max_norm / (norm + 1e-6)).clamp_(max=1.0))
        return norm

    def adam(self, lr: float, eps: float = 1e-8) -> torch.optim.Adam:
        return adam([self.param], lr=lr, eps=eps)
