"""MLP builder with seeded initialisation, and a numpy view of an MLP for cheap acting.

Acting one observation at a time through eager torch costs tens of microseconds of
dispatch per layer; the same forward pass in numpy on views of the very same parameter
storage costs a few. The views share memory with the torch parameters, so in-place
optimiser steps and ``load_state_dict`` are seen at once, with no copy.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import torch
from torch import nn

ACTIVATIONS = {"relu": nn.ReLU, "tanh": nn.Tanh}


def mlp(
    in_dim: int,
    hidden: Sequence[int],
    out_dim: int,
    generator: torch.Generator,
    activation: str = "relu",
    init: str = "default",
    out_gain: float = 1.0,
) -> nn.Sequential:
    """A fully connected network ``in_dim -> hidden... -> out_dim``.

    ``init="default"`` reproduces torch's ``nn.Linear`` initialisation, ``"orthogonal"``
    uses orthogonal weights (gain sqrt(2) on hidden layers, ``out_gain`` on the last) and
    zero biases, common for policy-gradient methods. Both draw only from ``generator``.
    """
    if activation not in ACTIVATIONS:
        raise ValueError(f"activation must be one of {sorted(ACTIVATIONS)}, got {activation!r}")
    dims = [in_dim, *hidden, out_dim]
    layers: list[nn.Module] = []
    for i, (a, b) in enumerate(zip(dims[:-1], dims[1:], strict=True)):
        linear = nn.utils.skip_init(nn.Linear, a, b)  # no draw from torch's global RNG
        last = i == len(dims) - 2
        _init_linear(linear, generator, init, out_gain if last else math.sqrt(2.0))
        layers.append(linear)
        if not last:
            layers.append(ACTIVATIONS[activation]())
    return nn.Sequential(*layers)


def _init_linear(layer: nn.Linear, gen: torch.Generator, init: str, gain: float) -> None:
    with torch.no_grad():
        if init == "default":
            nn.init.kaiming_uniform_(layer.weight, a=math.sqrt(5), generator=gen)
            bound = 1.0 / math.sqrt(layer.in_features)
            nn.init.uniform_(layer.bias, -bound, bound, generator=gen)
        elif init == "orthogonal":
            nn.init.orthogonal_(layer.weight, gain=gain, generator=gen)
            nn.init.zeros_(layer.bias)
        else:
            raise ValueError(f"init must be 'default' or 'orthogonal', got {init!r}")


class NumpyMLP:
    """Forward pass of an ``mlp`` in numpy, reading the live torch parameters."""

    def __init__(self, net: nn.Sequential):
        self._layers: list[tuple[np.ndarray, np.ndarray]] = []
        self._acts: list[str | None] = []
        modules = list(net)
        for i, m in enumerate(modules):
            if isinstance(m, nn.Linear):
                w = m.weight.detach().numpy()
                b = m.bias.detach().numpy()
                self._layers.append((w.T, b))  # a transposed view, still shared memory
                nxt = modules[i + 1] if i + 1 < len(modules) else None
                self._acts.append(
                    "relu" if isinstance(nxt, nn.ReLU) else "tanh" if isinstance(nxt, nn.Tanh)
                    else None
                )

    def __call__(self, x: np.ndarray) -> np.ndarray:
        h = np.asarray(x, dtype=np.float32)
        for (wt, b), act in zip(self._layers, self._acts, strict=True):
            h = h @ wt + b
            if act == "relu":
                np.maximum(h, 0.0, out=h)
            elif act == "tanh":
                np.tanh(h, out=h)
        return h

    def forward_train(self, x: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
        """Forward pass that keeps each layer's input, for :meth:`backward`."""
        h = np.asarray(x, dtype=np.float32)
        inputs = []
        for (wt, b), act in zip(self._layers, self._acts, strict=True):
            inputs.append(h)
            h = h @ wt + b
            if act == "relu":
                np.maximum(h, 0.0, out=h)
            elif act == "tanh":
                np.tanh(h, out=h)
        return h, inputs

    def backward(self, inputs: list[np.ndarray], grad_out: np.ndarray,
                 grads: list[tuple[np.ndarray, np.ndarray]]) -> None:
        """Back-propagate ``grad_out`` (d loss / d output) and write d loss / d W, d loss / d b
        of every layer into ``grads`` (numpy views of the torch ``.grad`` tensors).

        The same arithmetic autograd does for ``Linear`` + ReLU/tanh, without its per-op
        dispatch; tests check it against ``torch.autograd``.
        """
        g = np.asarray(grad_out, dtype=np.float32)
        for i in range(len(self._layers) - 1, -1, -1):
            wt, _ = self._layers[i]
            dw, db = grads[i]
            h_in = inputs[i]
            np.matmul(g.T, h_in, out=dw)
            np.sum(g, axis=0, out=db)
            if i == 0:
                break
            g = g @ wt.T
            act = self._acts[i - 1]
            if act == "relu":
                g *= inputs[i] > 0  # the next layer's input is relu(z): > 0 exactly where z > 0
            elif act == "tanh":
                g *= 1.0 - inputs[i] * inputs[i]

    def grad_views(self, net: nn.Sequential) -> list[tuple[np.ndarray, np.ndarray]]:
        """Numpy views of the ``.grad`` of each Linear of ``net`` (allocated if missing)."""
        views = []
        for m in net:
            if isinstance(m, nn.Linear):
                for p in (m.weight, m.bias):
                    if p.grad is None:
                        p.grad = torch.zeros_like(p)
                views.append((m.weight.grad.numpy(), m.bias.grad.numpy()))
        return views


def flat_dim(space) -> int:
    """Length of the flat float vector an MLP sees for a Box observation space."""
    shape = getattr(space, "shape", None)
    if not shape:
        raise ValueError(
            f"observation space {space} is not a Box; add the one_hot wrapper for Discrete"
        )
    return int(np.prod(shape))


def mlp_bytes(in_dim: int, hidden: Sequence[int], out_dim: int, copies: int = 1) -> int:
    """Bytes of ``copies`` float32 copies of an :func:`mlp`'s parameters (the network, its
    gradients, Adam's two moments, a target network ...): for memory estimates."""
    dims = [int(in_dim), *(int(h) for h in hidden), int(out_dim)]
    params = sum(a * b + b for a, b in zip(dims[:-1], dims[1:], strict=True))
    return 4 * params * copies
