"""Pieces every report figure uses: the style, dot packing, the random and reference levels,
legends outside the data, axis limits that keep the levels in view.

Figures are built on ``matplotlib.figure.Figure`` objects (never pyplot's global state).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from seedsweep.runner.present.palette import RANDOM_GREY, REFERENCE_INK  # noqa: E402

RC = {"svg.hashsalt": "seedsweep", "font.size": 9, "axes.spines.top": False,
      "axes.spines.right": False, "axes.titlesize": 9.5, "axes.titleweight": "bold",
      "legend.fontsize": 8, "legend.frameon": False, "axes.edgecolor": "#555555",
      "axes.labelcolor": "#222222", "xtick.color": "#444444", "ytick.color": "#444444"}
ENV_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h", "<", ">")
DOT_SIZE_PT = 5.0  # diameter of one run's dot, in points
GRID = {"color": "#dddddd", "lw": 0.6}


def env_marker(envs: Sequence[str], env: str) -> str:
    return ENV_MARKERS[list(envs).index(env) % len(ENV_MARKERS)]


def pack_offsets(values: np.ndarray, step_value: float, step_offset: float,
                 max_offset: float) -> np.ndarray:
    """Side offsets that keep dots of nearly equal value apart, so n runs show as n dots.

    Dots are placed in order of value; each takes the free offset nearest the centre line
    (0, +1, -1, +2, ... steps) among those not used by a dot within ``step_value``. When a
    cluster needs more room than ``max_offset`` the steps shrink for the whole group, so
    dots may touch but never sit exactly on each other. Written here rather than taken from
    a plotting add-on: it is a few lines, and the add-ons that have it bring a whole
    figure-level interface with them."""
    values = np.asarray(values, dtype=float)
    order = np.lexsort((np.arange(values.size), values))
    slots = np.zeros(values.size, dtype=int)
    placed: list[tuple[float, int]] = []
    for i in order:
        near = {s for v, s in placed if abs(v - values[i]) < step_value}
        k = 0
        while k in near:
            k = -k if k > 0 else -k + 1  # 0, 1, -1, 2, -2, ...
        slots[i] = k
        placed.append((values[i], k))
    widest = np.abs(slots).max(initial=0)
    step = step_offset if widest * step_offset <= max_offset else max_offset / widest
    return slots * step


def level_lines(ax: Any, random: float | None, reference: float | None,
                random_band: tuple[float, float] | None = None) -> None:
    """The random level (grey, with its interval as a band) and the reference (dashed)."""
    if random_band is not None and random_band[1] > random_band[0]:
        ax.axhspan(*random_band, color=RANDOM_GREY, alpha=0.22, lw=0, zorder=0.5)
    if random is not None:
        ax.axhline(random, color=RANDOM_GREY, lw=1.3, zorder=0.6)
    if reference is not None:
        ax.axhline(reference, color=REFERENCE_INK, lw=1.1, ls=(0, (5, 3)), zorder=0.6)


def level_handles(random_label: str = "random agent",
                  reference_label: str = "reference") -> list[Line2D]:
    return [Line2D([], [], color=RANDOM_GREY, lw=1.3, label=random_label),
            Line2D([], [], color=REFERENCE_INK, lw=1.1, ls=(0, (5, 3)),
                   label=reference_label)]


def limits_with(values: Iterable[float], keep: Iterable[float], pad: float = 0.06
                ) -> tuple[float, float]:
    """Axis limits around ``values`` that always include every level in ``keep`` with room
    beyond it, so a level at the edge of the data (a random score at the minimum return,
    say) is drawn inside the axes, not on its border."""
    both = np.array([*values, *keep], dtype=float)
    both = both[np.isfinite(both)]
    lo, hi = (float(both.min()), float(both.max())) if both.size else (0.0, 1.0)
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    return lo - pad * span, hi + pad * span


def legend_below(fig: Figure, handles: list[Any], ncols: int | None = None) -> None:
    """One legend for the whole figure, below every axes (it never covers data)."""
    if not handles:
        return
    fig.legend(handles=handles, loc="outside lower center",
               ncols=ncols or min(len(handles), 4), handlelength=1.8, columnspacing=1.4)
