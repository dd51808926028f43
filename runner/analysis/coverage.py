"""How well a nominal 95% interval of the IQM really covers at small seed counts, as measured.

A bootstrap interval resamples the runs it has; with two or three seeds per env it cannot
show the spread it never saw, so it is too narrow. ``benchmarks/verdict_calibration.py``
measured the real coverage of the stratified bootstrap interval of the IQM (2,000 repetitions
per cell, seed 0) for normal, lognormal and capped score distributions; this module holds
those measurements so the report and the terminal can say what the shown interval is worth
at the user's seed count. Rerun the benchmark after changing an interval method and update
:data:`MEASURED` with what it prints.
"""

from __future__ import annotations

# (seeds per env, envs) -> measured coverage per distribution (normal, lognormal, capped)
MEASURED: dict[str, dict[tuple[int, int], tuple[float, float, float]]] = {
    "percentile": {
        (2, 1): (0.498, 0.488, 0.500), (3, 1): (0.756, 0.762, 0.743),
        (5, 1): (0.905, 0.897, 0.901), (10, 1): (0.932, 0.933, 0.927),
        (2, 4): (0.723, 0.727, 0.731), (3, 4): (0.851, 0.865, 0.857),
        (5, 4): (0.909, 0.914, 0.900), (10, 4): (0.932, 0.935, 0.943),
    },
    "bca": {
        (2, 1): (0.498, 0.488, 0.500), (3, 1): (0.724, 0.720, 0.727),
        (5, 1): (0.896, 0.892, 0.881), (10, 1): (0.924, 0.931, 0.923),
        (2, 4): (0.715, 0.726, 0.722), (3, 4): (0.846, 0.861, 0.850),
        (5, 4): (0.908, 0.912, 0.895), (10, 4): (0.931, 0.933, 0.943),
    },
}
SEEDS = (2, 3, 5, 10)
SOURCE = "benchmarks/verdict_calibration.py, 2,000 repetitions per cell"


def measured_range(seeds_per_env: int, envs: int, method: str = "percentile"
                   ) -> tuple[float, float, int, int] | None:
    """(lowest, highest coverage, tabulated seeds, tabulated envs) for the nearest measured
    design that is not larger than the user's (so the note never flatters), or None when
    the design is beyond the table (more than 10 seeds per env) or below it (1 seed)."""
    if method not in MEASURED or seeds_per_env > SEEDS[-1] or seeds_per_env < SEEDS[0]:
        return None
    n = max(s for s in SEEDS if s <= seeds_per_env)
    k = 4 if envs >= 4 else 1
    values = MEASURED[method][(n, k)]
    return min(values), max(values), n, k


def coverage_note(seeds_per_env: int, envs: int, method: str = "percentile",
                  confidence: float = 0.95) -> str | None:
    """One sentence on the real coverage of the shown interval at this design, or None."""
    if abs(confidence - 0.95) > 1e-9:
        return None
    found = measured_range(seeds_per_env, envs, method)
    if found is None:
        return None
    low, high, n, k = found
    spread = f"{low:.0%}" if f"{low:.0%}" == f"{high:.0%}" else f"{low:.0%}-{high:.0%}"
    design = f"{n} seeds per env on {k} env{'s' if k > 1 else ''}"
    if (n, k) != (seeds_per_env, envs):
        design += (f" (the nearest measured design at or below yours, {seeds_per_env} seeds "
                   f"per env on {envs} envs)")
    return (f"With {design}, a 95% interval like these covered the true IQM {spread} of the "
            f"time in simulation (normal, lognormal and capped scores; {SOURCE}): read it "
            "as a rough range, not a guarantee.")
