"""The sensitivity figure: an agent's score against the value of one swept key."""

from __future__ import annotations

import math
from typing import Any

from matplotlib.figure import Figure
from matplotlib.ticker import NullFormatter


def sensitivity(data: Any, colours: dict[str, str]) -> Figure:
    """Per swept key: the IQM of normalised scores with its interval at each value, and each
    run's score as a dot (a log axis for numeric keys spanning more than 10x)."""
    tables = data.sensitivity
    cols = min(3, len(tables))
    rows = math.ceil(len(tables) / cols)
    fig = Figure(figsize=(4.2 * cols, 3.2 * rows), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= len(tables):
            ax.set_visible(False)
            continue
        t = tables[k]
        colour = colours.get(t.agent) or next((c for a, c in colours.items()
                                              if a.split("[")[0] == t.agent), "#332288")
        x = [float(r.value) for r in t.rows] if t.numeric else list(range(len(t.rows)))
        for xi, r in zip(x, t.rows, strict=True):
            ax.plot([xi, xi], [r.iqm.low, r.iqm.high], color=colour, lw=8, alpha=0.3,
                    solid_capstyle="butt", zorder=1)
            ax.plot([xi] * len(r.scores), r.scores, "o", color=colour, mec="black", mew=0.4,
                    alpha=0.8, ms=4, lw=0, zorder=3)
        ax.plot(x, [r.iqm.point for r in t.rows], "-", marker="_", color="black", ms=12,
                lw=0.8 if t.numeric and not t.marginal else 0)
        if t.log_axis:
            ax.set_xscale("log")
            ax.xaxis.set_minor_formatter(NullFormatter())  # decade labels only
        if not t.numeric:
            ax.set_xticks(x, [r.text for r in t.rows], rotation=30, ha="right")
        ax.set_title(t.title, fontsize=8)
        ax.set_xlabel(t.key)
        ax.set_ylabel("normalised score (IQM, runs)")
        ax.grid(alpha=0.3)
    return fig
