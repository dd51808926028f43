"""The report's figures: their names, what each shows (the page's captions), and saving
each as PNG and SVG bytes without time stamps, so the same report data gives the same files.
"""

from __future__ import annotations

import io
import logging
import warnings
from collections.abc import Callable
from typing import Any

from matplotlib import rc_context
from matplotlib.figure import Figure
from seedsweep.runner.present import text
from seedsweep.runner.present.curve_figures import (
    curves_per_env,
    runs_above_threshold,
    score_over_training,
)
from seedsweep.runner.present.figure_parts import RC
from seedsweep.runner.present.palette import agent_colours
from seedsweep.runner.present.score_figures import agent_scores, head_to_head
from seedsweep.runner.present.sensitivity_figure import sensitivity

logger = logging.getLogger(__name__)

FIGURES: dict[str, Callable[[Any, dict[str, str]], Figure]] = {
    "agent_scores": agent_scores,
    "head_to_head": head_to_head,
    "runs_above_threshold": runs_above_threshold,
    "score_over_training": score_over_training,
    "curves_per_env": curves_per_env,
}


def captions(data: Any) -> dict[str, str]:
    """name -> what the figure shows and what every band and bar in it is."""
    conf = text.ci_label(data.options["confidence"])
    boot = (f"{data.options['resamples']} stratified bootstrap resamples (each env's runs "
            "resampled with replacement)")
    median = text.median_note(len(data.envs))
    out = {
        "agent_scores": (
            "Top: one dot per run, its final normalised score (marker shape = env; dots of "
            "equal score are set side by side, so three seeds show as three dots). Beside "
            f"them the agent's IQM (thick bar and diamond: the {conf} of the IQM across "
            f"seeds, {boot}), mean and median of the per-env means (thin bars: their "
            f"{conf})." + (f" The {median}." if median else "")
            + " Bottom: each run's shortfall below the reference, max(1 - score, 0), and "
            f"the optimality gap with its {conf}; lower is better."),
        "head_to_head": (
            "Each cell: the probability that a run of the row agent scores higher than a "
            "run of the column agent on the same env (ties count one half, averaged over "
            f"envs), with its {conf} ({boot}). Agents are ordered by IQM. Hatched cells: "
            "the interval includes 0.5, so neither agent is shown to be ahead."),
        "runs_above_threshold": (
            "Performance profile per agent: for each normalised score on the x axis, the "
            "share of the agent's runs scoring above it (per env, averaged over envs). "
            f"Shaded band: its {conf} ({boot}). Thin grey lines: the other agents. Dots "
            "under the curve: one per run, at its score."),
        "score_over_training": (
            "IQM of the normalised scores of all runs and envs at each evaluation; x axis: "
            f"{data.efficiency_x}. Shaded band: the {conf} of that IQM ({boot})."),
        "curves_per_env": (
            "Per env: the IQM over seeds of the evaluation return at each evaluation; "
            f"shaded band: its {conf} (the seeds resampled with replacement). Grey line "
            f"and band: the random agent's score and its {conf} (Student-t over its "
            "evaluation episodes); dashed: the reference score. Right of each panel: every "
            "run's score as a dot, one column per agent in the legend's order."),
    }
    if getattr(data, "sensitivity", None):
        out["sensitivity"] = (
            "Per agent and swept key: the IQM of the normalised scores of the runs at each "
            f"value (black tick) with its {conf} (shaded bar, {boot}), and every run's score "
            "as a dot; a log axis for numeric keys spanning a factor of 10 or more. "
            "Tuning trials vary every searched key at once: those panels are marginal.")
    return out


def _save(fig: Figure) -> tuple[bytes, bytes]:
    png, svg = io.BytesIO(), io.BytesIO()
    fig.savefig(png, format="png", dpi=110, bbox_inches="tight", metadata={"Software": None})
    fig.savefig(svg, format="svg", bbox_inches="tight", metadata={"Date": None})
    return png.getvalue(), svg.getvalue()


def colours_of(data: Any) -> dict[str, str]:
    """The agents' colours for this report (see :mod:`.palette`)."""
    return agent_colours(data.shown, data.floor_labels)


def all_figures(data: Any) -> dict[str, tuple[bytes, bytes]]:
    """name -> (png, svg) for every report figure."""
    colours = colours_of(data)
    builders = dict(FIGURES)
    if getattr(data, "sensitivity", None):
        builders["sensitivity"] = sensitivity
    out = {}
    with rc_context(RC):
        for name, build in builders.items():
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                out[name] = _save(build(data, colours))
            for text in dict.fromkeys(str(w.message).splitlines()[0] for w in caught):
                logger.warning("figure %s: %s", name, text)  # one line, not matplotlib's
    return out
