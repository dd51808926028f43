"""Words and numbers shared by the page and the terminal, so both say the same thing the same
way: intervals, the random score (one number wherever it appears), notes on zero-width
intervals and on what 0 and 1 mean, the next steps after a report, timing labels."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from seedsweep.runner.analysis import stats
from seedsweep.runner.analysis.coverage import coverage_note
from seedsweep.runner.analysis.tuning import budget_text

SCALE_NOTE = "normalised scores: 0 = the random agent, 1 = the reference score of each env"
GAP_NOTE = "optimality gap: mean shortfall below the reference; lower is better"
SOURCES = {"env_spec": "gymnasium spec reward_threshold", "oracle": "exact oracle optimum",
           "user": "env.reference (set by you)"}
STAT_LABELS = {"iqm": "IQM", "mean": "mean", "median": "median",
               "optimality_gap": "optimality gap"}
VERDICT_SIGNS = {"better": "▲", "worse": "▼", "insufficient evidence": "≈",
                 "cannot decide": "?"}

TIMING_LABELS = {
    "aggregates_s": "aggregates, probabilities of improvement, profiles",
    "sample_efficiency_s": "score-over-training curves",
    "per_env_s": "per-env scores and curves",
    "figures_s": "figures",
}
TIMING_COUNTS = {"n_scores": "run scores used"}


def ci_label(confidence: float) -> str:
    """``95% CI``: never a bare "CI"."""
    return f"{confidence:.0%} CI"


def interval(iv: stats.Interval | Mapping[str, float], digits: int = 3) -> str:
    """``0.528 [0.101, 0.657]`` for normalised numbers (fixed decimals)."""
    point, low, high = _parts(iv)
    return f"{point:.{digits}f} [{low:.{digits}f}, {high:.{digits}f}]"


def raw_interval(iv: stats.Interval | Mapping[str, float]) -> str:
    """Raw returns have any scale: 4 significant digits."""
    point, low, high = _parts(iv)
    return f"{point:.4g} [{low:.4g}, {high:.4g}]"


def _parts(iv: stats.Interval | Mapping[str, float]) -> tuple[float, float, float]:
    if isinstance(iv, Mapping):
        return float(iv["point"]), float(iv["low"]), float(iv["high"])
    return iv.point, iv.low, iv.high


def zero_width(iv: stats.Interval | Mapping[str, float]) -> bool:
    """An interval of one value: the runs resampled gave no spread at all."""
    _, low, high = _parts(iv)
    return low == high


def no_spread_note(n_runs: int, n_envs: int) -> str:
    """What a zero-width interval means: agreement between few runs, not certainty."""
    where = " on each env" if n_envs > 1 else ""
    return f"all {n_runs} runs scored the same{where}: no spread, not certainty"


ZERO_WIDTH_NOTE = ("zero-width interval: every resample gave the same value; with few runs "
                   "that is agreement between them, not certainty")


def random_score(ref: Any) -> str:
    """The random score of an env as every table shows it: the mean return over the random
    agent's evaluation episodes with its Student-t interval (the number scores are
    normalised with)."""
    return f"{ref.random:.4g} [{ref.random_low:.4g}, {ref.random_high:.4g}]"


def median_note(n_envs: int) -> str | None:
    """Why the median is not shown: with one or two envs it is the mean of the per-env
    means, so it would repeat the mean column."""
    if n_envs > 2:
        return None
    return (f"median not shown: with {n_envs} env{'s' if n_envs > 1 else ''} the median of "
            "the per-env means equals their mean")


def shown_statistics(n_envs: int) -> tuple[str, ...]:
    return tuple(s for s in stats.STATISTICS if not (s == "median" and n_envs <= 2))


def coverage_line(seeds_per_env: int, envs: int) -> str | None:
    """The measured coverage of the intervals at this design (None when not available)."""
    return coverage_note(seeds_per_env, envs)


def tuning_line(tuning: Any) -> str:
    """``tuned: T trials × S steps × E envs × K seeds (study ...)`` or ``not tuned``."""
    return budget_text(tuning if isinstance(tuning, Mapping) else None)


def timing_rows(timing: Mapping[str, Any]) -> list[tuple[str, str]]:
    """(what, value) rows with words for the report's timing keys."""
    rows = []
    for key, value in timing.items():
        if key in TIMING_COUNTS:
            rows.append((TIMING_COUNTS[key], f"{value}"))
        elif key.endswith("_s"):
            label = TIMING_LABELS.get(key, key[:-2].replace("_", " "))
            rows.append((f"{label} (s)", f"{float(value):.3f}"))
        else:
            rows.append((key.replace("_", " "), f"{value}"))
    return rows


def next_steps(sweep: str, page: str, candidate: str | None,
               agents: list[str], comparisons: list[dict[str, Any]] | None) -> list[str]:
    """What to do after a report, as commands to type."""
    out = [f"open the page: {page}"]
    if candidate is None:
        name = agents[0] if agents else "NAME"
        out.append(f"compare a candidate with the baselines: seedsweep report {sweep} "
                   f"--candidate {shell_word(name)}")
        return out
    undecided = [c["baseline"] for c in comparisons or []
                 if c["verdict"] not in ("better", "worse")]
    if undecided:
        cand, base = shell_word(candidate), shell_word(undecided[0])
        more = f" (likewise for {', '.join(undecided[1:])})" if len(undecided) > 1 else ""
        out.append(f"plan the seeds a decisive answer needs: seedsweep plan-seeds {sweep} "
                   f"--candidate {cand} --baseline {base} --difference D{more}, D being the "
                   "smallest difference in score that matters to you")
    return out


def shell_word(name: str) -> str:
    """A name as a shell word (labels with hyperparameters contain brackets)."""
    return name if name.replace("_", "").replace("-", "").replace(".", "").isalnum() \
        else "'" + name.replace("'", "'\\''") + "'"
