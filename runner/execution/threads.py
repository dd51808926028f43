"""How many threads a run computes with: torch's intra-op pool and the BLAS pool numpy uses.

Both are set from the run's ``torch_threads``. numpy's BLAS (OpenBLAS) otherwise starts one
thread per core for matrix products above a size threshold: an agent whose numpy network
crosses it (a DQN batch of 128, say) then runs two busy threads per process, and two such
runs on a 2-core machine took 258 s per 100k-step run instead of 48 s (at times 42 env
steps/s) in our measurements. One thread per run also fixes the order of summation in those
products, so results do not depend on the pool size.
"""

from __future__ import annotations

import torch
from threadpoolctl import threadpool_limits


def set_compute_threads(n: int) -> None:
    """Use ``n`` threads for torch's intra-op work and for numpy's BLAS in this process."""
    torch.set_num_threads(n)
    threadpool_limits(limits=n, user_api="blas")
