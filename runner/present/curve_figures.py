"""Figures of curves: the share of runs above each score (``runs_above_threshold``), the
pooled score over training (``score_over_training``) and each env's returns over training
with every run's final score beside them (``curves_per_env``)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import EngFormatter, MaxNLocator
from seedsweep.runner.present import text
from seedsweep.runner.present.figure_parts import (
    DOT_SIZE_PT,
    GRID,
    legend_below,
    level_handles,
    level_lines,
    limits_with,
    pack_offsets,
)
from seedsweep.runner.present.palette import RANDOM_GREY, REFERENCE_INK

INK = "#333333"
BAND_ALPHA = 0.2


def steps_axis(ax: Any, env_steps: bool) -> None:
    """At most 6 ticks; env steps written as 40k, 1.5M (SI prefixes) so they never collide."""
    ax.xaxis.set_major_locator(MaxNLocator(6, steps=[1, 2, 2.5, 5, 10]))
    if env_steps:
        ax.xaxis.set_major_formatter(EngFormatter(sep=""))


def _grid_shape(n: int) -> tuple[int, int]:
    cols = n if n <= 3 else (2 if n == 4 else 3)
    return math.ceil(n / cols), cols


def runs_above_threshold(data: Any, colours: dict[str, str]) -> Figure:
    """One panel per agent: the share of its runs scoring above each normalised score
    (averaged over envs) with its band, the other agents in thin grey for comparison, and
    under the curve one dot per run at its score, so a step of the curve is a run."""
    agents = data.agents
    rows, cols = _grid_shape(len(agents))
    fig = Figure(figsize=(2.9 * cols + 0.4, 2.35 * rows + 0.7), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True, sharey=True)
    strip = (-0.2, -0.05)  # the dots' strip below 0
    for k, ax in enumerate(axes.flat):
        if k >= len(agents):
            ax.set_visible(False)
            continue
        a = agents[k]
        for other in agents:
            if other != a:
                c = data.profiles[other]
                ax.plot(c.x, c.point, color="#b8b8b8", lw=0.9, drawstyle="steps-post",
                        zorder=1)
        c = data.profiles[a]
        ax.fill_between(c.x, c.low, c.high, color=colours[a], alpha=0.28, lw=0, step="post",
                        zorder=2)
        ax.plot(c.x, c.point, color=colours[a], lw=2.0, drawstyle="steps-post", zorder=3)
        runs = [r for r in data.runs if r.label == a]
        values = np.array([data.run_scores[r.run_id][1] for r in runs], dtype=float)
        span = float(c.x[-1] - c.x[0]) or 1.0
        offsets = pack_offsets(values, span * 0.022, 0.035, 0.07)
        ax.scatter(values, (strip[0] + strip[1]) / 2 + offsets, s=16, facecolor=colours[a],
                   edgecolor=INK, lw=0.5, zorder=4, clip_on=False, gid=f"runs:{a}")
        ax.axhline(0.0, color="#999999", lw=0.6)
        for x, ink, ls in ((0.0, RANDOM_GREY, "-"), (1.0, REFERENCE_INK, (0, (5, 3)))):
            ax.axvline(x, color=ink, lw=1.0, ls=ls, zorder=0.5)
        ax.set_ylim(strip[0] - 0.04, 1.04)
        ax.set_yticks([0, 0.25, 0.5, 0.75, 1])
        ax.set_title(a, loc="left", color=INK)
        ax.grid(**GRID)
        if k % cols == 0:
            ax.set_ylabel("share of runs above")
        if k >= len(agents) - cols:
            ax.set_xlabel("normalised score")
            ax.tick_params(axis="x", labelbottom=True)
    conf = text.ci_label(data.options["confidence"])
    handles = [Line2D([], [], color="#777777", lw=2, label="this agent"),
               Patch(facecolor="#777777", alpha=0.28, label=f"band: {conf}"),
               Line2D([], [], color="#b8b8b8", lw=0.9, label="other agents"),
               Line2D([], [], ls="", marker="o", mfc="#bbbbbb", mec=INK, label="one run"),
               *level_handles("random agent (0)", "reference (1)")]
    legend_below(fig, handles, ncols=3)
    return fig


def _label_positions(ys: list[float], min_gap: float) -> list[float]:
    """Spread end-of-line labels apart by at least ``min_gap``, keeping their order."""
    order = np.argsort(ys, kind="stable")
    out = np.array(ys, dtype=float)
    for j in range(1, len(order)):
        prev, cur = order[j - 1], order[j]
        out[cur] = max(out[cur], out[prev] + min_gap)
    return out.tolist()


def score_over_training(data: Any, colours: dict[str, str]) -> Figure:
    """The IQM normalised score over all runs and envs at each evaluation, with its band;
    each line is labelled at its end (no legend box over the curves)."""
    fig = Figure(figsize=(6.8, 3.9), layout="constrained")
    ax = fig.subplots()
    ends, values = [], [0.0, 1.0]
    for a in data.agents:
        c = data.efficiency[a]
        ax.fill_between(c.x, c.low, c.high, color=colours[a], alpha=BAND_ALPHA, lw=0)
        ax.plot(c.x, c.point, color=colours[a], lw=2.0, gid=f"curve:{a}")
        ends.append((float(c.point[-1]), a, colours[a]))
        values += [*c.low, *c.high]
    lim = limits_with(values, (0.0, 1.0))
    level_lines(ax, 0.0, 1.0)
    ends += [(0.0, "random (0)", RANDOM_GREY), (1.0, "reference (1)", REFERENCE_INK)]
    placed = _label_positions([e[0] for e in ends], (lim[1] - lim[0]) * 0.055)
    x_end = float(data.efficiency[data.agents[0]].x[-1]) if data.agents else 1.0
    for (y, label, colour), y_text in zip(ends, placed, strict=True):
        ax.annotate("\u25A0", (x_end, y), xytext=(6, y_text), textcoords=("offset points", "data"),
                    va="center", fontsize=8, color=colour, annotation_clip=False)
        ax.annotate(label, (x_end, y), xytext=(15, y_text), textcoords=("offset points", "data"),
                    va="center", fontsize=8, color=INK, annotation_clip=False)
    ax.set_ylim(*lim)
    ax.set_xlim(float(min(data.efficiency[a].x[0] for a in data.agents)), x_end)
    steps_axis(ax, data.efficiency_x == "env steps")
    ax.set_xlabel(data.efficiency_x)
    ax.set_ylabel("IQM normalised score\n(0 = random, 1 = reference)")
    ax.set_title("All envs pooled: IQM score at each evaluation", loc="left")
    ax.grid(**GRID)
    conf = text.ci_label(data.options["confidence"])
    legend_below(fig, [Patch(facecolor="#777777", alpha=BAND_ALPHA,
                             label=f"band: {conf} of the IQM (runs resampled within each env)")],
                 ncols=1)
    return fig


def _final_strip(ax: Any, data: Any, env: str, colours: dict[str, str],
                 lim: tuple[float, float], axes_h_in: float) -> None:
    """Every run's score (its last evaluation's mean return, or the report's score) as one
    dot per run, one column per agent."""
    step_value = (DOT_SIZE_PT * 1.1 / 72.0) / axes_h_in * (lim[1] - lim[0])
    for k, a in enumerate(data.agents):
        runs = [r for r in data.runs if r.label == a and r.env_key == env]
        values = np.array([data.run_scores[r.run_id][0] for r in runs], dtype=float)
        offsets = pack_offsets(values, step_value, 0.12, 0.36)
        ax.scatter(k + offsets, values, s=DOT_SIZE_PT ** 2, facecolor=colours[a],
                   edgecolor=INK, lw=0.5, zorder=3, gid=f"runs:{env}:{a}")
    ax.set_xlim(-0.6, len(data.agents) - 0.4)
    ax.set_xticks([])
    ax.set_xlabel("score of\neach run", fontsize=7.5)
    ax.tick_params(axis="y", labelleft=False)
    ax.spines["left"].set_visible(False)


def curves_per_env(data: Any, colours: dict[str, str]) -> Figure:
    """Per env: the IQM raw return over seeds at each evaluation with its band, the random
    agent's level (its interval as a grey band) and the reference (dashed), both always in
    view; to the right, each run's score as a dot, one column per agent."""
    envs = data.envs
    cols = min(2, len(envs))
    rows = math.ceil(len(envs) / cols)
    fig = Figure(figsize=(4.6 * cols + 0.3, 2.9 * rows + 0.8), layout="constrained")
    subs = np.atleast_1d(fig.subfigures(rows, cols, squeeze=False).ravel())
    for k, sub in enumerate(subs):
        if k >= len(envs):
            continue
        env = envs[k]
        ref = data.references[env]
        curves = data.env_curves[env]
        ax, strip = sub.subplots(1, 2, sharey=True, width_ratios=(4, 1.1))
        values = [ref.random_low, ref.random_high, ref.reference]
        for a in data.agents:
            c = curves[a]
            ax.fill_between(c.x, c.low, c.high, color=colours[a], alpha=BAND_ALPHA, lw=0)
            ax.plot(c.x, c.point, color=colours[a], lw=1.8, gid=f"curve:{env}:{a}")
            values += [*c.low, *c.high]
        values += [data.run_scores[r.run_id][0] for r in data.runs if r.env_key == env]
        lim = limits_with(values, (ref.random_low, ref.random_high, ref.reference))
        for axis in (ax, strip):
            level_lines(axis, ref.random, ref.reference, (ref.random_low, ref.random_high))
            axis.grid(axis="y", **GRID)
        ax.set_ylim(*lim)
        x = next(iter(curves.values())).x
        ax.set_xlim(float(x[0]), float(x[-1]) if x[-1] > x[0] else float(x[0]) + 1)
        steps_axis(ax, True)
        _final_strip(strip, data, env, colours, lim, 2.0)
        ax.set_title(env, loc="left")
        ax.set_xlabel("env steps")
        ax.set_ylabel("return (IQM over seeds)")
    conf = text.ci_label(data.options["confidence"])
    handles = [Line2D([], [], color=colours[a], lw=2, label=a) for a in data.agents]
    handles += [Patch(facecolor="#777777", alpha=BAND_ALPHA,
                      label=f"band: {conf} of the IQM over seeds"),
                Patch(facecolor=RANDOM_GREY, alpha=0.22, edgecolor=RANDOM_GREY,
                      label=f"random agent, {conf}"),
                Line2D([], [], color=REFERENCE_INK, lw=1.1, ls=(0, (5, 3)), label="reference")]
    legend_below(fig, handles, ncols=min(len(handles), 4))
    return fig
