"""Policy heads: the action distributions both policy-gradient agents sample from and score.

A policy network emits one flat vector per observation; a :class:`PolicyHead` turns it into
a :class:`Categorical` (Discrete actions) or a :class:`DiagGaussian` (Box actions). The
Gaussian's log-prob is always that of the action the environment actually received:

* ``squash="clip"``: the sample is clipped to the Box bounds, so the action has a point mass
  at each bound. Its exact log-likelihood is the Gaussian density inside the bounds and the
  log tail mass ``log Φ`` at a bound (the clipped-action policy gradient, Fujita & Maeda
  2018). It needs only the clipped action, so nothing extra has to be stored.
* ``squash="tanh"``: ``a = c + h·tanh(u)`` with centre ``c`` and half-width ``h`` of the
  bounds; ``log π(a) = log N(u) − Σ log(h·(1 − tanh²u))`` (change of variables, as in
  Haarnoja et al. 2018, appendix C). The pre-squash ``u`` is kept from sampling because
  ``atanh`` of a saturated float32 action loses it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import torch
from gymnasium import spaces
from seedsweep.configs.checks import require
from torch import nn

LOG_STD_MIN, LOG_STD_MAX = -5.0, 2.0  # clamp of the log-std (common practice, no source)
_HALF_LOG_2PI = 0.5 * math.log(2.0 * math.pi)
_ATANH_EDGE = 1.0 - 1e-6  # fallback atanh keeps |y| below this (float32 resolution near 1)

Squash = Literal["clip", "tanh"]
LogStdMode = Literal["state_independent", "state_dependent"]


class Categorical:
    """Softmax distribution over ``n`` actions, from unnormalised logits ``(..., n)``."""

    def __init__(self, logits: torch.Tensor):
        self.log_probs = torch.log_softmax(logits, dim=-1)

    def sample(self, generator: torch.Generator) -> torch.Tensor:
        probs = self.log_probs.exp().reshape(-1, self.log_probs.shape[-1])
        idx = torch.multinomial(probs, 1, generator=generator)
        return idx.reshape(self.log_probs.shape[:-1])

    def log_prob(
        self, actions: torch.Tensor, pre_squash: torch.Tensor | None = None
    ) -> torch.Tensor:
        """Log-probability of integer ``actions`` (``pre_squash`` is unused, for symmetry)."""
        return self.log_probs.gather(-1, actions.long().unsqueeze(-1)).squeeze(-1)

    def entropy(self) -> torch.Tensor:
        p = self.log_probs.exp()
        return -torch.where(p > 0, p * self.log_probs, torch.zeros_like(p)).sum(-1)

    def mode(self) -> torch.Tensor:
        return self.log_probs.argmax(-1)


class DiagGaussian:
    """Diagonal Gaussian over ``u`` with the action ``a = squash(u)`` inside ``[low, high]``."""

    def __init__(
        self,
        mean: torch.Tensor,
        log_std: torch.Tensor,
        low: torch.Tensor,
        high: torch.Tensor,
        squash: Squash,
    ):
        if squash not in ("clip", "tanh"):
            raise ValueError(f"squash must be 'clip' or 'tanh', got {squash!r}")
        self.mean = mean
        self.log_std = log_std
        self.std = log_std.exp()
        self.low = low
        self.high = high
        self.squash = squash

    # -- sampling and the deterministic action -------------------------------------------
    def sample(self, generator: torch.Generator) -> tuple[torch.Tensor, torch.Tensor]:
        """``(action, pre_squash)``: the in-bounds action and the Gaussian sample behind it."""
        noise = torch.randn(self.mean.shape, generator=generator, dtype=self.mean.dtype)
        u = self.mean + self.std * noise
        return self.squash_action(u), u

    def mode(self) -> torch.Tensor:
        """The mean, clipped or squashed to the bounds (the deterministic evaluation action)."""
        return self.squash_action(self.mean)

    def squash_action(self, u: torch.Tensor) -> torch.Tensor:
        if self.squash == "clip":
            return torch.maximum(torch.minimum(u, self.high), self.low)
        centre, half = self._centre_half()
        return centre + half * torch.tanh(u)

    def unsquash(self, action: torch.Tensor) -> torch.Tensor:
        """Best-effort inverse of the tanh squash (clamped just inside the bounds)."""
        centre, half = self._centre_half()
        y = ((action - centre) / half).clamp(-_ATANH_EDGE, _ATANH_EDGE)
        return torch.atanh(y)

    # -- scoring ----------------------------------------------------------------------------
    def log_prob(
        self, action: torch.Tensor | None, pre_squash: torch.Tensor | None = None
    ) -> torch.Tensor:
        """Log-likelihood of the env action, summed over action dimensions.

        For ``tanh`` pass ``pre_squash`` when known (``action`` is then not needed); for
        ``clip`` only ``action`` is used.
        """
        if self.squash == "clip":
            if action is None:
                raise ValueError("clip log_prob needs the (clipped) action")
            return self._clipped_log_prob(action).sum(-1)
        u = pre_squash if pre_squash is not None else self.unsquash(action)
        _, half = self._centre_half()
        log_det = torch.log(half) + 2.0 * (math.log(2.0) - u - nn.functional.softplus(-2.0 * u))
        return (self._normal_log_pdf(u) - log_det).sum(-1)

    def entropy(self) -> torch.Tensor:
        """Entropy of the Gaussian before clipping/squashing (closed form; used as the bonus).

        The clipped or squashed action's own entropy has no closed form; the Gaussian's is
        the usual regulariser of the spread.
        """
        return (0.5 + _HALF_LOG_2PI + self.log_std).sum(-1).expand(self.mean.shape[:-1])

    # -- internals ----------------------------------------------------------------------------
    def _normal_log_pdf(self, x: torch.Tensor) -> torch.Tensor:
        z = (x - self.mean) / self.std
        return -0.5 * z * z - self.log_std - _HALF_LOG_2PI

    def _clipped_log_prob(self, action: torch.Tensor) -> torch.Tensor:
        finite_low = torch.isfinite(self.low)
        finite_high = torch.isfinite(self.high)
        safe_low = torch.where(finite_low, self.low, torch.zeros_like(self.low))
        safe_high = torch.where(finite_high, self.high, torch.zeros_like(self.high))
        at_low = finite_low & (action <= safe_low)
        at_high = finite_high & (action >= safe_high)
        log_mass_low = torch.special.log_ndtr((safe_low - self.mean) / self.std)
        log_mass_high = torch.special.log_ndtr((self.mean - safe_high) / self.std)
        inside = self._normal_log_pdf(action)
        return torch.where(at_low, log_mass_low, torch.where(at_high, log_mass_high, inside))

    def _centre_half(self) -> tuple[torch.Tensor, torch.Tensor]:
        return 0.5 * (self.high + self.low), 0.5 * (self.high - self.low)


Distribution = Categorical | DiagGaussian


class PolicyHead(nn.Module):
    """Maps a policy network's output to the action distribution for ``action_space``.

    The network must emit :attr:`out_dim` numbers: ``n`` logits for ``Discrete(n)``; for a
    1-D ``Box`` of ``d`` dims, ``d`` means, plus ``d`` log-std offsets when the log-std is
    state-dependent. A state-independent log-std is a learned parameter of this head.
    """

    def __init__(
        self,
        action_space: spaces.Space,
        log_std: LogStdMode = "state_independent",
        gaussian_log_std_start: float = 0.0,
        squash: Squash = "clip",
    ):
        super().__init__()
        self.discrete = isinstance(action_space, spaces.Discrete)
        self.squash: Squash = squash
        self.gaussian_log_std_start = float(gaussian_log_std_start)
        self.state_dependent = log_std == "state_dependent"
        if self.discrete:
            self.out_dim = int(action_space.n)
            self.action_dim = 0
            return
        if not isinstance(action_space, spaces.Box) or len(action_space.shape) != 1:
            raise ValueError(f"need a Discrete or a 1-D Box action space, got {action_space}")
        if log_std not in ("state_independent", "state_dependent"):
            raise ValueError(f"log_std must be state_independent or state_dependent: {log_std!r}")
        low = np.asarray(action_space.low, dtype=np.float32)
        high = np.asarray(action_space.high, dtype=np.float32)
        if squash == "tanh" and not (np.isfinite(low).all() and np.isfinite(high).all()):
            raise ValueError("squash 'tanh' needs finite Box bounds; use 'clip'")
        self.action_dim = int(action_space.shape[0])
        self.out_dim = 2 * self.action_dim if self.state_dependent else self.action_dim
        self.register_buffer("low", torch.from_numpy(low))
        self.register_buffer("high", torch.from_numpy(high))
        if not self.state_dependent:
            self.log_std = nn.Parameter(torch.full((self.action_dim,), self.gaussian_log_std_start))

    def forward(self, out: torch.Tensor) -> Distribution:
        if self.discrete:
            return Categorical(out)
        d = self.action_dim
        mean = out[..., :d]
        if self.state_dependent:
            log_std = self.gaussian_log_std_start + out[..., d:]
        else:
            log_std = self.log_std.expand_as(mean)
        log_std = log_std.clamp(LOG_STD_MIN, LOG_STD_MAX)
        return DiagGaussian(mean, log_std, self.low, self.high, self.squash)


def select_actions(
    head: PolicyHead, out: np.ndarray, explore: bool, generator: torch.Generator
) -> tuple[np.ndarray, np.ndarray | None]:
    """Env actions for a batch of network outputs, and the tanh pre-squash sample if any.

    Sampling draws only from ``generator``; ``explore=False`` gives the mode.
    """
    with torch.inference_mode():
        dist = head(torch.from_numpy(np.ascontiguousarray(out, dtype=np.float32)))
        if isinstance(dist, Categorical):
            a = dist.sample(generator) if explore else dist.mode()
            return a.numpy().astype(np.int64), None
        if not explore:
            return dist.mode().numpy(), None
        action, u = dist.sample(generator)
        pre = u.numpy() if dist.squash == "tanh" else None
        return action.numpy(), pre


class ActionSampler:
    """Acting from numpy network outputs, remembering the pre-squash sample of the last
    exploring batch so the learner scores exactly what was sampled."""

    def __init__(self, head: PolicyHead, generator: torch.Generator):
        self.head = head
        self.generator = generator
        self._pending: tuple[np.ndarray, np.ndarray] | None = None

    @property
    def needs_pre_squash(self) -> bool:
        return not self.head.discrete and self.head.squash == "tanh"

    def act(self, out: np.ndarray, explore: bool) -> np.ndarray:
        actions, pre = select_actions(self.head, out, explore, self.generator)
        if explore and pre is not None:
            self._pending = (actions.copy(), pre.copy())
        return actions

    def pre_squash_for(self, actions: np.ndarray) -> np.ndarray | None:
        """The Gaussian sample behind ``actions`` (tanh only): remembered, else ``atanh``."""
        if not self.needs_pre_squash:
            return None
        actions = np.asarray(actions, dtype=np.float32)
        if self._pending is not None:
            known, pre = self._pending
            if known.shape == actions.shape and np.array_equal(known, actions):
                return pre
        with torch.inference_mode():
            dist = self.head(torch.zeros(actions.shape[:-1] + (self.head.out_dim,)))
            return dist.unsquash(torch.from_numpy(actions)).numpy()

    def state_dict(self) -> dict:
        if self._pending is None:
            return {"pending": None}
        return {"pending": [torch.from_numpy(x.copy()) for x in self._pending]}

    def load_state_dict(self, state: dict) -> None:
        p = state["pending"]
        self._pending = None if p is None else (p[0].numpy().copy(), p[1].numpy().copy())


# Output-layer gains of policy-gradient networks: a near-uniform initial policy and a value
# head at unit scale (common practice, no source).
POLICY_OUT_GAIN = 0.01
VALUE_OUT_GAIN = 1.0


def policy_supports(action_space: spaces.Space) -> bool:
    """Discrete (categorical policy), or a 1-D Box (one Gaussian dimension per component)."""
    if isinstance(action_space, spaces.Box):
        return len(action_space.shape) == 1
    return isinstance(action_space, spaces.Discrete)


@dataclass
class PolicyNetworkConfig:
    """Network, policy-head and clipping settings shared by the policy-gradient agents'
    Config dataclasses (which inherit these fields and call :meth:`check_network`)."""

    grad_clip_norm: float | None = None
    hidden: list[int] = field(default_factory=lambda: [64, 64])
    activation: Literal["tanh", "relu"] = "tanh"
    init: Literal["orthogonal", "default"] = "orthogonal"
    gaussian_std: LogStdMode = "state_independent"
    gaussian_log_std_start: float = 0.0
    gaussian_squash: Squash = "clip"

    def check_network(self) -> None:
        require("grad_clip_norm", self.grad_clip_norm,
                self.grad_clip_norm is None
                or (math.isfinite(self.grad_clip_norm) and self.grad_clip_norm > 0),
                "a finite number > 0, or null (no clipping)")
        require("hidden", self.hidden, all(h >= 1 for h in self.hidden),
                "a list of layer widths >= 1")
