"""How long a list of runs takes on a few workers, run in order as the local launcher does.

The launcher starts runs in the planned order, each on the first worker to become free; the
same rule, applied to estimated costs, gives a sweep's wall time before launch and, with
what is left of the running runs, its live ETA.
"""

from __future__ import annotations

import heapq
from collections.abc import Sequence


def makespan(costs: Sequence[float], workers: int, busy: Sequence[float] = ()) -> float:
    """Seconds until the last of ``costs`` ends, started in order on ``workers`` workers of
    which ``busy`` ones are still busy for the given seconds."""
    lanes = [max(0.0, float(b)) for b in busy][:max(1, workers)]
    lanes += [0.0] * (max(1, workers) - len(lanes))
    heapq.heapify(lanes)
    for cost in costs:
        heapq.heappush(lanes, heapq.heappop(lanes) + max(0.0, float(cost)))
    return max(lanes)
