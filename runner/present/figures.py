"""Report figures (matplotlib, Agg backend): each figure as PNG and SVG bytes.

Figures are built on ``matplotlib.figure.Figure`` objects, never pyplot's global state, and
saved without timestamps so the same report data gives the same files.
"""

from __future__ import annotations

import io
import math
from typing import Any

import matplotlib

matplotlib.use("Agg")

from matplotlib import (
    colormaps,
    rc_context,  # noqa: E402
)
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import NullFormatter  # noqa: E402
from seedsweep.runner.analysis.stats import STATISTICS  # noqa: E402

STAT_TITLES = {"iqm": "IQM", "mean": "Mean", "median": "Median",
               "optimality_gap": "Optimality gap"}
RC = {"svg.hashsalt": "seedsweep", "font.size": 9, "axes.spines.top": False,
      "axes.spines.right": False}


def _colors(names: list[str]) -> dict[str, Any]:
    cmap = colormaps["tab10"]
    return {n: cmap(i % 10) for i, n in enumerate(names)}


def _save(fig: Figure) -> tuple[bytes, bytes]:
    png, svg = io.BytesIO(), io.BytesIO()
    with rc_context(RC):
        fig.savefig(png, format="png", dpi=110, bbox_inches="tight",
                    metadata={"Software": None})
        fig.savefig(svg, format="svg", bbox_inches="tight", metadata={"Date": None})
    return png.getvalue(), svg.getvalue()


def aggregate_intervals(data: Any, colors: dict) -> Figure:
    agents = data.agents
    fig = Figure(figsize=(11, 0.5 + 0.45 * len(agents) + 0.6), layout="constrained")
    axes = fig.subplots(1, len(STATISTICS), sharey=True)
    for ax, stat in zip(axes, STATISTICS, strict=True):
        for i, a in enumerate(agents):
            iv = data.aggregates[a][stat]
            ax.plot([iv.low, iv.high], [i, i], color=colors[a], lw=6, alpha=0.6,
                    solid_capstyle="butt")
            ax.plot([iv.point], [i], marker="|", color="black", ms=12)
        ax.set_title(STAT_TITLES[stat])
        ax.set_yticks(range(len(agents)), agents)
        ax.grid(axis="x", alpha=0.3)
        ax.set_ylim(len(agents) - 0.3, -0.7)  # first agent on top
    fig.supxlabel("normalised score (optimality gap: lower is better)")
    return fig


def improvement(data: Any, colors: dict) -> Figure:
    pairs = data.improvement
    fig = Figure(figsize=(6, 0.6 + 0.4 * max(len(pairs), 1)), layout="constrained")
    ax = fig.subplots()
    for i, p in enumerate(pairs):
        ax.plot([p["low"], p["high"]], [i, i], color=colors[p["x"]], lw=6, alpha=0.6,
                solid_capstyle="butt")
        ax.plot([p["point"]], [i], marker="|", color="black", ms=12)
    ax.set_yticks(range(len(pairs)), [f"P({p['x']} > {p['y']})" for p in pairs])
    ax.axvline(0.5, color="grey", ls="--", lw=1)
    ax.set_xlim(0, 1)
    ax.set_ylim(len(pairs) - 0.5, -0.5)
    ax.set_xlabel("probability of improvement")
    if not pairs:
        ax.text(0.5, 0.5, "one agent: no pairs", ha="center", transform=ax.transAxes)
    return fig


def _bands(ax: Any, curves: dict, colors: dict) -> None:
    for a, c in curves.items():
        ax.plot(c.x, c.point, color=colors[a], label=a)
        ax.fill_between(c.x, c.low, c.high, color=colors[a], alpha=0.2, lw=0)


def profiles(data: Any, colors: dict) -> Figure:
    fig = Figure(figsize=(6, 4), layout="constrained")
    ax = fig.subplots()
    _bands(ax, data.profiles, colors)
    ax.set_xlabel("normalised score threshold tau")
    ax.set_ylabel("fraction of runs with score > tau")
    ax.set_ylim(-0.02, 1.02)
    ax.grid(alpha=0.3)
    ax.legend(frameon=False)
    return fig


def efficiency(data: Any, colors: dict) -> Figure:
    fig = Figure(figsize=(6, 4), layout="constrained")
    ax = fig.subplots()
    _bands(ax, data.efficiency, colors)
    ax.set_xlabel(data.efficiency_x)
    ax.set_ylabel("IQM normalised score")
    ax.grid(alpha=0.3)
    ax.legend(frameon=False)
    return fig


def learning_curves(data: Any, colors: dict) -> Figure:
    envs = data.envs
    cols = min(3, len(envs))
    rows = math.ceil(len(envs) / cols)
    fig = Figure(figsize=(4.2 * cols, 3.2 * rows), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k >= len(envs):
            ax.set_visible(False)
            continue
        env = envs[k]
        ref = data.references[env]
        curves = data.env_curves[env]
        _bands(ax, curves, colors)
        x = next(iter(curves.values())).x
        ax.axhspan(ref.random_low, ref.random_high, color="grey", alpha=0.25, lw=0)
        ax.axhline(ref.random, color="grey", lw=1, label="random")
        ax.axhline(ref.reference, color="black", ls="--", lw=1, label=f"reference ({ref.source})")
        ax.set_xlim(float(x[0]), float(x[-1]) if x[-1] > x[0] else float(x[0]) + 1)
        ax.set_title(env)
        ax.set_xlabel("env steps")
        ax.set_ylabel("IQM return")
        ax.grid(alpha=0.3)
        if k == 0:
            ax.legend(frameon=False, fontsize=7)
    return fig


def sensitivity(data: Any, colors: dict) -> Figure:
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
        color = colors.get(t.agent) or next((c for a, c in colors.items()
                                            if a.split("[")[0] == t.agent), "C0")
        x = [float(r.value) for r in t.rows] if t.numeric else list(range(len(t.rows)))
        for xi, r in zip(x, t.rows, strict=True):
            ax.plot([xi, xi], [r.iqm.low, r.iqm.high], color=color, lw=8, alpha=0.3,
                    solid_capstyle="butt", zorder=1)
            ax.plot([xi] * len(r.scores), r.scores, "o", color=color, mec="black", mew=0.4,
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


FIGURES = {
    "aggregate_intervals": aggregate_intervals,
    "probability_of_improvement": improvement,
    "performance_profiles": profiles,
    "sample_efficiency": efficiency,
    "learning_curves": learning_curves,
}


def all_figures(data: Any) -> dict[str, tuple[bytes, bytes]]:
    """name -> (png, svg) for every report figure."""
    colors = _colors(data.shown)
    out = {}
    with rc_context(RC):
        for name, build in FIGURES.items():
            out[name] = _save(build(data, colors))
        if getattr(data, "sensitivity", None):
            out["sensitivity"] = _save(sensitivity(data, colors))
    return out
