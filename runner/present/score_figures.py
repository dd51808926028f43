"""Figures of final scores: every run as a dot beside its agent's aggregates
(``agent_scores``), and the probability that one agent's run beats another's
(``head_to_head``)."""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib import colormaps
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle
from seedsweep.runner.present import text
from seedsweep.runner.present.figure_parts import (
    DOT_SIZE_PT,
    GRID,
    env_marker,
    legend_below,
    level_handles,
    level_lines,
    limits_with,
    pack_offsets,
)

SWARM_CENTRE, SWARM_HALF = -0.13, 0.22  # dots sit left of the agent's tick ...
STAT_X = {"iqm": 0.2, "mean": 0.32, "median": 0.42}  # ... the aggregates to its right
INK = "#333333"


def _runs_by_agent(data: Any, agent: str) -> tuple[np.ndarray, list[str]]:
    runs = [r for r in data.runs if r.label == agent]
    return (np.array([data.run_scores[r.run_id][1] for r in runs], dtype=float),
            [r.env_key for r in runs])


def _dots(ax: Any, x0: float, values: np.ndarray, envs: list[str], all_envs: list[str],
          colour: str, lim: tuple[float, float], axes_h_in: float, gid: str) -> None:
    """One dot per run, packed sideways where values are close; marker shape = env."""
    step_value = (DOT_SIZE_PT * 1.1 / 72.0) / axes_h_in * (lim[1] - lim[0])
    offsets = pack_offsets(values, step_value, 0.075, SWARM_HALF)
    for env in all_envs:
        pick = np.array([e == env for e in envs], dtype=bool)
        if not pick.any():
            continue
        ax.scatter(x0 + SWARM_CENTRE + offsets[pick], values[pick], s=DOT_SIZE_PT ** 2,
                   marker=env_marker(all_envs, env), facecolor=colour, edgecolor=INK,
                   linewidth=0.6, alpha=0.85, zorder=3, gid=f"{gid}:{env}")


def _interval_glyph(ax: Any, x: float, iv: Any, colour: str, headline: bool,
                    marker: str) -> None:
    if headline:
        ax.plot([x, x], [iv.low, iv.high], color=colour, lw=5, solid_capstyle="butt",
                zorder=2)
        ax.plot([x], [iv.point], marker="D", ms=7.5, mfc="white", mec=INK, mew=1.2, zorder=4)
    else:
        ax.plot([x, x], [iv.low, iv.high], color=INK, lw=1.1, zorder=2)
        ax.plot([x], [iv.point], marker=marker, ms=5, mfc="white", mec=INK, mew=1.0, zorder=4)
    if iv.low == iv.high:
        ax.annotate("no spread", (x, iv.low), xytext=(0, -9), textcoords="offset points",
                    ha="center", va="top", fontsize=6.5, color=INK)


def agent_scores(data: Any, colours: dict[str, str]) -> Figure:
    """Top: every run's normalised score as a dot (shape = env) beside the agent's IQM (thick
    bar, diamond), mean (circle) and median (square, omitted when it equals the mean) with
    their intervals. Bottom: each run's shortfall below the reference, max(1 - x, 0), beside
    the optimality gap with its interval (lower is better)."""
    agents, envs = data.agents, data.envs
    shown = text.shown_statistics(len(envs))
    width = max(6.4, 1.15 * len(agents) + 2.0)
    heights = (3.5, 1.7)
    fig = Figure(figsize=(width, sum(heights) + 1.1), layout="constrained")
    top, bottom = fig.subplots(2, 1, sharex=True, height_ratios=heights)

    scores = {a: _runs_by_agent(data, a) for a in agents}
    values = [v for a in agents for v in scores[a][0]]
    values += [getattr(data.aggregates[a][s], k) for a in agents for s in ("iqm", "mean")
               for k in ("low", "high")]
    lim = limits_with(values, (0.0, 1.0))
    gaps = {a: np.maximum(1.0 - scores[a][0], 0.0) for a in agents}
    gap_values = [v for a in agents for v in gaps[a]]
    gap_values += [data.aggregates[a]["optimality_gap"].high for a in agents]
    gap_lim = limits_with(gap_values, (0.0, 1.0))

    for i, a in enumerate(agents):
        colour = colours[a]
        _dots(top, i, scores[a][0], scores[a][1], envs, colour, lim, heights[0] * 0.8,
              f"runs:{a}")
        for stat in ("iqm", "mean", "median"):
            if stat in shown:
                _interval_glyph(top, i + STAT_X[stat], data.aggregates[a][stat], colour,
                                stat == "iqm", "o" if stat == "mean" else "s")
        _dots(bottom, i, gaps[a], scores[a][1], envs, colour, gap_lim, heights[1] * 0.8,
              f"shortfall:{a}")
        _interval_glyph(bottom, i + STAT_X["iqm"], data.aggregates[a]["optimality_gap"],
                        colour, True, "D")

    level_lines(top, 0.0, 1.0)
    top.set_ylim(*lim)
    top.set_ylabel("normalised score\n(0 = random, 1 = reference)")
    top.set_title("Final score of every run, and each agent's aggregates", loc="left")
    bottom.set_ylim(*gap_lim)
    bottom.set_ylabel("shortfall below\nthe reference")
    bottom.set_title("Optimality gap: mean shortfall (lower is better)", loc="left")
    for ax in (top, bottom):
        ax.grid(axis="y", **GRID)
        ax.set_xlim(-0.6, len(agents) - 0.4)
    bottom.set_xticks(range(len(agents)), agents)
    if max((len(a) for a in agents), default=0) > 12:
        bottom.tick_params(axis="x", labelrotation=25)
        for label in bottom.get_xticklabels():
            label.set_horizontalalignment("right")

    conf = text.ci_label(data.options["confidence"])
    handles = [Line2D([], [], ls="", marker=env_marker(envs, e), mfc="#bbbbbb", mec=INK,
                      ms=5.5, label=f"run on {e}") for e in envs]
    handles += [Line2D([], [], color="#999999", lw=5, marker="D", ms=7, mfc="white",
                       mec=INK, label=f"IQM, {conf}"),
                Line2D([], [], color=INK, lw=1.1, marker="o", ms=5, mfc="white", mec=INK,
                       label=f"mean, {conf}")]
    if "median" in shown:
        handles.append(Line2D([], [], color=INK, lw=1.1, marker="s", ms=5, mfc="white",
                              mec=INK, label=f"median, {conf}"))
    handles += level_handles("random agent (0)", "reference (1)")
    legend_below(fig, handles, ncols=min(len(handles), 4))
    return fig


def _pair_table(data: Any) -> dict[tuple[str, str], dict[str, float]]:
    return {(p["x"], p["y"]): p for p in data.improvement}


def head_to_head(data: Any, colours: dict[str, str]) -> Figure:
    """A triangle of cells, one per pair of agents: P(row agent's run > column agent's
    run) with its interval. Agents are ordered by IQM, best first, so the cells read "the
    better one wins with probability ...". Cells whose interval includes 0.5 are hatched."""
    order = sorted(data.agents, key=lambda a: -data.aggregates[a]["iqm"].point)
    n = len(order)
    if n < 2:
        fig = Figure(figsize=(5, 1.2), layout="constrained")
        ax = fig.subplots()
        ax.axis("off")
        ax.text(0.5, 0.5, "one agent: no pair to compare", ha="center", va="center")
        return fig
    pairs = _pair_table(data)
    cell_w, cell_h = 1.35, 0.72
    fig = Figure(figsize=(1.9 + cell_w * (n - 1) + 1.1, 0.9 + cell_h * (n - 1) + 0.6),
                 layout="constrained")
    ax = fig.subplots()
    cmap, norm = _diverging(), Normalize(0.0, 1.0)
    for r, row in enumerate(order[:-1]):
        for c in range(r, n - 1):
            col = order[c + 1]
            p = pairs[(row, col)]
            unclear = p["low"] <= 0.5 <= p["high"]
            face = "white" if unclear else cmap(norm(p["point"]))
            if unclear:  # a hatch takes the patch's edge colour: a hatched patch, then a border
                ax.add_patch(Rectangle((c, r), 1, 1, facecolor="white", edgecolor="#c4c4c4",
                                       lw=0, hatch="///"))
            ax.add_patch(Rectangle((c, r), 1, 1, facecolor="none" if unclear else face,
                                   edgecolor="white", lw=2, gid=f"pair:{row}:{col}"))
            ink = "white" if not unclear and abs(p["point"] - 0.5) > 0.3 else "#222222"
            ax.text(c + 0.5, r + 0.42, f"{p['point']:.2f}", ha="center", va="center",
                    fontsize=10.5, fontweight="bold", color=ink,
                    bbox={"facecolor": "white", "edgecolor": "none", "pad": 1} if unclear
                    else None)
            ax.text(c + 0.5, r + 0.74, f"[{p['low']:.2f}, {p['high']:.2f}]", ha="center",
                    va="center", fontsize=7.5, color=ink,
                    bbox={"facecolor": "white", "edgecolor": "none", "pad": 1} if unclear
                    else None)
    ax.set_xlim(0, n - 1)
    ax.set_ylim(n - 1, 0)
    ax.set_xticks(np.arange(n - 1) + 0.5, order[1:])
    ax.set_yticks(np.arange(n - 1) + 0.5, order[:-1])
    ax.xaxis.tick_top()
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    ax.set_xlabel("column agent")
    ax.set_ylabel("row agent")
    ax.set_title(f"P(run of row agent > run of column agent), {text.ci_label(_conf(data))}",
                 loc="left", pad=24)
    bar = fig.colorbar(ScalarMappable(norm=norm, cmap=cmap), ax=ax, location="right",
                       shrink=0.9, aspect=14, ticks=[0, 0.25, 0.5, 0.75, 1])
    bar.set_label("P (0.5 = no difference)")
    hatch = Rectangle((0, 0), 1, 1, facecolor="white", edgecolor="#8a8a8a", hatch="///",
                      label="interval includes 0.5: no clear winner")
    legend_below(fig, [hatch], ncols=1)
    return fig


def _conf(data: Any) -> float:
    return float(data.options["confidence"])


def _diverging() -> Any:
    """ColorBrewer's purple-orange diverging scheme (Harrower and Brewer 2003), which stays
    readable with the common colour-vision deficiencies; white at 0.5."""
    return colormaps["PuOr_r"]
