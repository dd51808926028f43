"""The verdict of a candidate against its baselines: a calibrated rule.

Rule (:data:`VERDICT_RULE`): "better" only when the stratified permutation test
(:mod:`runner.analysis.permutation`) rejects "same score distribution in every env" at alpha
(two-sided p <= alpha; Holm-adjusted over the baselines when there are several,
:mod:`runner.analysis.multiple`) with the stratified P(candidate > baseline) above 1/2, AND
the stratified bootstrap interval of the IQM difference (candidate - baseline, level
1 - alpha, BCa by default, :mod:`runner.analysis.intervals`) lies entirely above 0. "worse"
is the mirror image; anything else is "insufficient evidence".

Why this shape: the permutation test is what keeps false verdicts at or below alpha at any
seed count (the bootstrap intervals alone do not: at 2 seeds they fired a third of the time
on identical agents). The interval condition can only remove verdicts, so the false-verdict
rate stays <= alpha; it makes sure the effect a reader sees (the IQM difference) points the
same way as the ranks, so a candidate that wins most pairs but loses on the IQM is not
called better.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from seedsweep.runner.analysis import intervals, multiple, permutation
from seedsweep.runner.analysis.intervals import EffectInterval, Strata
from seedsweep.runner.analysis.permutation import PermutationResult

VERDICTS = ("better", "worse", "insufficient evidence", "cannot decide")
VERDICT_RULE = (
    "better: the stratified permutation test of P(candidate > baseline) (labels permuted "
    "within each env; two-sided; Holm-adjusted over the baselines) gives p <= alpha with "
    "P > 0.5, AND the stratified bootstrap interval of the IQM difference (candidate - "
    "baseline, level 1 - alpha) lies entirely above 0 (low > 0); worse: p <= alpha with "
    "P < 0.5 AND that interval lies entirely below 0 (high < 0); cannot decide: the seed "
    "counts are too small for any data to give p <= alpha (after Holm's adjustment); "
    "otherwise insufficient evidence."
)


@dataclass(frozen=True)
class Verdict:
    """One candidate-baseline verdict with everything it rests on.

    ``p_adjusted``: the p-value the rule used (Holm-adjusted in a family, else the test's);
    ``decisive_seeds``: seeds per agent per env with which this number of envs could give
    p <= alpha at all (when the design is below it, no data can give a verdict)."""

    verdict: str
    reason: str
    test: PermutationResult
    p_adjusted: float
    iqm_difference: EffectInterval
    alpha: float
    decisive_seeds: int

    def as_dict(self) -> dict:
        return {"verdict": self.verdict, "reason": self.reason, "test": self.test.as_dict(),
                "p_adjusted": self.p_adjusted, "iqm_difference": self.iqm_difference.as_dict(),
                "alpha": self.alpha, "decisive_seeds": self.decisive_seeds}


def verdict_codes(p: np.ndarray, statistic: np.ndarray, diff_low: np.ndarray,
                  diff_high: np.ndarray, alpha: float) -> np.ndarray:
    """The rule on arrays: +1 better, -1 worse, 0 insufficient evidence."""
    reject = np.asarray(p) <= alpha
    better = reject & (np.asarray(statistic) > 0.5) & (np.asarray(diff_low) > 0.0)
    worse = reject & (np.asarray(statistic) < 0.5) & (np.asarray(diff_high) < 0.0)
    return better.astype(int) - worse.astype(int)


def _reason(code: int, test: PermutationResult, p_used: float, diff: EffectInterval,
            alpha: float, decisive: int, adjusted: bool) -> str:
    p_text = f"p = {p_used:.4g}" + (" (Holm-adjusted)" if adjusted else "")
    d_text = f"the IQM-difference interval [{diff.low:.4g}, {diff.high:.4g}]"
    if code == 1:
        return f"{p_text} <= {alpha} with P(candidate > baseline) = " \
               f"{test.statistic:.3f} > 0.5, and {d_text} lies above 0"
    if code == -1:
        return f"{p_text} <= {alpha} with P(candidate > baseline) = " \
               f"{test.statistic:.3f} < 0.5, and {d_text} lies below 0"
    if test.smallest_p > alpha:
        return (f"{p_text}: with these seed counts the test can never give p <= {alpha} "
                f"(smallest possible p = {test.smallest_p:.4g}); at least {decisive} seeds "
                "per agent per env are needed for any verdict")
    if p_used > alpha:
        same = " (every run scored the same: no spread, which is not proof of equality)" \
            if diff.zero_width else ""
        return f"{p_text} > {alpha}: the runs do not show a difference at this level{same}"
    zero = " (no spread among the runs)" if diff.zero_width else ""
    return f"{p_text} <= {alpha} but {d_text}{zero} does not lie on the same side of 0 " \
           "as the ranks: the two measures disagree"


def _decide(test: PermutationResult, p_used: float, diff: EffectInterval, alpha: float,
            envs: int, adjusted: bool) -> Verdict:
    code = int(verdict_codes(np.array(p_used), np.array(test.statistic),
                             np.array(diff.low), np.array(diff.high), alpha))
    decisive = permutation.seeds_to_reach(alpha, envs)
    word = {1: "better", -1: "worse", 0: "insufficient evidence"}[code]
    return Verdict(word, _reason(code, test, p_used, diff, alpha, decisive, adjusted), test,
                   p_used, diff, alpha, decisive)


def decide(
    x_strata: Strata, y_strata: Strata, rng: np.random.Generator, *, alpha: float = 0.05,
    resamples: int = 2000, method: str = "bca",
    permutations: int = permutation.DEFAULT_PERMUTATIONS,
) -> Verdict:
    """Verdict for one candidate (``x_strata``, per env its run scores) against one baseline
    (``y_strata``, same envs in the same order)."""
    test = permutation.stratified_permutation_test(x_strata, y_strata, rng=rng,
                                                   permutations=permutations)
    diff = intervals.iqm_difference_interval(x_strata, y_strata, resamples, 1.0 - alpha, rng,
                                             method)
    return _decide(test, test.p_value, diff, alpha, len(x_strata), adjusted=False)


def decide_against_baselines(
    x_strata: Strata, baselines: Mapping[str, Strata], rng: np.random.Generator, *,
    alpha: float = 0.05, resamples: int = 2000, method: str = "bca",
    permutations: int = permutation.DEFAULT_PERMUTATIONS,
) -> dict[str, Verdict]:
    """Verdicts for one candidate against several baselines, with Holm's adjustment of the
    permutation p-values so the chance of any false verdict in the family stays <= alpha."""
    names = list(baselines)
    tests = {b: permutation.stratified_permutation_test(x_strata, baselines[b], rng=rng,
                                                        permutations=permutations)
             for b in names}
    adjusted = multiple.holm([tests[b].p_value for b in names], alpha).adjusted
    out = {}
    for b, p_used in zip(names, adjusted, strict=True):
        diff = intervals.iqm_difference_interval(x_strata, baselines[b], resamples,
                                                 1.0 - alpha, rng, method)
        out[b] = _decide(tests[b], float(p_used), diff, alpha, len(x_strata),
                         adjusted=len(names) > 1)
    return out
