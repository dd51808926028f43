"""Holm's step-down adjustment for a family of p-values (one candidate against several
baselines).

Why: each comparison alone keeps its false-verdict rate at alpha, but with k baselines the
chance that at least one verdict is false grows towards k * alpha. Holm 1979, "A simple
sequentially rejective multiple test procedure" (Scandinavian Journal of Statistics 6(2)),
keeps that family-wise rate at alpha under any dependence between the tests, and rejects at
least as much as Bonferroni.

Adjusted p-values (Wright 1992, "Adjusted P-values for simultaneous inference", Biometrics
48(4)): with the p-values sorted ``p_(1) <= ... <= p_(k)``,
``p~_(i) = max_{j <= i} min(1, (k - j + 1) p_(j))``; hypothesis i is rejected at alpha exactly
when ``p~_i <= alpha``, which is Holm's sequential rule.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class HolmResult:
    """Adjusted p-values in the input order and which hypotheses are rejected at ``alpha``."""

    adjusted: np.ndarray
    rejected: np.ndarray
    alpha: float


def holm_adjust(p_values: Sequence[float] | np.ndarray) -> np.ndarray:
    """Holm-adjusted p-values (step-down, monotone in the sorted order), in input order."""
    p = np.asarray(p_values, dtype=float).ravel()
    if p.size == 0:
        return p
    if np.any(~np.isfinite(p)) or np.any((p < 0) | (p > 1)):
        raise ValueError("p-values must lie in [0, 1]")
    order = np.argsort(p, kind="stable")
    k = p.size
    scaled = np.minimum(1.0, (k - np.arange(k)) * p[order])
    adjusted = np.empty(k)
    adjusted[order] = np.maximum.accumulate(scaled)
    return adjusted


def holm(p_values: Sequence[float] | np.ndarray, alpha: float = 0.05) -> HolmResult:
    """Holm's procedure at family-wise level ``alpha``: adjusted p-values and rejections."""
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must be in (0, 1) (got {alpha})")
    adjusted = holm_adjust(p_values)
    return HolmResult(adjusted, adjusted <= alpha, alpha)
